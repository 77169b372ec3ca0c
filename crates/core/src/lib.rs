//! Sutura's core library: measuring fossil specimens in CT scans on the CPU.
//!
//! Every rule and every number lives here; the `sutura` crate's command line and workstation
//! window are front ends over it, and this crate depends on no GUI toolkit. Dependencies point
//! one way: `geometry`, `volume` → `io` → `render`, `landmarks`, `measure`, `shape` →
//! `analysis`, `chart`, `export`.

pub mod analysis;
pub mod chart;
pub mod evolution;
pub mod export;
pub mod geometry;
pub mod io;
pub mod labels;
pub mod landmarks;
pub mod measure;
pub mod mesh;
pub mod message;
pub mod render;
pub mod shape;
pub mod store;
pub mod synth;
pub mod volume;
