//! Intensity statistics.
pub struct Stats;
pub struct Histogram;
