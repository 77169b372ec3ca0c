//! A synthetic comparative sample: a tree of fossil taxa and landmark configurations evolved
//! on it under a stated model and seed, for the walk-through of disparity through time, rates
//! and model comparison, and for the tests.
//!
//! The scenario (invented): the *Orrin Basin radiation*, a clade of small skull-bearing animals
//! (the 17 landmarks of the skull sample's scheme) known from fossils between 140 and 80 Ma.
//!
//! The model, step by step (all randomness from `ChaCha8Rng` seeded by [`ComparativeSpec::seed`],
//! one stream per purpose):
//! 1. **Tree**: a birth–death process from a root split (speciation rate 1, extinction rate
//!    `turnover`), started again if the clade dies out, until the lineages living and extinct
//!    number `taxa`; the living run on for one more waiting time, and the tree is scaled to
//!    `duration_myr`. Every extinct lineage is a fossil tip at its extinction (its last
//!    appearance), so the tree is not ultrametric. Tip ages are `root_age_ma − time`.
//! 2. **Shapes**: the mean skull of the sample's long-snouted group; every coordinate of every
//!    landmark evolves independently down the tree by Brownian motion with rate `sigma2`
//!    (mm² per Myr), or by early burst with rate `sigma2 · e^{r t}`, `r = −ln 2 / half-life`
//!    (Harmon et al. 2010).
//! 3. **Specimens**: 1 to `max_specimens` per taxon, each its taxon's shape plus independent
//!    normal noise of `within_sd` mm per coordinate, then scaled by a factor in `[0.9, 1.1]`,
//!    rotated at random and moved, as specimens lie in their scans. A share `range_share` of
//!    the taxa are dated by an interval (`range_myr` wide around the true age) instead of a
//!    number.
//!
//! Labels: `clade` (the side of the root split the taxon is on: Tessera or Orbicula) and
//! `interval` (`early` for taxa older than the middle of the span, else `late`).

use nalgebra::{Rotation3, Vector3};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Exp, StandardNormal};
use std::path::{Path, PathBuf};

use crate::evolution::Tree;
use crate::evolution::simulate::{BrownianPlan, early_burst_lengths};
use crate::evolution::tree::Node;
use crate::export::{ExportError, num, write_atomic, write_csv};

/// The generator's version, written into `model.json`.
pub const COMPARATIVE_VERSION: &str = "1";

/// How the shapes evolve.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
#[serde(tag = "model", rename_all = "snake_case")]
pub enum TraitModel {
    BrownianMotion,
    /// Rate halving every `half_life_myr`.
    EarlyBurst {
        half_life_myr: f64,
    },
}

/// What to generate.
#[derive(Clone, Debug, PartialEq, serde::Serialize)]
pub struct ComparativeSpec {
    pub taxa: usize,
    pub seed: u64,
    pub root_age_ma: f64,
    pub duration_myr: f64,
    /// Extinction rate over speciation rate.
    pub turnover: f64,
    pub model: TraitModel,
    /// Rate per coordinate at the root, mm² per Myr.
    pub sigma2: f64,
    pub within_sd: f64,
    pub max_specimens: usize,
    pub range_share: f64,
    pub range_myr: f64,
}

impl ComparativeSpec {
    /// The bundled sample: 48 taxa, early burst with a 12 Myr half-life.
    #[must_use]
    pub fn bundled() -> Self {
        Self {
            taxa: 48,
            seed: 2024,
            root_age_ma: 140.0,
            duration_myr: 60.0,
            turnover: 0.9,
            model: TraitModel::EarlyBurst {
                half_life_myr: 12.0,
            },
            sigma2: 6.0e-4,
            within_sd: 0.008,
            max_specimens: 3,
            range_share: 0.3,
            range_myr: 5.0,
        }
    }
}

/// One generated specimen.
#[derive(Clone, Debug, PartialEq)]
pub struct ComparativeSpecimen {
    pub id: String,
    pub taxon: String,
    pub clade: String,
    pub interval: String,
    /// The taxon's true age (Ma).
    pub age_ma: f64,
    /// The interval given instead of the age, for some taxa.
    pub range_ma: Option<(f64, f64)>,
    /// Landmarks in the scheme's order, mm.
    pub coords: Vec<[f64; 3]>,
}

/// The generated sample.
#[derive(Clone, Debug)]
pub struct ComparativeSample {
    pub spec: ComparativeSpec,
    pub tree: Tree,
    pub landmarks: Vec<String>,
    pub specimens: Vec<ComparativeSpecimen>,
}

fn stream(seed: u64, s: u64) -> ChaCha8Rng {
    let mut r = ChaCha8Rng::seed_from_u64(seed);
    r.set_stream(s);
    r
}

/// A birth–death tree scaled to `duration` (module docs, step 1).
fn fossil_tree(spec: &ComparativeSpec, rng: &mut ChaCha8Rng) -> Tree {
    let (birth, death) = (1.0, spec.turnover);
    loop {
        // nodes: parent, start time, end time (None while the lineage lives)
        let mut parent: Vec<Option<usize>> = vec![None, Some(0), Some(0)];
        let mut start = vec![0.0, 0.0, 0.0];
        let mut end: Vec<Option<f64>> = vec![Some(0.0), None, None];
        let mut alive: Vec<usize> = vec![1, 2];
        let mut tips_ended = 0usize;
        let mut t = 0.0;
        while !alive.is_empty() && alive.len() + tips_ended < spec.taxa {
            let k = alive.len() as f64;
            t += rng.sample(Exp::new(k * (birth + death)).expect("positive rate"));
            let pick = rng.random_range(0..alive.len());
            let node = alive.swap_remove(pick);
            end[node] = Some(t);
            if rng.random_bool(birth / (birth + death)) {
                for _ in 0..2 {
                    parent.push(Some(node));
                    start.push(t);
                    end.push(None);
                    alive.push(parent.len() - 1);
                }
            } else {
                tips_ended += 1;
            }
        }
        if alive.is_empty() {
            continue; // the clade died out: start again
        }
        t += rng.sample(Exp::new(alive.len() as f64 * (birth + death)).expect("positive rate"));
        let scale = spec.duration_myr / t;
        let mut nodes: Vec<Node> = (0..parent.len())
            .map(|i| Node {
                parent: parent[i],
                children: Vec::new(),
                length: None,
                label: None,
            })
            .collect();
        for i in 1..parent.len() {
            let p = parent[i].expect("not the root");
            nodes[p].children.push(i);
            nodes[i].length = Some((end[i].unwrap_or(t) - start[i]) * scale);
        }
        let mut tree = Tree::from_nodes(nodes).expect("a simulated tree is a tree");
        // name the tips in their tree order
        let tips = tree.tips().to_vec();
        let mut nodes = tree.nodes().to_vec();
        for (k, &tip) in tips.iter().enumerate() {
            nodes[tip].label = Some(format!("OB{:02}", k + 1));
        }
        tree = Tree::from_nodes(nodes).expect("relabelled");
        // lengths rounded to 6 decimals and nodes renumbered as a reader numbers them, so the
        // Newick file carries this very tree
        let mut nodes = tree.nodes().to_vec();
        for n in &mut nodes {
            n.length = n.length.map(|l| (l * 1e6).round() / 1e6);
        }
        let rounded = Tree::from_nodes(nodes).expect("rounded");
        return Tree::parse(&rounded.to_newick(), "simulated tree")
            .expect("our own Newick reads back");
    }
}

/// Generates the sample (module docs).
#[must_use]
pub fn generate_comparative(spec: &ComparativeSpec) -> ComparativeSample {
    let mut tree_rng = stream(spec.seed, 1);
    let tree = fossil_tree(spec, &mut tree_rng);
    let skull = super::Skull::new(&super::SkullParams::group_mean(true));
    let defs = super::scheme();
    let landmarks: Vec<String> = defs.iter().map(|d| d.id.to_owned()).collect();
    let mean: Vec<f64> = defs
        .iter()
        .flat_map(|d| {
            let p = skull
                .landmark(d.id)
                .expect("the mean skull has every landmark");
            [p.x, p.y, p.z]
        })
        .collect();
    let p = mean.len();
    let lengths = match spec.model {
        TraitModel::BrownianMotion => tree.lengths(),
        TraitModel::EarlyBurst { half_life_myr } => {
            early_burst_lengths(&tree, -(2f64.ln()) / half_life_myr)
        }
    };
    let plan = BrownianPlan::new(&tree, &lengths);
    let mut shape_rng = stream(spec.seed, 2);
    let (mut work, mut tips) = (Vec::new(), Vec::new());
    plan.run(
        &vec![spec.sigma2.sqrt(); p],
        &mut shape_rng,
        &mut work,
        &mut tips,
    );

    let depth = tree.tip_depths();
    let root = tree.root();
    let first_clade: Vec<usize> = tree.descendant_tips(tree.nodes()[root].children[0]);
    let mut spec_rng = stream(spec.seed, 3);
    let mut specimens = Vec::new();
    for (t, &tip) in tree.tips().iter().enumerate() {
        let taxon = tree.nodes()[tip].label.clone().expect("labelled");
        let age = spec.root_age_ma - depth[t];
        let clade = if first_clade.contains(&tip) {
            "Tessera"
        } else {
            "Orbicula"
        };
        let interval = if depth[t] < 0.5 * spec.duration_myr {
            "early"
        } else {
            "late"
        };
        let range_ma = spec_rng.random_bool(spec.range_share).then(|| {
            let shift = spec_rng.random_range(-0.5..0.5) * spec.range_myr;
            let mid = age + shift;
            (
                ((mid + spec.range_myr / 2.0) * 1e3).round() / 1e3,
                ((mid - spec.range_myr / 2.0) * 1e3).round() / 1e3,
            )
        });
        let count = spec_rng.random_range(1..=spec.max_specimens);
        for s in 0..count {
            let size = spec_rng.random_range(0.9..1.1);
            let axis = Vector3::new(
                spec_rng.sample::<f64, _>(StandardNormal),
                spec_rng.sample(StandardNormal),
                spec_rng.sample(StandardNormal),
            );
            let angle = spec_rng.random_range(0.0..std::f64::consts::PI);
            let rot = Rotation3::from_axis_angle(&nalgebra::Unit::new_normalize(axis), angle);
            let shift = Vector3::new(
                spec_rng.random_range(0.0..5.0),
                spec_rng.random_range(0.0..5.0),
                spec_rng.random_range(0.0..5.0),
            );
            let coords = (0..p / 3)
                .map(|l| {
                    let mut v = Vector3::zeros();
                    for d in 0..3 {
                        let z: f64 = spec_rng.sample(StandardNormal);
                        v[d] = mean[l * 3 + d] + tips[t * p + l * 3 + d] + spec.within_sd * z;
                    }
                    let w = rot * (v * size) + shift;
                    [w.x, w.y, w.z].map(|c| (c * 1e6).round() / 1e6)
                })
                .collect();
            specimens.push(ComparativeSpecimen {
                id: format!("{taxon}-{}", s + 1),
                taxon: taxon.clone(),
                clade: clade.to_owned(),
                interval: interval.to_owned(),
                age_ma: (age * 1e3).round() / 1e3,
                range_ma,
                coords,
            });
        }
    }
    ComparativeSample {
        spec: spec.clone(),
        tree,
        landmarks,
        specimens,
    }
}

impl ComparativeSample {
    /// Writes `tree.nwk`, `landmarks.csv` (long landmark table, `group` = clade),
    /// `specimens.csv` (`specimen, taxon, clade, interval, age_ma, oldest_ma, youngest_ma`:
    /// a number or an interval per specimen) and `model.json` into `dir`.
    pub fn write(&self, dir: &Path) -> Result<Vec<PathBuf>, ExportError> {
        std::fs::create_dir_all(dir).map_err(|e| ExportError::os(dir, e))?;
        let tree_path = dir.join("tree.nwk");
        let newick = self.tree.to_newick();
        write_atomic(&tree_path, |w| w.write_all(newick.as_bytes()))?;
        let mut rows = Vec::new();
        for s in &self.specimens {
            for (l, c) in self.landmarks.iter().zip(&s.coords) {
                rows.push(vec![
                    s.id.clone(),
                    l.clone(),
                    num(c[0]),
                    num(c[1]),
                    num(c[2]),
                    s.clade.clone(),
                ]);
            }
        }
        let lm_path = dir.join("landmarks.csv");
        write_csv(
            &lm_path,
            &["specimen", "landmark", "x", "y", "z", "group"],
            &rows,
        )?;
        let rows: Vec<Vec<String>> = self
            .specimens
            .iter()
            .map(|s| {
                let (age, old, young) = match s.range_ma {
                    Some((o, y)) => (String::new(), num(o), num(y)),
                    None => (num(s.age_ma), String::new(), String::new()),
                };
                vec![
                    s.id.clone(),
                    s.taxon.clone(),
                    s.clade.clone(),
                    s.interval.clone(),
                    age,
                    old,
                    young,
                ]
            })
            .collect();
        let sp_path = dir.join("specimens.csv");
        write_csv(
            &sp_path,
            &[
                "specimen",
                "taxon",
                "clade",
                "interval",
                "age_ma",
                "oldest_ma",
                "youngest_ma",
            ],
            &rows,
        )?;
        let model_path = dir.join("model.json");
        let model = serde_json::json!({
            "generator": "sutura synthetic comparative sample",
            "version": COMPARATIVE_VERSION,
            "scenario": "Orrin Basin radiation (invented)",
            "spec": self.spec,
            "tree": "birth-death tree (speciation 1, extinction = turnover) until taxa lineages living and extinct, scaled to duration_myr; extinct lineages are fossil tips at their extinction",
            "shapes": "mean skull of the sample's long-snouted group; each coordinate evolves independently by the model with rate sigma2 (mm^2/Myr) at the root",
            "specimens": "1..max_specimens per taxon with within_sd mm of noise per coordinate, scaled by 0.9-1.1, rotated and moved",
        });
        crate::export::write_json(&model_path, &model)?;
        Ok(vec![tree_path, lm_path, sp_path, model_path])
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bundled_spec_gives_a_fossil_tree_and_is_reproducible() {
        let a = generate_comparative(&ComparativeSpec::bundled());
        let b = generate_comparative(&ComparativeSpec::bundled());
        assert!(a.tree == b.tree, "same tree");
        assert_eq!(a.specimens, b.specimens);
        assert_eq!(a.tree.n_tips(), 48);
        assert!(!a.tree.is_ultrametric());
        assert!((a.tree.height() - 60.0).abs() < 1e-4);
        assert!(a.specimens.len() > 48 && a.specimens.len() <= 144);
        assert!(a.specimens.iter().any(|s| s.range_ma.is_some()));
        // the Newick text carries the tree exactly
        assert!(Tree::parse(&a.tree.to_newick(), "t").unwrap() == a.tree);
    }
}
