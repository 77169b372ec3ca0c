//! Landmarks: landmark schemes, the project document, surface picking.
//!
//! - [`pick`]: finding the material boundary along a ray (3D view) or from a point on a slice,
//!   at sub-voxel precision, and the ISO-50 default threshold.
//!
//! Must not import `gui`.

pub mod pick;
