//! Rates of shape evolution under Brownian motion (σ²mult), compared between groups of tips,
//! and phylogenetic signal (Kmult), for data of any dimension.
//!
//! **σ²mult** (Adams 2014, "Quantifying and comparing phylogenetic evolutionary rates for shape
//! and other high-dimensional phenotypic data", *Syst. Biol.* 63:166–177): the mean rate per
//! dimension, `tr(R̂)/p`, with the Brownian rate matrix `R̂ = (Y − 1â)ᵀ C⁻¹ (Y − 1â) / n`
//! (maximum-likelihood divisor `n`, GLS root `â`; O'Meara et al. 2006, *Evolution* 60:922–933).
//! It is computed by independent contrasts ([`super::gls`]).
//!
//! **Between groups** (clades, or tips sharing an interval label): each group's σ²mult from its
//! own tips with the tree's covariance among them (the tips' subtree, rooted at their most
//! recent common ancestor; the "censored" rate of O'Meara et al. 2006). The statistic is the
//! ratio of the largest to the smallest group rate (and the ratio for every pair of groups);
//! its p-value is the share of data sets simulated by Brownian motion on the whole tree with
//! the single pooled rate matrix `R̂` whose ratio is at least the observed one, with the +1
//! correction (Adams 2014; Phipson & Smyth 2010). Simulations run in the eigenbasis of `R̂`
//! (the ratio does not depend on the rotation), each with its own seeded stream.
//!
//! **Kmult** (Adams 2014, "A generalized K statistic for estimating phylogenetic signal from
//! shape and other high-dimensional multivariate data", *Syst. Biol.* 63:685–697; Blomberg,
//! Garland & Ives 2003, *Evolution* 57:717–745):
//! `K = [tr((Y − 1â)ᵀ(Y − 1â)) / tr((Y − 1â)ᵀC⁻¹(Y − 1â))] / [(tr C − n / 1ᵀC⁻¹1) / (n − 1)]`,
//! 1 under Brownian motion, below 1 for less signal, above for more. Its p-value comes from
//! permuting the rows among the tips.

use nalgebra::DMatrix;
use rand::seq::SliceRandom;
use rayon::prelude::*;
use serde::Serialize;
use std::collections::BTreeMap;

use super::gls::{ContrastPlan, ContrastWork};
use super::simulate::BrownianPlan;
use super::{EvolutionError, Tree, data_err, rng_for};

fn check_data(tree: &Tree, y: &DMatrix<f64>) -> Result<(), EvolutionError> {
    if y.nrows() != tree.n_tips() {
        return Err(data_err(format!(
            "{} data rows for {} tips",
            y.nrows(),
            tree.n_tips()
        )));
    }
    if y.ncols() == 0 {
        return Err(data_err("no variables"));
    }
    if y.iter().any(|v| !v.is_finite()) {
        return Err(data_err("the data contain values that are not finite"));
    }
    Ok(())
}

/// Rows of `y` as contiguous slices (row-major copy).
fn row_major(y: &DMatrix<f64>) -> Vec<f64> {
    y.transpose().as_slice().to_vec()
}

/// σ²mult of `y` (rows in tip order) on `tree`.
pub fn sigma_mult(tree: &Tree, y: &DMatrix<f64>) -> Result<f64, EvolutionError> {
    tree.check_for_analysis(2)?;
    check_data(tree, y)?;
    let p = y.ncols();
    let flat = row_major(y);
    let plan = ContrastPlan::new(tree, &tree.lengths());
    let s = plan.run(
        p,
        |t| &flat[t * p..(t + 1) * p],
        &mut ContrastWork::default(),
    )?;
    Ok(s.trace / (tree.n_tips() * p) as f64)
}

/// One group's rate.
#[derive(Debug, Clone, Serialize)]
pub struct GroupRate {
    pub group: String,
    pub tips: usize,
    pub sigma_mult: f64,
}

/// A ratio of two groups' rates with its simulation p-value.
#[derive(Debug, Clone, Serialize)]
pub struct RatePair {
    pub faster: String,
    pub slower: String,
    pub ratio: f64,
    pub p_value: f64,
}

/// σ²mult over the whole tree and per group, with the simulation test.
#[derive(Debug, Clone, Serialize)]
pub struct RateComparison {
    pub sigma_mult: f64,
    pub groups: Vec<GroupRate>,
    /// Largest over smallest group rate.
    pub ratio: f64,
    pub p_value: f64,
    /// Every pair of groups (one entry with two groups).
    pub pairs: Vec<RatePair>,
    pub simulations: usize,
    pub seed: u64,
}

#[allow(
    clippy::too_many_lines,
    reason = "observed rates, simulations and the table in one pass"
)]
/// Compares σ²mult between the groups `groups[t]` of the tips (each group at least 3 tips,
/// at least two groups) by `simulations` Brownian simulations with the pooled rate matrix.
pub fn compare_rates(
    tree: &Tree,
    y: &DMatrix<f64>,
    groups: &[String],
    simulations: usize,
    seed: u64,
) -> Result<RateComparison, EvolutionError> {
    tree.check_for_analysis(3)?;
    check_data(tree, y)?;
    if groups.len() != tree.n_tips() {
        return Err(data_err(format!(
            "{} group labels for {} tips",
            groups.len(),
            tree.n_tips()
        )));
    }
    if simulations == 0 {
        return Err(EvolutionError::Option(
            "at least one simulation is needed".into(),
        ));
    }
    let mut members: BTreeMap<&str, Vec<usize>> = BTreeMap::new();
    for (t, g) in groups.iter().enumerate() {
        members.entry(g.as_str()).or_default().push(t);
    }
    if members.len() < 2 {
        return Err(data_err(format!(
            "one group ('{}'): comparing rates needs two or more",
            groups.first().map_or("", String::as_str)
        )));
    }
    if let Some((g, m)) = members.iter().find(|(_, m)| m.len() < 3) {
        return Err(data_err(format!(
            "group '{g}' has {} tips; each group needs at least 3 for its own rate",
            m.len()
        )));
    }
    let (n, p) = y.shape();
    let flat = row_major(y);
    let plans: Vec<(String, Vec<usize>, ContrastPlan)> = members
        .iter()
        .map(|(g, m)| {
            let sub = tree.keep_tips(m)?;
            Ok((
                (*g).to_owned(),
                m.clone(),
                ContrastPlan::new(&sub, &sub.lengths()),
            ))
        })
        .collect::<Result<_, EvolutionError>>()?;
    let rates_of =
        |data: &[f64], q: usize, work: &mut ContrastWork| -> Result<Vec<f64>, EvolutionError> {
            plans
                .iter()
                .map(|(_, m, plan)| {
                    let s = plan.run(q, |t| &data[m[t] * q..(m[t] + 1) * q], work)?;
                    Ok(s.trace / (m.len() * p) as f64)
                })
                .collect()
        };
    let mut work = ContrastWork::default();
    let observed = rates_of(&flat, p, &mut work)?;
    let whole = ContrastPlan::new(tree, &tree.lengths());
    let all = whole.run(p, |t| &flat[t * p..(t + 1) * p], &mut work)?;
    let sigma = all.trace / (n * p) as f64;

    // pooled rate matrix R̂ = (Y − 1â)ᵀC⁻¹(Y − 1â)/n, from the dense GLS (p × p)
    let c = tree.shared_times();
    let w = super::gls::whiten(c, y)?;
    let r = w.residuals.tr_mul(&w.residuals) / n as f64;
    let eig = r.symmetric_eigen();
    let lmax = eig.eigenvalues.iter().copied().fold(0.0, f64::max);
    let sd: Vec<f64> = eig
        .eigenvalues
        .iter()
        .filter(|&&l| l > 1e-12 * lmax)
        .map(|l| l.sqrt())
        .collect();
    let q = sd.len();
    let sim = BrownianPlan::new(tree, &tree.lengths());
    let g = plans.len();
    let pair_ratio =
        |rates: &[f64], a: usize, b: usize| rates[a].max(rates[b]) / rates[a].min(rates[b]);
    let overall = |rates: &[f64]| {
        let (lo, hi) = rates
            .iter()
            .fold((f64::INFINITY, 0.0f64), |(l, h), &v| (l.min(v), h.max(v)));
        hi / lo
    };
    let obs_ratio = overall(&observed);
    let obs_pairs: Vec<f64> = (0..g)
        .flat_map(|a| (a + 1..g).map(move |b| (a, b)))
        .map(|(a, b)| pair_ratio(&observed, a, b))
        .collect();
    let tol = 1.0 - 1e-12;
    // hits[0]: overall ratio; hits[1..]: pairs
    let hits: Vec<usize> = (0..simulations)
        .into_par_iter()
        .map_init(
            || (ContrastWork::default(), Vec::new(), Vec::new()),
            |(cw, wk, out), s| -> Result<Vec<usize>, EvolutionError> {
                let mut rng = rng_for(seed, s as u64);
                sim.run(&sd, &mut rng, wk, out);
                let rates = rates_of(out, q, cw)?;
                let mut h = vec![usize::from(overall(&rates) >= obs_ratio * tol)];
                let mut k = 0;
                for a in 0..g {
                    for b in a + 1..g {
                        h.push(usize::from(pair_ratio(&rates, a, b) >= obs_pairs[k] * tol));
                        k += 1;
                    }
                }
                Ok(h)
            },
        )
        .try_reduce(
            || vec![0; 1 + obs_pairs.len()],
            |mut a, b| {
                for (x, y) in a.iter_mut().zip(b) {
                    *x += y;
                }
                Ok(a)
            },
        )?;
    let pv = |h: usize| (h + 1) as f64 / (simulations + 1) as f64;
    let mut pairs = Vec::new();
    let mut k = 0;
    for a in 0..g {
        for b in a + 1..g {
            let (fa, sl) = if observed[a] >= observed[b] {
                (a, b)
            } else {
                (b, a)
            };
            pairs.push(RatePair {
                faster: plans[fa].0.clone(),
                slower: plans[sl].0.clone(),
                ratio: obs_pairs[k],
                p_value: pv(hits[1 + k]),
            });
            k += 1;
        }
    }
    Ok(RateComparison {
        sigma_mult: sigma,
        groups: plans
            .iter()
            .zip(&observed)
            .map(|((g, m, _), &s)| GroupRate {
                group: g.clone(),
                tips: m.len(),
                sigma_mult: s,
            })
            .collect(),
        ratio: obs_ratio,
        p_value: pv(hits[0]),
        pairs,
        simulations,
        seed,
    })
}

/// Kmult with its permutation test.
#[derive(Debug, Clone, Serialize)]
pub struct Kmult {
    pub k_mult: f64,
    pub p_value: f64,
    pub permutations: usize,
    pub seed: u64,
}

/// Kmult of `y` on `tree` with `permutations` random reassignments of rows to tips.
pub fn k_mult(
    tree: &Tree,
    y: &DMatrix<f64>,
    permutations: usize,
    seed: u64,
) -> Result<Kmult, EvolutionError> {
    tree.check_for_analysis(3)?;
    check_data(tree, y)?;
    if permutations == 0 {
        return Err(EvolutionError::Option(
            "at least one permutation is needed".into(),
        ));
    }
    let (n, p) = y.shape();
    let flat = row_major(y);
    let plan = ContrastPlan::new(tree, &tree.lengths());
    let tr_c: f64 = tree.tip_depths().iter().sum();
    let k_of = |perm: &[usize], work: &mut ContrastWork| -> Result<f64, EvolutionError> {
        let s = plan.run(p, |t| &flat[perm[t] * p..(perm[t] + 1) * p], work)?;
        let mut ss = 0.0;
        for &row in perm {
            for (v, a) in flat[row * p..(row + 1) * p].iter().zip(&s.root) {
                ss += (v - a) * (v - a);
            }
        }
        let expected = (tr_c - n as f64 * s.root_variance) / (n - 1) as f64;
        Ok(ss / s.trace / expected)
    };
    let identity: Vec<usize> = (0..n).collect();
    let observed = k_of(&identity, &mut ContrastWork::default())?;
    let tol = observed * (1.0 - 1e-12);
    let hits: usize = (0..permutations)
        .into_par_iter()
        .map_init(
            || (ContrastWork::default(), identity.clone()),
            |(work, perm), r| -> Result<usize, EvolutionError> {
                let mut rng = rng_for(seed, r as u64);
                perm.copy_from_slice(&identity);
                perm.shuffle(&mut rng);
                Ok(usize::from(k_of(perm, work)? >= tol))
            },
        )
        .try_reduce(|| 0, |a, b| Ok(a + b))?;
    Ok(Kmult {
        k_mult: observed,
        p_value: (hits + 1) as f64 / (permutations + 1) as f64,
        permutations,
        seed,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Hand case (module formulas): the star tree (A:1,B:1,C:1) has C = I, so â is the plain
    /// mean, the GLS form is the plain sum of squares, and Kmult's expected ratio is
    /// (3 − 3·(1/3))/2 = 1, so K = SS/SS = 1 whatever the data. σ²mult of the values
    /// 0, 1, 2 (one variable): SS = 2, so 2/(3·1) = 2/3.
    #[test]
    fn star_tree_hand_values() {
        let t = Tree::parse("(A:1,B:1,C:1);", "t").unwrap();
        let y = DMatrix::from_row_slice(3, 1, &[0.0, 1.0, 2.0]);
        assert!((sigma_mult(&t, &y).unwrap() - 2.0 / 3.0).abs() < 1e-15);
        let k = k_mult(&t, &y, 9, 1).unwrap();
        assert!((k.k_mult - 1.0).abs() < 1e-12);
        assert!(
            (k.p_value - 1.0).abs() < 1e-12,
            "every permutation ties: p = 1"
        );
    }

    /// Two clades simulated with rates 1 and 16: the faster is found and the difference is
    /// significant; with equal rates it is not.
    #[test]
    fn rate_difference_is_detected() {
        use crate::evolution::simulate::brownian;
        // a balanced tree of 32 tips, two clades of 16
        fn balanced(prefix: &str, depth: usize, len: f64) -> String {
            if depth == 0 {
                return prefix.to_owned();
            }
            format!(
                "({}:{len},{}:{len})",
                balanced(&format!("{prefix}0"), depth - 1, len),
                balanced(&format!("{prefix}1"), depth - 1, len)
            )
        }
        let text = format!("({}:1,{}:1);", balanced("a", 4, 1.0), balanced("b", 4, 1.0));
        let tree = Tree::parse(&text, "t").unwrap();
        let groups: Vec<String> = tree
            .tip_labels()
            .iter()
            .map(|l| l[..1].to_owned())
            .collect();
        let p = 6;
        for (fast, significant) in [(16.0f64, true), (1.0, false)] {
            let mut rng = crate::evolution::rng_for(11, 0);
            let y0 = brownian(
                &tree,
                &tree.lengths(),
                &vec![0.0; p],
                &DMatrix::identity(p, p),
                &mut rng,
            );
            // scale clade b's own evolution: its tips' deviations from the clade's root
            let b: Vec<usize> = (0..32).filter(|&t| groups[t] == "b").collect();
            let mut y = y0.clone();
            let mut mean_b = nalgebra::RowDVector::<f64>::zeros(p);
            for &t in &b {
                mean_b += y0.row(t) / 16.0;
            }
            for &t in &b {
                let dev = y0.row(t) - &mean_b;
                y.set_row(t, &(&mean_b + dev * fast.sqrt()));
            }
            let r = compare_rates(&tree, &y, &groups, 199, 3).unwrap();
            assert_eq!(r.groups.len(), 2);
            if significant {
                assert_eq!(r.pairs[0].faster, "b");
                assert!(r.ratio > 5.0 && r.p_value < 0.01, "{r:?}");
            } else {
                assert!(r.p_value > 0.05, "{r:?}");
            }
        }
    }
}
