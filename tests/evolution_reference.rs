//! Checks of the comparative methods against the outside world: Newick trees against `DendroPy`,
//! σ²mult, Kmult, the composite likelihoods, their maxima, the adjustment and the ancestral
//! states against numpy/scipy code written from the published formulas
//! (`tests/python/evolution_gls.py`), and the operator ANOVA against statsmodels' `anova_lm`.

mod common;

use nalgebra::DMatrix;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde_json::json;
use sutura_core::evolution::Tree;
use sutura_core::evolution::gls::Covariance;
use sutura_core::evolution::models::{
    Model, ModelOptions, compare_models, composite_log_likelihood,
};
use sutura_core::evolution::rates::{compare_rates, k_mult, sigma_mult};
use sutura_core::synth::comparative::{ComparativeSpec, TraitModel, generate_comparative};

fn write_tree(dir: &std::path::Path, name: &str, text: &str) -> String {
    let p = dir.join(name);
    std::fs::write(&p, text).unwrap();
    p.display().to_string()
}

/// Our reading of each tree equals `DendroPy`'s: tip labels in file order, every clade (as its
/// set of tips) with its branch length, and root-to-tip distances (reference: `DendroPy` 5's
/// Newick reader, `tests/python/evolution_newick.py`).
#[test]
fn newick_agrees_with_dendropy() {
    let dir = tempfile::tempdir().unwrap();
    let mut trees = vec![
        "((A:1,'B c':2.5e0)x:0.5,C_1:3,(D:1,E:1,F:1):2)root;".to_owned(),
        "[a comment]\n(\n  (a:0.1 , b:0.2 ) : 0.05,\n  ('it''s':1E-1,d:0.3):0.25\n);\n".to_owned(),
        "(((t1:1,t2:1):1,(t3:0.5,t4:1.5,t5:2):1.5):1,t6:3);".to_owned(),
    ];
    for seed in [1, 2, 3] {
        let spec = ComparativeSpec {
            taxa: 40,
            seed,
            ..ComparativeSpec::bundled()
        };
        trees.push(generate_comparative(&spec).tree.to_newick());
    }
    trees.push(
        std::fs::read_to_string(common::root().join("sample_volumes/comparative/tree.nwk"))
            .unwrap(),
    );
    for (k, text) in trees.iter().enumerate() {
        let path = write_tree(dir.path(), &format!("t{k}.nwk"), text);
        let t = Tree::read(std::path::Path::new(&path)).unwrap();
        let py = common::Reference::new(&format!("evolution_newick_{k}"), "evolution_newick.py")
            .dir("tmp", dir.path())
            .arg(path.clone())
            .input(std::path::Path::new(&path))
            .run();
        let tips: Vec<String> = py["tips"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_str().unwrap().to_owned())
            .collect();
        assert_eq!(t.tip_labels(), tips, "tree {k}");
        let labels = t.tip_labels();
        let mut ours: Vec<(Vec<String>, Option<f64>)> = t
            .preorder()
            .into_iter()
            .filter(|&i| i != t.root())
            .map(|i| {
                let mut s: Vec<String> = t
                    .descendant_tips(i)
                    .iter()
                    .map(|&n| t.nodes()[n].label.clone().unwrap())
                    .collect();
                s.sort();
                (s, t.nodes()[i].length)
            })
            .collect();
        let mut theirs: Vec<(Vec<String>, Option<f64>)> = py["clades"]
            .as_array()
            .unwrap()
            .iter()
            .map(|c| {
                (
                    c["tips"]
                        .as_array()
                        .unwrap()
                        .iter()
                        .map(|v| v.as_str().unwrap().to_owned())
                        .collect(),
                    c["length"].as_f64(),
                )
            })
            .collect();
        let key = |c: &(Vec<String>, Option<f64>)| (c.0.clone(), c.1.map(f64::to_bits));
        ours.sort_by_key(key);
        theirs.sort_by_key(key);
        assert_eq!(ours.len(), theirs.len(), "tree {k}: clades");
        for (a, b) in ours.iter().zip(&theirs) {
            assert_eq!(a.0, b.0, "tree {k}");
            match (a.1, b.1) {
                (Some(x), Some(y)) => assert!(
                    (x - y).abs() <= 1e-12 * x.abs().max(1.0),
                    "tree {k}: {x} vs {y}"
                ),
                (x, y) => assert_eq!(x, y, "tree {k}"),
            }
        }
        for (label, d) in labels.iter().zip(t.tip_depths()) {
            let want = py["root_to_tip"][*label].as_f64().unwrap();
            assert!(
                (d - want).abs() < 1e-9 * want.max(1.0),
                "tree {k} {label}: {d} vs {want}"
            );
        }
    }
}

fn random_data(n: usize, p: usize, seed: u64) -> DMatrix<f64> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    DMatrix::from_fn(n, p, |_, _| rng.random_range(-1.0..1.0))
}

/// σ²mult, group rates, Kmult, the pairwise composite likelihood of the three models, their
/// maxima, the adjustment and GLS ancestral states agree with numpy/scipy code written from the
/// published formulas (`tests/python/evolution_gls.py`: Adams 2014a,b; Blomberg et al. 2003;
/// Goolsby 2016; Harmon et al. 2010; Hansen 1997; Martins & Hansen 1997), on a fossil
/// (non-ultrametric) tree with a polytomy-free random topology and on an ultrametric one.
#[test]
#[allow(
    clippy::too_many_lines,
    reason = "every method against its reference, in order"
)]
fn comparative_methods_agree_with_numpy() {
    let dir = tempfile::tempdir().unwrap();
    let fossil = generate_comparative(&ComparativeSpec {
        taxa: 14,
        seed: 9,
        ..ComparativeSpec::bundled()
    })
    .tree
    .to_newick();
    let ultra =
        "((((a:1,b:1):2,c:3):1,(d:2,e:2):2):2,((f:1.5,g:1.5):3,(h:4,(i:2,j:2):2):0.5):1.5);"
            .to_owned();
    for (k, text) in [fossil, ultra].iter().enumerate() {
        let path = write_tree(dir.path(), &format!("g{k}.nwk"), text);
        let tree = Tree::read(std::path::Path::new(&path)).unwrap();
        let n = tree.n_tips();
        let y = random_data(n, 4, 40 + k as u64);
        let groups: Vec<String> = (0..n)
            .map(|i| if i % 2 == 0 { "even" } else { "odd" }.into())
            .collect();
        let (eb_r, ou_alpha) = (-0.05, 0.2);
        let arg = json!({
            "newick": path,
            "tips": tree.tip_labels(),
            "data": (0..n).map(|i| y.row(i).iter().copied().collect::<Vec<f64>>()).collect::<Vec<_>>(),
            "groups": groups,
            "eb_r": eb_r,
            "ou_alpha": ou_alpha,
        });
        // the drift check is looser than the rest: scipy's bounded search for the EB and OU
        // maxima stops on a likelihood surface flat to rounding, so where it stops moves in the
        // 7th digit from one CPU to another (seen: OU alpha 1.12181618 vs 1.12181636); the
        // comparisons below with Sutura keep their own tolerances
        let py = common::Reference::new(&format!("evolution_gls_{k}"), "evolution_gls.py")
            .dir("tmp", dir.path())
            .arg(arg.to_string())
            .input(std::path::Path::new(&path))
            .tolerance(1e-6, 1e-9)
            .run();
        let close = |a: f64, b: f64, tol: f64, what: &str| {
            assert!(
                (a - b).abs() <= tol * b.abs().max(1e-300),
                "tree {k} {what}: {a} vs {b}"
            );
        };
        close(
            sigma_mult(&tree, &y).unwrap(),
            py["sigma_mult"].as_f64().unwrap(),
            1e-10,
            "sigma_mult",
        );
        let rc = compare_rates(&tree, &y, &groups, 9, 1).unwrap();
        for g in &rc.groups {
            close(
                g.sigma_mult,
                py["group_rates"][&g.group].as_f64().unwrap(),
                1e-10,
                "group rate",
            );
        }
        close(
            k_mult(&tree, &y, 9, 1).unwrap().k_mult,
            py["k_mult"].as_f64().unwrap(),
            1e-10,
            "k_mult",
        );
        close(
            composite_log_likelihood(&tree, &y, Covariance::Brownian).unwrap(),
            py["cl_bm"].as_f64().unwrap(),
            1e-10,
            "CL BM",
        );
        close(
            composite_log_likelihood(&tree, &y, Covariance::EarlyBurst { r: eb_r }).unwrap(),
            py["cl_eb"].as_f64().unwrap(),
            1e-10,
            "CL EB",
        );
        close(
            composite_log_likelihood(&tree, &y, Covariance::OrnsteinUhlenbeck { alpha: ou_alpha })
                .unwrap(),
            py["cl_ou"].as_f64().unwrap(),
            1e-10,
            "CL OU",
        );
        let m = compare_models(&tree, &y, &ModelOptions::default()).unwrap();
        close(
            m.adjustment,
            py["adjustment"].as_f64().unwrap(),
            1e-10,
            "adjustment",
        );
        for (model, key, cl_key) in [
            (Model::EarlyBurst, "eb_best", "cl_eb_best"),
            (Model::OrnsteinUhlenbeck, "ou_best", "cl_ou_best"),
        ] {
            let f = m.fits.iter().find(|f| f.model == model).unwrap();
            // the maxima: our likelihood at least scipy's (to rounding), and the same place
            // unless the surface is flat there
            let cl_py = py[cl_key].as_f64().unwrap();
            assert!(
                f.composite_log_likelihood >= cl_py - 1e-7,
                "tree {k} {key}: {} < {cl_py}",
                f.composite_log_likelihood
            );
            let x = f.parameter.unwrap().value;
            let x_py = py[key].as_f64().unwrap();
            let scale = f.parameter.unwrap().upper - f.parameter.unwrap().lower;
            assert!(
                (x - x_py).abs() < 1e-3 * scale.max(1e-3) + 1e-6,
                "tree {k} {key}: {x} vs {x_py}"
            );
        }
        let anc = sutura_core::evolution::ancestral::ancestral_states(&tree, &y).unwrap();
        let want = py["ancestral"].as_array().unwrap();
        assert_eq!(anc.values.nrows(), want.len());
        for (r, row) in want.iter().enumerate() {
            for (c, v) in row.as_array().unwrap().iter().enumerate() {
                close(anc.values[(r, c)], v.as_f64().unwrap(), 1e-9, "ancestral");
            }
        }
    }
}

/// The operator ANOVA's sums of squares, degrees of freedom, F and p against statsmodels'
/// `anova_lm` (sequential, `y ~ C(individual) + C(operator) + C(individual):C(operator)`) on
/// the same data: a balanced design (6 individuals × 3 operators × 2 repeats) and an unbalanced
/// one (some repeats dropped); shape sums of squares summed over coordinates with df × D.
#[test]
#[allow(clippy::too_many_lines)] // reason: a balanced and an unbalanced design, each checked term by term
fn operator_anova_matches_statsmodels() {
    use sutura_core::shape::anova::{procrustes_operator_anova, shape_dims, two_way};
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let base: Vec<[f64; 3]> = (0..6)
        .map(|l| {
            [
                f64::from(l).cos(),
                (f64::from(l) * 1.3).sin(),
                0.3 * f64::from(l),
            ]
        })
        .collect();
    let mut configs = Vec::new();
    let (mut ind, mut op) = (Vec::new(), Vec::new());
    for i in 0..6 {
        let shape: Vec<[f64; 3]> = base
            .iter()
            .map(|p| p.map(|v| v + 0.08 * rng.random_range(-1.0..1.0)))
            .collect();
        for o in 0..3 {
            let bias: Vec<[f64; 3]> = (0..6)
                .map(|_| [0.0; 3].map(|_| 0.02 * rng.random_range(-1.0..1.0)))
                .collect();
            for _ in 0..2 {
                let c = DMatrix::from_fn(6, 3, |l, d| {
                    shape[l][d] + bias[l][d] + 0.01 * rng.random_range(-1.0..1.0) + 2.0 * i as f64
                });
                configs.push(c);
                ind.push(i);
                op.push(o);
            }
        }
    }
    for (case, drop) in [vec![], vec![1, 8, 15, 30]].into_iter().enumerate() {
        let keep: Vec<usize> = (0..configs.len()).filter(|i| !drop.contains(i)).collect();
        let sample = sutura_core::shape::Sample::from_configs(
            &keep.iter().map(|&i| configs[i].clone()).collect::<Vec<_>>(),
        )
        .unwrap();
        let ki: Vec<usize> = keep.iter().map(|&i| ind[i]).collect();
        let ko: Vec<usize> = keep.iter().map(|&i| op[i]).collect();
        let r = procrustes_operator_anova(
            &sample,
            &ki,
            &ko,
            &sutura_core::shape::GpaOptions::default(),
        )
        .unwrap();
        let g =
            sutura_core::shape::gpa(&sample, &sutura_core::shape::GpaOptions::default()).unwrap();
        let rows = g.aligned.to_rows();
        let arg = json!({
            "data": (0..rows.nrows()).map(|i| rows.row(i).iter().copied().collect::<Vec<f64>>()).collect::<Vec<_>>(),
            "individual": ki,
            "operator": ko,
        });
        let py =
            common::Reference::new(&format!("operator_anova_shape_{case}"), "operator_anova.py")
                .arg(arg.to_string())
                .run();
        let d = shape_dims(6, 3) as f64;
        for term in ["individual", "operator", "individual:operator", "residual"] {
            let ours = r.shape.term(term).unwrap();
            let ss = py["terms"][term]["ss"].as_f64().unwrap();
            assert!(
                (ours.ss - ss).abs() < 1e-9 * ss,
                "{term}: {} vs {ss}",
                ours.ss
            );
            let df = py["terms"][term]["df"].as_f64().unwrap();
            assert!((ours.df - df * d).abs() < 1e-9, "{term} df");
        }
        assert_eq!(r.shape.components.is_some(), drop.is_empty());
        // one variable (centroid size): F and p are statsmodels' own
        let sizes: Vec<f64> = (0..sample.n())
            .map(|i| sutura_core::shape::centroid_size(&sample.config(i)))
            .collect();
        let t = two_way(
            &DMatrix::from_column_slice(sizes.len(), 1, &sizes),
            &ki,
            &ko,
            1,
        )
        .unwrap();
        let arg = json!({"data": sizes.iter().map(|v| vec![*v]).collect::<Vec<_>>(), "individual": ki, "operator": ko});
        let py =
            common::Reference::new(&format!("operator_anova_size_{case}"), "operator_anova.py")
                .arg(arg.to_string())
                .run();
        for term in ["individual", "operator", "individual:operator"] {
            let c = &py["columns"][0][term];
            let ours = t.term(term).unwrap();
            let (f, p) = (c["F"].as_f64().unwrap(), c["p"].as_f64().unwrap());
            assert!(
                (ours.f.unwrap() - f).abs() < 1e-8 * f,
                "{term} F {} vs {f}",
                ours.f.unwrap()
            );
            assert!(
                (ours.p.unwrap() - p).abs() < 1e-8 * p.max(1e-300) + 1e-14,
                "{term} p"
            );
            assert!((ours.ss - c["ss"].as_f64().unwrap()).abs() < 1e-9 * ours.ss.max(1e-12));
        }
    }
}

/// Data simulated on the bundled sample's kind of tree (48 fossil taxa, 17 landmarks in 3D,
/// 1–3 specimens per taxon posed at random, superimposed, averaged per taxon) are classified by
/// `AICc` as the model that made them: early burst with a rate half-life of 12 Myr over 60 Myr
/// (the rate falls 32-fold; σ² = 6·10⁻⁴ mm²/Myr, within-taxon noise 0.008 mm) is chosen in at
/// least 9 of 10 data sets, Brownian motion (σ² = 1.5·10⁻⁴ mm²/Myr, no within-taxon noise) in
/// at least 9 of 10. (Under Brownian motion the adjusted ratio for one extra parameter is about
/// χ²₁ with half its mass at the boundary, so `AICc` picks a richer model about 8 % of the time
/// per alternative.) Within-taxon noise left in Brownian data looks like a pull towards an
/// optimum: with 0.008 mm of it, OU won 3 of these 10 (by `ΔAICc` 1–12), the bias towards OU from
/// measurement error that Cooper et al. 2016 (*Biol. J. Linn. Soc.* 118:64–77) warn of.
#[test]
fn early_burst_and_brownian_data_are_classified() {
    use sutura_core::analysis::evolution::{SpecimenLabels, TipData, TipMatch};
    use sutura_core::analysis::{AnalysisOptions, analyse};
    use sutura_core::export::table::{LandmarkTable, Observation, State};
    let mut counts = [0usize; 2];
    for seed in 0..10u64 {
        for (slot, model, sigma2, within_sd) in [
            (
                0,
                TraitModel::EarlyBurst {
                    half_life_myr: 12.0,
                },
                6.0e-4,
                0.008,
            ),
            (1, TraitModel::BrownianMotion, 1.5e-4, 0.0),
        ] {
            let s = generate_comparative(&ComparativeSpec {
                seed: 100 + seed,
                model,
                sigma2,
                within_sd,
                ..ComparativeSpec::bundled()
            });
            let table = LandmarkTable {
                dim: 3,
                landmarks: s.landmarks.clone(),
                observations: s
                    .specimens
                    .iter()
                    .map(|sp| Observation {
                        specimen: sp.id.clone(),
                        trial: "1".into(),
                        group: None,
                        coords: sp.coords.iter().map(|c| Some(*c)).collect(),
                        states: vec![State::Placed; sp.coords.len()],
                    })
                    .collect(),
            };
            let a = analyse(
                &table,
                &AnalysisOptions {
                    resamples: 9,
                    ..AnalysisOptions::default()
                },
            )
            .unwrap();
            let labels = SpecimenLabels {
                labels: s
                    .specimens
                    .iter()
                    .map(|sp| {
                        (
                            sp.id.clone(),
                            [("taxon".to_owned(), sp.taxon.clone())]
                                .into_iter()
                                .collect(),
                        )
                    })
                    .collect(),
                source: "generated".into(),
            };
            let td = TipData::assemble(
                &a,
                &labels,
                &s.tree,
                &TipMatch::Label("taxon".into()),
                false,
            )
            .unwrap();
            let m = compare_models(&td.tree, &td.rows, &ModelOptions::default()).unwrap();
            let want = if slot == 0 {
                Model::EarlyBurst
            } else {
                Model::BrownianMotion
            };
            if m.best == want {
                counts[slot] += 1;
            }
        }
    }
    assert!(counts[0] >= 9, "early burst chosen {} of 10", counts[0]);
    assert!(counts[1] >= 9, "Brownian motion chosen {} of 10", counts[1]);
}
