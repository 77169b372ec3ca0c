//! Brownian motion simulated down a tree: each node's value is its parent's plus an
//! independent normal step with variance `length · σ²` per column. Early burst is Brownian
//! motion on branch lengths transformed by [`early_burst_lengths`].
//!
//! Used for the simulation-based p-values of [`super::rates`] (columns in the eigenbasis of the
//! rate matrix, scaled by the square roots of its eigenvalues) and by the synthetic comparative
//! sample.

use nalgebra::DMatrix;
use rand::Rng;
use rand_distr::StandardNormal;

use super::Tree;

/// A reusable plan: nodes in preorder with their parent and branch standard deviation factor.
#[derive(Debug, Clone)]
pub struct BrownianPlan {
    /// (slot, parent slot, √length) in preorder, root excluded.
    steps: Vec<(usize, usize, f64)>,
    tip_slots: Vec<usize>,
    slots: usize,
}

impl BrownianPlan {
    /// Plans a simulation on `tree` with `lengths[node]`.
    #[must_use]
    pub fn new(tree: &Tree, lengths: &[f64]) -> Self {
        let order = tree.preorder();
        let mut slot = vec![0usize; tree.nodes().len()];
        for (s, &i) in order.iter().enumerate() {
            slot[i] = s;
        }
        let steps = order
            .iter()
            .filter_map(|&i| {
                tree.nodes()[i]
                    .parent
                    .map(|p| (slot[i], slot[p], lengths[i].max(0.0).sqrt()))
            })
            .collect();
        Self {
            steps,
            tip_slots: tree.tips().iter().map(|&t| slot[t]).collect(),
            slots: order.len(),
        }
    }

    /// Simulates tip values (`n_tips × sd.len()`, row-major in `out`), root at 0, column `j`
    /// with rate `sd[j]²`. `work` is scratch space.
    pub fn run(&self, sd: &[f64], rng: &mut impl Rng, work: &mut Vec<f64>, out: &mut Vec<f64>) {
        let q = sd.len();
        work.clear();
        work.resize(self.slots * q, 0.0);
        for &(s, p, f) in &self.steps {
            for j in 0..q {
                let z: f64 = rng.sample(StandardNormal);
                work[s * q + j] = work[p * q + j] + f * sd[j] * z;
            }
        }
        out.clear();
        for &s in &self.tip_slots {
            out.extend_from_slice(&work[s * q..(s + 1) * q]);
        }
    }

    /// Number of tips.
    #[must_use]
    pub fn n_tips(&self) -> usize {
        self.tip_slots.len()
    }
}

/// Tip values under Brownian motion with `rate_factor` (`p × p`, `R = FᵀF`): independent unit
/// steps per column, multiplied by `F` on the right, plus `root`.
pub fn brownian(
    tree: &Tree,
    lengths: &[f64],
    root: &[f64],
    rate_factor: &DMatrix<f64>,
    rng: &mut impl Rng,
) -> DMatrix<f64> {
    let p = root.len();
    let plan = BrownianPlan::new(tree, lengths);
    let (mut work, mut out) = (Vec::new(), Vec::new());
    plan.run(&vec![1.0; p], rng, &mut work, &mut out);
    let z = DMatrix::from_row_slice(plan.n_tips(), p, &out);
    let mut y = z * rate_factor;
    for mut row in y.row_iter_mut() {
        for (v, r) in row.iter_mut().zip(root) {
            *v += r;
        }
    }
    y
}

/// Branch lengths under early burst with rate change `r`: a branch from time `t₁` to `t₂`
/// after the root gets `(e^{r t₂} − e^{r t₁})/r` (Harmon et al. 2010), so Brownian motion on
/// them has the early-burst covariance.
#[must_use]
pub fn early_burst_lengths(tree: &Tree, r: f64) -> Vec<f64> {
    let depth = tree.depths();
    let len = tree.lengths();
    (0..tree.nodes().len())
        .map(|i| {
            if r == 0.0 {
                len[i]
            } else {
                let (t1, t2) = (depth[i] - len[i], depth[i]);
                ((r * t2).exp() - (r * t1).exp()) / r
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::evolution::gls::Covariance;

    /// The empirical covariance of simulated tips approaches `C` (here with early-burst
    /// lengths against the early-burst covariance formula).
    #[test]
    fn simulated_covariance_matches_the_model() {
        let t = Tree::parse("((A:1,B:1):1,(C:0.5,D:1.5):0.5);", "t").unwrap();
        let r = -0.7;
        let plan = BrownianPlan::new(&t, &early_burst_lengths(&t, r));
        let mut rng = crate::evolution::rng_for(7, 0);
        let (mut work, mut out) = (Vec::new(), Vec::new());
        let reps = 200_000;
        let mut acc = DMatrix::<f64>::zeros(4, 4);
        for _ in 0..reps {
            plan.run(&[1.0], &mut rng, &mut work, &mut out);
            for i in 0..4 {
                for j in 0..4 {
                    acc[(i, j)] += out[i] * out[j];
                }
            }
        }
        acc /= f64::from(reps);
        let times = crate::evolution::gls::TreeTimes::new(&t);
        let c = Covariance::EarlyBurst { r }.matrix(&times);
        for (a, b) in acc.iter().zip(c.iter()) {
            assert!((a - b).abs() < 0.02, "{acc} vs {c}");
        }
    }
}
