//! Shape through time and on a phylogeny: ages and time bins, disparity through time, trees
//! (Newick), rates of shape evolution (σ²mult), phylogenetic signal (Kmult), the comparison of
//! Brownian motion, early burst and Ornstein–Uhlenbeck models on all shape dimensions, and
//! ancestral shapes.
//!
//! Everything here works on plain numbers: a matrix of superimposed (tangent) coordinates, one
//! row per specimen or taxon, a [`Tree`], ages. The `analysis` module matches specimens to tips
//! and ages and writes the tables and figures; this module must not import `volume`, `io`,
//! `render`, `landmarks` or any front end.
//!
//! Submodules: [`tree`] (the tree, its Newick reader and writer, shared times, pruning),
//! [`gls`] (independent contrasts, tree covariances under BM/EB/OU, GLS), [`rates`] (σ²mult and
//! its comparison between groups, Kmult), [`models`] (the pairwise composite likelihood fits),
//! [`ancestral`] (GLS ancestral shapes), [`time`] (ages, bins, disparity through time),
//! [`simulate`] (Brownian motion on a tree, for the tests of significance and the synthetic
//! sample).
//!
//! Conventions: time runs from the root (0) to the tips; ages are in millions of years before
//! present (Ma), larger = older. A tree's branch lengths are in the units its file gives (for
//! rates, usually millions of years). Data rows follow [`Tree::tips`] order.

pub mod ancestral;
pub mod gls;
pub mod models;
pub mod rates;
pub mod simulate;
pub mod time;
pub mod tree;

pub use tree::Tree;

use thiserror::Error;

/// Failures of the comparative and through-time methods.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum EvolutionError {
    /// A Newick text could not be read; `line` and `column` are 1-based.
    #[error("{source_name}: line {line}, column {column}: {message}")]
    Newick {
        source_name: String,
        line: usize,
        column: usize,
        message: String,
    },
    /// The tree does not suit the method (missing or negative branch lengths, duplicate or
    /// empty tip labels, too few tips, identical tips…).
    #[error("tree: {0}")]
    Tree(String),
    /// The data do not suit the method (wrong shape, non-finite values, too few rows…).
    #[error("{0}")]
    Data(String),
    /// An option value is invalid.
    #[error("invalid option: {0}")]
    Option(String),
    /// A decomposition failed (a covariance matrix that is not positive definite).
    #[error("{0}")]
    Numerical(String),
}

pub(crate) fn data_err(msg: impl Into<String>) -> EvolutionError {
    EvolutionError::Data(msg.into())
}

pub(crate) fn tree_err(msg: impl Into<String>) -> EvolutionError {
    EvolutionError::Tree(msg.into())
}

/// Quantile with linear interpolation between order statistics (Hyndman & Fan 1996, type 7,
/// numpy's default) of an ascending slice; `NaN` when empty.
#[must_use]
pub fn quantile(sorted: &[f64], q: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let h = (sorted.len() - 1) as f64 * q;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// A generator for resample `stream` of a run seeded by `seed`: results do not depend on the
/// thread count.
pub(crate) fn rng_for(seed: u64, stream: u64) -> rand_chacha::ChaCha8Rng {
    use rand::SeedableRng;
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(stream);
    rng
}
