//! Sutura: measuring fossil specimens in CT scans on the CPU.
//!
//! The library holds all the science; the `sutura` binary's command line ([`cli`]) and the
//! workstation GUI are front ends over it. Dependencies point one way:
//! `geometry`, `volume` → `io` → `render`, `landmarks`, `measure`, `shape` → `cli`, `gui`.

pub mod analysis;
pub mod chart;
pub mod cli;
pub mod export;
pub mod geometry;
pub mod gui;
pub mod io;
pub mod landmarks;
pub mod measure;
pub mod render;
pub mod shape;
pub mod synth;
pub mod volume;
