//! Generalized least squares on a tree: independent contrasts, tree covariances under Brownian
//! motion, early burst and Ornstein–Uhlenbeck, and the GLS root state.
//!
//! **Independent contrasts** (Felsenstein 1985, *Am. Nat.* 125:1–15): in postorder, two
//! children with values `xᵢ, xⱼ` and extended branch variances `vᵢ, vⱼ` give the standardised
//! contrast `(xᵢ − xⱼ)/√(vᵢ + vⱼ)`, the parent the weighted value
//! `(xᵢ/vᵢ + xⱼ/vⱼ)/(1/vᵢ + 1/vⱼ)` and its branch the extra variance `vᵢvⱼ/(vᵢ + vⱼ)`. A
//! polytomy is resolved into a comb of zero-length branches, which leaves the covariance matrix
//! unchanged. The sum of the outer products of the standardised contrasts equals the GLS form
//! `(Y − 1â)ᵀ C⁻¹ (Y − 1â)`, the value at the root is the GLS estimate `â = (1ᵀC⁻¹1)⁻¹ 1ᵀC⁻¹Y`,
//! and `log |C| = Σ log(vᵢ + vⱼ) + log v_root` (the transform from tips to contrasts and root
//! has unit Jacobian; `FitzJohn` 2012, *Methods Ecol. Evol.* 3:1084, from memory). All of it in
//! `O(n·p)`: the simulations and permutations of `rates` run on it.
//!
//! **Covariances** for the model fits, from the shared times `s_ij` (root to the most recent
//! common ancestor) and root-to-tip times `Tᵢ`, for a unit rate:
//! - Brownian motion: `C_ij = s_ij`.
//! - Early burst, rate `σ² e^{r t}` with `r ≤ 0` (Harmon et al. 2010, *Evolution*
//!   64:2385–2396): `C_ij = ∫₀^{s_ij} e^{r t} dt = (e^{r s_ij} − 1)/r`.
//! - Ornstein–Uhlenbeck with one optimum, the root state at the optimum (Hansen 1997,
//!   *Evolution* 51:1341–1351; Butler & King 2004, *Am. Nat.* 164:683–695):
//!   `C_ij = e^{−α(Tᵢ + Tⱼ − 2s_ij)} (1 − e^{−2α s_ij}) / (2α)`. It holds on trees that are not
//!   ultrametric too, with a common expected value (the optimum).
//!
//! Each tends to Brownian motion as `r → 0` or `α → 0`; `expm1` keeps the small-parameter
//! values exact.

use nalgebra::{DMatrix, DVector};

use super::{EvolutionError, Tree, tree_err};

/// A postorder plan of independent contrasts over a tree with fixed branch lengths.
#[derive(Debug, Clone)]
pub struct ContrastPlan {
    /// Per internal node in postorder: its slot, its children's slots, its branch length.
    steps: Vec<(usize, Vec<usize>, f64)>,
    /// Slot of each tip (tip order).
    tip_slot: Vec<usize>,
    /// Branch length of each tip (tip order).
    tip_length: Vec<f64>,
    root_slot: usize,
    slots: usize,
}

/// The outcome of contrasts over one data matrix.
#[derive(Debug, Clone)]
pub struct ContrastSums {
    /// `tr((Y − 1â)ᵀ C⁻¹ (Y − 1â))`: the summed squared standardised contrasts.
    pub trace: f64,
    /// The GLS root state `â` (one value per column).
    pub root: Vec<f64>,
    /// `1 / (1ᵀC⁻¹1)`, the variance of the root estimate for a unit rate.
    pub root_variance: f64,
    /// `log |C|`.
    pub log_det: f64,
}

impl ContrastPlan {
    /// Plans contrasts over `tree` with `lengths[node]` (e.g. [`Tree::lengths`]).
    #[must_use]
    pub fn new(tree: &Tree, lengths: &[f64]) -> Self {
        let nodes = tree.nodes();
        let mut slot = vec![usize::MAX; nodes.len()];
        for (s, i) in tree.preorder().into_iter().enumerate() {
            slot[i] = s;
        }
        let steps = tree
            .postorder()
            .into_iter()
            .filter(|&i| !nodes[i].children.is_empty())
            .map(|i| {
                (
                    slot[i],
                    nodes[i].children.iter().map(|&c| slot[c]).collect(),
                    if i == tree.root() { 0.0 } else { lengths[i] },
                )
            })
            .collect();
        Self {
            steps,
            tip_slot: tree.tips().iter().map(|&t| slot[t]).collect(),
            tip_length: tree.tips().iter().map(|&t| lengths[t]).collect(),
            root_slot: slot[tree.root()],
            slots: nodes.len(),
        }
    }

    /// Number of tips.
    #[must_use]
    pub fn n_tips(&self) -> usize {
        self.tip_slot.len()
    }

    /// Runs the contrasts on `p` columns; `row(t)` gives tip `t`'s values (length `p`). `work`
    /// is scratch space reused between calls (resized as needed).
    pub fn run<'a>(
        &self,
        p: usize,
        row: impl Fn(usize) -> &'a [f64],
        work: &mut ContrastWork,
    ) -> Result<ContrastSums, EvolutionError> {
        work.values.resize(self.slots * p, 0.0);
        work.var.resize(self.slots, 0.0);
        work.acc.resize(p, 0.0);
        for (t, &s) in self.tip_slot.iter().enumerate() {
            work.values[s * p..(s + 1) * p].copy_from_slice(row(t));
            work.var[s] = self.tip_length[t];
        }
        let mut trace = 0.0;
        let mut log_det = 0.0;
        for (node, children, length) in &self.steps {
            // fold the children pairwise (a polytomy as a comb of zero-length branches)
            let first = children[0];
            work.acc
                .copy_from_slice(&work.values[first * p..(first + 1) * p]);
            let mut v_acc = work.var[first];
            for &c in &children[1..] {
                let vc = work.var[c];
                let vsum = v_acc + vc;
                if vsum <= 0.0 || !vsum.is_finite() {
                    return Err(tree_err(
                        "two tips (or groups of tips) lie at zero distance from each other: \
                         the tree's covariance matrix is singular",
                    ));
                }
                log_det += vsum.ln();
                let xs = &work.values[c * p..(c + 1) * p];
                let inv = 1.0 / vsum.sqrt();
                let (wa, wc) = (vc / vsum, v_acc / vsum);
                for (a, &x) in work.acc.iter_mut().zip(xs) {
                    let d = (*a - x) * inv;
                    trace += d * d;
                    *a = wa * *a + wc * x;
                }
                v_acc = v_acc * vc / vsum;
            }
            work.values[node * p..(node + 1) * p].copy_from_slice(&work.acc);
            work.var[*node] = v_acc + length;
        }
        let r = self.root_slot;
        let root_variance = work.var[r];
        if root_variance <= 0.0 {
            return Err(tree_err(
                "the tree's covariance matrix is singular (zero-length paths to the root)",
            ));
        }
        log_det += root_variance.ln();
        Ok(ContrastSums {
            trace,
            root: work.values[r * p..(r + 1) * p].to_vec(),
            root_variance,
            log_det,
        })
    }
}

/// Scratch space for [`ContrastPlan::run`].
#[derive(Debug, Clone, Default)]
pub struct ContrastWork {
    values: Vec<f64>,
    var: Vec<f64>,
    acc: Vec<f64>,
}

/// Shared times and root-to-tip times of a tree's tips: what the covariances are built from.
#[derive(Debug, Clone)]
pub struct TreeTimes {
    /// `S[i][j]`: time from the root to the most recent common ancestor of tips `i`, `j`.
    pub shared: DMatrix<f64>,
    /// Root-to-tip time of each tip.
    pub tip: Vec<f64>,
    /// The largest root-to-tip time.
    pub height: f64,
}

impl TreeTimes {
    #[must_use]
    pub fn new(tree: &Tree) -> Self {
        let shared = tree.shared_times();
        let tip: Vec<f64> = (0..tree.n_tips()).map(|i| shared[(i, i)]).collect();
        let height = tip.iter().copied().fold(0.0, f64::max);
        Self {
            shared,
            tip,
            height,
        }
    }
}

/// The evolutionary model of a tree covariance (unit rate).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Covariance {
    Brownian,
    /// Early burst with rate change `r` (≤ 0: decelerating).
    EarlyBurst {
        r: f64,
    },
    /// Ornstein–Uhlenbeck with pull `α ≥ 0`.
    OrnsteinUhlenbeck {
        alpha: f64,
    },
}

impl Covariance {
    /// `C_ij` from the shared time `s` and the two root-to-tip times (module docs).
    #[must_use]
    pub fn entry(self, s: f64, ti: f64, tj: f64) -> f64 {
        match self {
            Self::Brownian => s,
            Self::EarlyBurst { r } => {
                if r == 0.0 {
                    s
                } else {
                    (r * s).exp_m1() / r
                }
            }
            Self::OrnsteinUhlenbeck { alpha } => {
                if alpha == 0.0 {
                    s
                } else {
                    (-alpha * (ti + tj - 2.0 * s)).exp() * -(-2.0 * alpha * s).exp_m1()
                        / (2.0 * alpha)
                }
            }
        }
    }

    /// The `n × n` covariance of the tips.
    #[must_use]
    pub fn matrix(self, times: &TreeTimes) -> DMatrix<f64> {
        let n = times.tip.len();
        DMatrix::from_fn(n, n, |i, j| {
            self.entry(times.shared[(i, j)], times.tip[i], times.tip[j])
        })
    }
}

/// GLS pieces of a data matrix under a covariance `C`: whitened residuals `E = L⁻¹(Y − 1â)`
/// (with `C = LLᵀ`), so that `EᵀE = (Y − 1â)ᵀC⁻¹(Y − 1â)`; the root `â`; `log |C|`.
#[derive(Debug, Clone)]
pub struct Whitened {
    pub residuals: DMatrix<f64>,
    pub root: DVector<f64>,
    pub log_det: f64,
    /// The Cholesky factor `L`.
    pub factor: DMatrix<f64>,
}

/// Whitens `y` (`n × p`) under `c` (`n × n`); fails when `c` is not positive definite.
pub fn whiten(c: DMatrix<f64>, y: &DMatrix<f64>) -> Result<Whitened, EvolutionError> {
    let n = c.nrows();
    let chol = c.cholesky().ok_or_else(|| {
        EvolutionError::Numerical(
            "the tree's covariance matrix is not positive definite (tips at zero distance?)".into(),
        )
    })?;
    let l = chol.l();
    let z = l
        .solve_lower_triangular(y)
        .expect("a Cholesky factor has a non-zero diagonal");
    let u = l
        .solve_lower_triangular(&DVector::from_element(n, 1.0))
        .expect("a Cholesky factor has a non-zero diagonal");
    let uu = u.norm_squared();
    let root = z.tr_mul(&u) / uu;
    let mut residuals = z;
    for j in 0..residuals.ncols() {
        let a = root[j];
        for i in 0..n {
            residuals[(i, j)] -= u[i] * a;
        }
    }
    let log_det = 2.0 * l.diagonal().iter().map(|v| v.ln()).sum::<f64>();
    Ok(Whitened {
        residuals,
        root,
        log_det,
        factor: l,
    })
}

/// Minimises `f` on `[lo, hi]` by Brent's method (golden section with parabolic steps; Brent
/// 1973, *Algorithms for Minimization without Derivatives*, ch. 5), to an absolute tolerance
/// `tol` in `x`. Returns `(x, f(x), evaluations)`. A 1-D bounded minimiser is all the model fits
/// need; the general optimisation crates bring far more than that.
#[allow(
    clippy::float_cmp,
    reason = "Brent's method compares its own stored abscissae, which are equal only when copied"
)]
pub fn minimise(mut f: impl FnMut(f64) -> f64, lo: f64, hi: f64, tol: f64) -> (f64, f64, usize) {
    const GOLD: f64 = 0.381_966_011_250_105_1; // (3 − √5)/2
    let (mut a, mut b) = (lo.min(hi), lo.max(hi));
    let mut x = a + GOLD * (b - a);
    let (mut w, mut v) = (x, x);
    let mut fx = f(x);
    let (mut fw, mut fv) = (fx, fx);
    let mut evals = 1;
    let (mut d, mut e) = (0.0f64, 0.0f64);
    for _ in 0..200 {
        let m = 0.5 * (a + b);
        let tol1 = tol + 1e-10 * x.abs();
        let tol2 = 2.0 * tol1;
        if (x - m).abs() <= tol2 - 0.5 * (b - a) {
            break;
        }
        let mut golden = true;
        if e.abs() > tol1 {
            let r = (x - w) * (fx - fv);
            let mut q = (x - v) * (fx - fw);
            let mut p = (x - v) * q - (x - w) * r;
            q = 2.0 * (q - r);
            if q > 0.0 {
                p = -p;
            }
            q = q.abs();
            if p.abs() < (0.5 * q * e).abs() && p > q * (a - x) && p < q * (b - x) {
                e = d;
                d = p / q;
                let u = x + d;
                if u - a < tol2 || b - u < tol2 {
                    d = if x < m { tol1 } else { -tol1 };
                }
                golden = false;
            }
        }
        if golden {
            e = if x < m { b - x } else { a - x };
            d = GOLD * e;
        }
        let u = if d.abs() >= tol1 {
            x + d
        } else {
            x + tol1.copysign(d)
        };
        let fu = f(u);
        evals += 1;
        if fu <= fx {
            if u < x {
                b = x;
            } else {
                a = x;
            }
            (v, fv, w, fw, x, fx) = (w, fw, x, fx, u, fu);
        } else {
            if u < x {
                a = u;
            } else {
                b = u;
            }
            if fu <= fw || w == x {
                (v, fv, w, fw) = (w, fw, u, fu);
            } else if fu <= fv || v == x || v == w {
                (v, fv) = (u, fu);
            }
        }
    }
    (x, fx, evals)
}

#[cfg(test)]
#[allow(
    clippy::float_cmp,
    reason = "a value that is exactly 0 by construction"
)]
mod tests {
    use super::*;

    fn gls_trace(c: &DMatrix<f64>, y: &DMatrix<f64>) -> (f64, DVector<f64>, f64) {
        let w = whiten(c.clone(), y).unwrap();
        (w.residuals.norm_squared(), w.root, w.log_det)
    }

    /// Contrasts and dense GLS agree on a tree with a polytomy and unequal tip depths.
    #[test]
    fn contrasts_equal_dense_gls() {
        let t = Tree::parse("((A:1,B:2,C:0.5):1,(D:1,E:3):0.5,F:2.5);", "t").unwrap();
        let y = DMatrix::from_fn(6, 3, |i, j| ((i * 7 + j * 3) as f64 * 0.37).sin());
        let c = t.shared_times();
        let (trace, root, log_det) = gls_trace(&c, &y);
        let plan = ContrastPlan::new(&t, &t.lengths());
        let rows: Vec<Vec<f64>> = (0..6).map(|i| y.row(i).iter().copied().collect()).collect();
        let s = plan
            .run(3, |i| &rows[i], &mut ContrastWork::default())
            .unwrap();
        assert!(
            (s.trace - trace).abs() < 1e-12 * trace,
            "{} {trace}",
            s.trace
        );
        assert!(
            (s.log_det - log_det).abs() < 1e-12,
            "{} {log_det}",
            s.log_det
        );
        for j in 0..3 {
            assert!((s.root[j] - root[j]).abs() < 1e-12);
        }
        // 1ᵀC⁻¹1 = 1/root_variance
        let ones = DVector::from_element(6, 1.0);
        let cinv1 = c.clone().cholesky().unwrap().solve(&ones);
        assert!((ones.dot(&cinv1) * s.root_variance - 1.0).abs() < 1e-12);
    }

    /// Hand case: two tips A:1, B:3 from the root. C = diag(1, 3); the GLS root is
    /// (a/1 + b/3)/(1 + 1/3) = (3a + b)/4; one contrast (a − b)/√4; log|C| = ln 3.
    #[test]
    fn two_tip_hand_case() {
        let t = Tree::parse("(A:1,B:3);", "t").unwrap();
        let plan = ContrastPlan::new(&t, &t.lengths());
        let rows = [vec![2.0], vec![6.0]];
        let s = plan
            .run(1, |i| &rows[i], &mut ContrastWork::default())
            .unwrap();
        assert!((s.root[0] - 3.0).abs() < 1e-15);
        assert!((s.trace - 4.0).abs() < 1e-15); // ((2 − 6)/2)²
        assert!((s.log_det - 3f64.ln()).abs() < 1e-15);
        assert!((s.root_variance - 0.75).abs() < 1e-15);
    }

    #[test]
    fn zero_distance_tips_are_refused() {
        let t = Tree::parse("((A:0,B:0):1,C:1);", "t").unwrap();
        let plan = ContrastPlan::new(&t, &t.lengths());
        let rows = [vec![1.0], vec![2.0], vec![3.0]];
        assert!(
            plan.run(1, |i| &rows[i], &mut ContrastWork::default())
                .is_err()
        );
    }

    #[test]
    fn covariances_tend_to_brownian_motion() {
        for (s, ti, tj) in [(0.0, 2.0, 3.0), (1.5, 2.0, 3.0), (2.0, 2.0, 2.0)] {
            let bm = Covariance::Brownian.entry(s, ti, tj);
            let eb = Covariance::EarlyBurst { r: -1e-9 }.entry(s, ti, tj);
            let ou = Covariance::OrnsteinUhlenbeck { alpha: 1e-9 }.entry(s, ti, tj);
            assert!((eb - bm).abs() < 1e-8 && (ou - bm).abs() < 1e-8);
        }
        // EB by hand: r = −ln 2, s = 1: (e^{−ln 2} − 1)/(−ln 2) = 0.5/ln 2
        let eb = Covariance::EarlyBurst { r: -(2f64.ln()) }.entry(1.0, 1.0, 1.0);
        assert!((eb - 0.5 / 2f64.ln()).abs() < 1e-15);
        // OU by hand: α = 1, s = 0 → 0; s = T = 1 → (1 − e^{−2})/2
        let ou = Covariance::OrnsteinUhlenbeck { alpha: 1.0 };
        assert_eq!(ou.entry(0.0, 1.0, 1.0), 0.0);
        assert!((ou.entry(1.0, 1.0, 1.0) - (1.0 - (-2f64).exp()) / 2.0).abs() < 1e-15);
    }

    #[test]
    fn brent_finds_a_parabola_minimum_and_a_boundary() {
        // near a minimum f is flat to within machine precision over ±√ε, so x is good to ~1e-8
        let (x, fx, _) = minimise(|x| (x - 0.3).powi(2) + 1.0, -2.0, 5.0, 1e-10);
        assert!((x - 0.3).abs() < 1e-7 && (fx - 1.0).abs() < 1e-12, "{x}");
        let (x, _, _) = minimise(|x| x, 1.0, 2.0, 1e-9);
        assert!((x - 1.0).abs() < 1e-6, "{x}");
    }
}
