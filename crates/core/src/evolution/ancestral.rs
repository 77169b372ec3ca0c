//! Ancestral shapes at the root and every internal node by generalized least squares under
//! Brownian motion: `x̂_a = â + C_{a,tips} C⁻¹ (Y − 1â)`, with `â` the GLS root state and
//! `C_{a,t}` the time from the root to the most recent common ancestor of node `a` and tip `t`
//! (Martins & Hansen 1997, *Am. Nat.* 149:646–667; Rohlf 2001, *Evolution* 55:2143–2160). For
//! Gaussian data this is also the joint maximum-likelihood reconstruction (Schluter et al.
//! 1997, *Evolution* 51:1699–1711). The root gets `â` itself.

use nalgebra::DMatrix;
use serde::Serialize;

use super::{EvolutionError, Tree, data_err};

/// Estimated values at internal nodes.
#[derive(Debug, Clone, Serialize)]
pub struct Ancestors {
    /// Internal node ids (into [`Tree::nodes`]), in preorder; the root first.
    pub nodes: Vec<usize>,
    /// One row per entry of `nodes`.
    pub values: DMatrix<f64>,
}

/// GLS ancestral states of `y` (rows in tip order) on `tree`.
pub fn ancestral_states(tree: &Tree, y: &DMatrix<f64>) -> Result<Ancestors, EvolutionError> {
    tree.check_for_analysis(2)?;
    let n = tree.n_tips();
    if y.nrows() != n {
        return Err(data_err(format!("{} data rows for {n} tips", y.nrows())));
    }
    if n > super::models::MAX_TIPS {
        return Err(data_err(format!(
            "{n} tips: ancestral states hold n × n covariances and take at most {} tips",
            super::models::MAX_TIPS
        )));
    }
    let s = tree.shared_times();
    let depth = tree.depths();
    let chol = s.clone().cholesky().ok_or_else(|| {
        EvolutionError::Numerical(
            "the tree's covariance matrix is not positive definite (tips at zero distance?)".into(),
        )
    })?;
    let ones = DMatrix::from_element(n, 1, 1.0);
    let cinv1 = chol.solve(&ones);
    let root = y.tr_mul(&cinv1) / cinv1.sum(); // p × 1: (1ᵀC⁻¹1)⁻¹ YᵀC⁻¹1
    let mut resid = y.clone();
    for mut row in resid.row_iter_mut() {
        row -= root.transpose();
    }
    let z = chol.solve(&resid);
    let mut tip_of = vec![usize::MAX; tree.nodes().len()];
    for (t, &node) in tree.tips().iter().enumerate() {
        tip_of[node] = t;
    }
    let nodes: Vec<usize> = tree
        .preorder()
        .into_iter()
        .filter(|&i| !tree.nodes()[i].children.is_empty())
        .collect();
    let mut cat = DMatrix::zeros(nodes.len(), n);
    for (r, &a) in nodes.iter().enumerate() {
        let under = tree.descendant_tips(a);
        let d = tip_of[under[0]];
        for t in 0..n {
            cat[(r, t)] = s[(d, t)];
        }
        for &u in &under {
            cat[(r, tip_of[u])] = depth[a];
        }
    }
    let mut values = cat * z;
    for mut row in values.row_iter_mut() {
        row += root.transpose();
    }
    Ok(Ancestors { nodes, values })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Hand case: ((A:1,B:1):1,C:2). C = [[2,1,0],[1,2,0],[0,0,2]]. With values a, b, c the
    /// GLS root weights are C⁻¹1 = (1/3, 1/3, 1/2), so â = (2a + 2b + 3c)/7. The node joining
    /// A and B (depth 1) covaries 1 with A and B and 0 with C, so
    /// x̂ = â + [1, 1, 0] C⁻¹ (y − â) = â + ((a − â) + (b − â))/3. For a = 1, b = 3, c = 8:
    /// â = (2 + 6 + 24)/7 = 32/7 and x̂ = 32/7 + (4 − 64/7)/3 = 32/7 − 12/7 = 20/7.
    #[test]
    fn three_tip_hand_case() {
        let t = Tree::parse("((A:1,B:1):1,C:2);", "t").unwrap();
        let y = DMatrix::from_row_slice(3, 1, &[1.0, 3.0, 8.0]);
        let a = ancestral_states(&t, &y).unwrap();
        assert_eq!(a.nodes.len(), 2);
        assert!(
            (a.values[(0, 0)] - 32.0 / 7.0).abs() < 1e-12,
            "{}",
            a.values
        );
        assert!((a.values[(1, 0)] - 20.0 / 7.0).abs() < 1e-12);
    }
}
