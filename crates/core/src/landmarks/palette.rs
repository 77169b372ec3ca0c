//! The colours of landmark states and of curves, in sRGB: one palette for the workstation's
//! marks and checklist and for the PLY point sets, so a point reads the same everywhere.

/// A placed landmark: green.
pub const PLACED: [u8; 3] = [108, 214, 134];
/// An estimated landmark (from its partner, or filled in by the analysis): amber.
pub const ESTIMATED: [u8; 3] = [236, 190, 84];
/// A landmark marked missing: red.
pub const MISSING: [u8; 3] = [232, 104, 92];
/// Not digitised yet: grey.
pub const OPEN: [u8; 3] = [150, 150, 150];
/// Curves: traced points and semilandmarks: sky blue.
pub const CURVE: [u8; 3] = [120, 200, 236];
/// The current landmark's highlight: pale yellow.
pub const CURRENT: [u8; 3] = [255, 236, 120];
