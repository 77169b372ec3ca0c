//! Comparative-methods benchmark: a tree of 500 tips with 50 landmarks in 3D (150 shape
//! variables): σ²mult compared between two groups with 999 Brownian simulations, Kmult with 999
//! permutations, and the three-model fit (BM, EB, OU by pairwise composite likelihood, with
//! intervals); then how the cost grows with tips and landmarks.
//!
//! Reference in the same run: the statistics of one simulation or permutation computed by a
//! dense GLS solve (Cholesky of the n × n covariance, the textbook route) against the
//! independent-contrasts route the library takes. Target: each of the three 500-tip tasks in a
//! few seconds on 2 cores.
//!
//! Run: `cargo bench --bench evolution`.

use std::time::Instant;

use nalgebra::DMatrix;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use sutura_core::evolution::gls::whiten;
use sutura_core::evolution::models::{ModelOptions, compare_models};
use sutura_core::evolution::rates::{compare_rates, k_mult};
use sutura_core::evolution::simulate::brownian;
use sutura_core::synth::comparative::{ComparativeSpec, generate_comparative};

fn data(taxa: usize, landmarks: usize, seed: u64) -> (sutura_core::evolution::Tree, DMatrix<f64>) {
    let spec = ComparativeSpec {
        taxa,
        seed,
        ..ComparativeSpec::bundled()
    };
    let tree = generate_comparative(&spec).tree;
    let p = landmarks * 3;
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let y = brownian(
        &tree,
        &tree.lengths(),
        &vec![0.0; p],
        &DMatrix::identity(p, p),
        &mut rng,
    );
    (tree, y)
}

fn secs(f: impl FnOnce()) -> f64 {
    let t = Instant::now();
    f();
    t.elapsed().as_secs_f64()
}

fn main() {
    let (tree, y) = data(500, 50, 1);
    let groups: Vec<String> = (0..tree.n_tips())
        .map(|i| if i < tree.n_tips() / 2 { "a" } else { "b" }.to_owned())
        .collect();
    println!(
        "tree: {} tips, {} variables, height {:.1}",
        tree.n_tips(),
        y.ncols(),
        tree.height()
    );
    let t_rates = secs(|| {
        let r = compare_rates(&tree, &y, &groups, 999, 1).unwrap();
        println!("  rate ratio {:.3}, p {:.3}", r.ratio, r.p_value);
    });
    let t_k = secs(|| {
        let k = k_mult(&tree, &y, 999, 1).unwrap();
        println!("  Kmult {:.3}, p {:.3}", k.k_mult, k.p_value);
    });
    let t_models = secs(|| {
        let m = compare_models(&tree, &y, &ModelOptions::default()).unwrap();
        let evals: usize = m.fits.iter().map(|f| f.evaluations).sum();
        println!(
            "  best {}, {evals} likelihood evaluations, c = {:.1}",
            m.best.name(),
            m.adjustment
        );
    });
    // reference: one dense GLS trace per simulation/permutation (Cholesky of C each time, as a
    // straightforward implementation would do), 20 of them, scaled to 999
    let c = tree.shared_times();
    let t_dense = secs(|| {
        for _ in 0..20 {
            let w = whiten(c.clone(), &y).unwrap();
            std::hint::black_box(w.residuals.norm_squared());
        }
    }) * 999.0
        / 20.0;
    println!("500 tips × 50 landmarks (3D):");
    println!("  σ²mult, 2 groups, 999 simulations  {t_rates:>7.2} s");
    println!(
        "  Kmult, 999 permutations           {t_k:>7.2} s  (dense GLS per permutation: {t_dense:.2} s, {:.1}× slower)",
        t_dense / t_k
    );
    println!("  BM + EB + OU with intervals        {t_models:>7.2} s");
    println!("growth (seconds; ratio to the smallest case):");
    println!(
        "  {:>5} {:>9} {:>12} {:>10} {:>10}",
        "tips", "landmarks", "σ²mult 999", "Kmult 999", "models"
    );
    let mut base: Option<[f64; 3]> = None;
    for (taxa, lm) in [(125, 50), (250, 50), (500, 50), (500, 12), (500, 25)] {
        let (tree, y) = data(taxa, lm, 2);
        let groups: Vec<String> = (0..tree.n_tips())
            .map(|i| if i % 2 == 0 { "a" } else { "b" }.to_owned())
            .collect();
        let a = secs(|| {
            std::hint::black_box(compare_rates(&tree, &y, &groups, 999, 1).unwrap());
        });
        let b = secs(|| {
            std::hint::black_box(k_mult(&tree, &y, 999, 1).unwrap());
        });
        let m = secs(|| {
            std::hint::black_box(compare_models(&tree, &y, &ModelOptions::default()).unwrap());
        });
        let b0 = *base.get_or_insert([a, b, m]);
        println!(
            "  {taxa:>5} {lm:>9} {a:>7.2} ({:>4.1}×) {b:>5.2} ({:>4.1}×) {m:>5.2} ({:>4.1}×)",
            a / b0[0],
            b / b0[1],
            m / b0[2]
        );
    }
}
