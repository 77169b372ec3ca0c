//! Shape statistics (placeholder until the GPA half lands from branch `shape`).

pub mod tps;
