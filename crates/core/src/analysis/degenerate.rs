//! Property tests of the whole analysis on degenerate samples: identical shapes, collinear
//! landmarks, mirror images, one specimen per group, extreme scales. Whatever the sample, the
//! analysis finishes (or, for a full Procrustes fit that cannot be made, fails naming the
//! specimen), writes every file it can, and says what it left out, one line per omission.

use proptest::prelude::*;

use super::*;
use crate::export::table::{LandmarkTable, Observation, State};
use crate::shape::Fit;

/// How the specimens of a generated sample relate to each other.
#[derive(Clone, Copy, Debug)]
enum Kind {
    /// One shape in many poses and sizes.
    Identical,
    /// Every configuration's landmarks on one line.
    Collinear,
    /// Half the specimens are mirror images of the other half.
    Mirror,
    /// Every specimen in its own group.
    OnePerGroup,
    /// Random shapes at scales from 1e-300 to 1e300 (one exponent per specimen).
    ExtremeScale,
}

fn kind() -> impl Strategy<Value = Kind> {
    prop_oneof![
        Just(Kind::Identical),
        Just(Kind::Collinear),
        Just(Kind::Mirror),
        Just(Kind::OnePerGroup),
        Just(Kind::ExtremeScale),
    ]
}

/// `p` rotated by the angles `a` (about z, then y, then x; only about z in 2D).
fn rotate(p: [f64; 3], a: [f64; 3], m: usize) -> [f64; 3] {
    let (s, c) = a[0].sin_cos();
    let mut q = [c * p[0] - s * p[1], s * p[0] + c * p[1], p[2]];
    if m == 3 {
        let (s, c) = a[1].sin_cos();
        q = [c * q[0] + s * q[2], q[1], -s * q[0] + c * q[2]];
        let (s, c) = a[2].sin_cos();
        q = [q[0], c * q[1] - s * q[2], s * q[1] + c * q[2]];
    }
    q
}

#[derive(Clone, Debug)]
struct Case {
    kind: Kind,
    m: usize,
    table: LandmarkTable,
}

prop_compose! {
    fn case()(
        kind in kind(),
        m in 2usize..=3,
        k in 3usize..=6,
        n in 3usize..=8,
        seed in proptest::collection::vec(-1.0f64..1.0, 6 * 3 + 8 * 8 + 8 * 6 * 3),
        exponents in proptest::collection::vec(-300i32..=300, 8),
    ) -> Case {
        let mut it = seed.into_iter();
        let mut next = move || it.next().unwrap_or(0.5);
        let base: Vec<[f64; 3]> = (0..k)
            .map(|l| match kind {
                Kind::Collinear => {
                    let t = l as f64 + 0.3 * next();
                    [t, 0.5 * t, if m == 3 { -0.2 * t } else { 0.0 }]
                }
                _ => [next(), next(), if m == 3 { next() } else { 0.0 }],
            })
            .collect();
        let mut observations = Vec::new();
        for s in 0..n {
            let pose = [3.0 * next(), 3.0 * next(), 3.0 * next()];
            let shift = [10.0 * next(), 10.0 * next(), if m == 3 { 10.0 * next() } else { 0.0 }];
            let size = match kind {
                Kind::ExtremeScale => 10f64.powi(exponents[s]),
                _ => 1.5 + next(),
            };
            let coords = base
                .iter()
                .map(|&p| {
                    let mut p = p;
                    match kind {
                        Kind::Mirror if s % 2 == 1 => p[0] = -p[0],
                        Kind::OnePerGroup | Kind::ExtremeScale => {
                            p = [p[0] + 0.2 * next(), p[1] + 0.2 * next(), p[2] + 0.2 * next()];
                        }
                        Kind::Collinear => {
                            let t = 0.2 * next();
                            p = [p[0] + t, p[1] + 0.5 * t, p[2] - if m == 3 { 0.2 * t } else { 0.0 }];
                        }
                        _ => {}
                    }
                    let q = rotate(p, pose, m);
                    let mut out = [0.0; 3];
                    for d in 0..m {
                        out[d] = size * (q[d] + shift[d]);
                    }
                    Some(out)
                })
                .collect();
            let group = match kind {
                Kind::OnePerGroup => format!("G{s}"),
                _ => ["north", "south"][s % 2].to_owned(),
            };
            observations.push(Observation {
                specimen: format!("SP-{s}"),
                trial: "1".into(),
                group: Some(group),
                coords,
                states: vec![State::Placed; k],
            });
        }
        let table = LandmarkTable {
            dim: m,
            landmarks: (0..k).map(|l| format!("L{l}")).collect(),
            observations,
        };
        Case { kind, m, table }
    }
}

fn options(fit: Fit) -> AnalysisOptions {
    AnalysisOptions {
        gpa: GpaOptions {
            fit,
            ..GpaOptions::default()
        },
        resamples: 19,
        ..AnalysisOptions::default()
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 48, ..ProptestConfig::default() })]

    #[test]
    fn the_analysis_finishes_and_says_what_it_left_out(c in case()) {
        let a = analyse(&c.table, &options(Fit::Partial))
            .map_err(|e| TestCaseError::fail(format!("{:?} m={}: {e}", c.kind, c.m)))?;
        prop_assert!(a.gpa.aligned.data().iter().all(|v| v.is_finite()));
        let report = a.report();
        for o in &report.not_produced {
            prop_assert!(!o.reason.is_empty() && !o.reason.contains('\n') && o.reason.len() < 400,
                "{o:?}");
        }
        match c.kind {
            Kind::Identical => {
                prop_assert_eq!(a.components(), 0, "{:?}", a.pca.variances);
                prop_assert!(a.allometry.is_none() || a.allometry.as_ref().is_some_and(|x| x.r_squared.is_finite()));
                prop_assert!(report.not_produced.iter().any(|o| o.output.starts_with("pc1_shapes")));
                prop_assert!(report.not_produced.iter().any(|o| o.output.starts_with("morphospace")));
            }
            Kind::OnePerGroup => {
                prop_assert!(a.disparity.iter().all(|d| d.n == 1 && d.note.is_some()));
                prop_assert!(a.group_test.is_none());
                prop_assert_eq!(
                    report.not_produced.iter().filter(|o| o.output.starts_with("disparity of group")).count(),
                    c.table.observations.len()
                );
            }
            _ => {}
        }
        let dir = tempfile::tempdir().unwrap();
        let tables = a.write_tables(dir.path(), "generated").unwrap();
        let figures = a.write_figures(dir.path()).unwrap();
        for p in tables.iter().chain(&figures) {
            prop_assert!(p.metadata().unwrap().len() > 0, "{}", p.display());
        }
        let drawn = a.figures().iter().filter(|f| f.figure.is_ok()).count();
        prop_assert_eq!(figures.len(), 2 * drawn);
        let summary: serde_json::Value =
            serde_json::from_slice(&std::fs::read(dir.path().join("summary.json")).unwrap()).unwrap();
        prop_assert_eq!(
            summary["not_produced"].as_array().map(Vec::len),
            Some(report.not_produced.len())
        );
    }

    /// A full Procrustes fit either succeeds or fails on the specimen that lies 90° from the
    /// mean, naming it by its id; it never panics and never blames a specimen of nonzero size
    /// for having none.
    #[test]
    fn a_full_fit_succeeds_or_names_the_specimen(c in case()) {
        match analyse(&c.table, &options(Fit::Full)) {
            Ok(a) => prop_assert!(a.gpa.aligned.data().iter().all(|v| v.is_finite())),
            Err(e) => {
                let text = e.to_string();
                prop_assert!(text.starts_with("specimen SP-"), "{text}");
                prop_assert!(!text.contains("coincide"), "{text}");
            }
        }
    }
}

/// The reproducers of issue 10 in miniature: an equilateral triangle, its mirror image and a
/// collinear triangle. The PC1 ±2 SD shapes leave the tangent space, so the figure is drawn at
/// the largest excursion that stays inside and says so; the morphospace (one component) is left
/// out with its reason.
#[test]
fn very_dissimilar_triangles_draw_a_scaled_excursion() {
    let h = 3f64.sqrt() / 2.0;
    let tri = |pts: [[f64; 2]; 3], s: usize| Observation {
        specimen: format!("T{s}"),
        trial: "1".into(),
        group: Some("A".into()),
        coords: pts.iter().map(|p| Some([p[0], p[1], 0.0])).collect(),
        states: vec![State::Placed; 3],
    };
    let table = LandmarkTable {
        dim: 2,
        landmarks: vec!["a".into(), "b".into(), "c".into()],
        observations: vec![
            tri([[0.0, 0.0], [1.0, 0.0], [0.5, h]], 0),
            tri([[0.0, 0.0], [1.0, 0.0], [0.5, -h]], 1),
            tri([[0.0, 0.0], [1.0, 0.0], [2.0, 0.0]], 2),
        ],
    };
    let a = analyse(&table, &options(Fit::Partial)).unwrap();
    let (fig, note) = a.pc1_shapes_figure().unwrap();
    let note = note.expect("the excursion is scaled");
    assert!(note.contains("instead of ±2 SD"), "{note}");
    let legend: Vec<&str> = fig
        .items
        .iter()
        .filter_map(|i| match i {
            crate::chart::Item::Text { text, .. } => Some(text.as_str()),
            _ => None,
        })
        .collect();
    assert!(
        legend
            .iter()
            .any(|t| t.contains("leaves the tangent space")),
        "{legend:?}"
    );
    let scaled: f64 = legend
        .iter()
        .find_map(|t| t.strip_prefix("PC1 +")?.strip_suffix(" SD")?.parse().ok())
        .unwrap();
    assert!(scaled > 0.5 && scaled < 2.0, "{scaled}");
    // the excursion drawn stays inside the bound, and a hundredth of an SD more would not
    let norm = |s: f64| a.pca.tangent_at(0, s).unwrap().norm();
    assert!(norm(scaled) <= output::MAX_TANGENT_NORM && norm(-scaled) <= output::MAX_TANGENT_NORM);
    assert!(
        norm(scaled + 0.01).max(norm(-scaled - 0.01)) > output::MAX_TANGENT_NORM,
        "{scaled}"
    );
    let report = a.report();
    assert!(
        report
            .not_produced
            .iter()
            .any(|o| o.output.starts_with("morphospace")
                && o.reason.contains("one principal component")),
        "{report:?}"
    );
    assert_eq!(report.notes, vec![note]);
}

/// 1e300 mm coordinates overflow a plain sum of squares; the centroid size is still exact.
#[test]
fn extreme_coordinates_are_sized_exactly() {
    for scale in [1e300, 1e-300] {
        let obs = |s: usize, stretch: f64| Observation {
            specimen: format!("X{s}"),
            trial: "1".into(),
            group: None,
            coords: [[0.0, 0.0], [3.0 * stretch, 0.0], [0.0, 4.0]]
                .iter()
                .map(|p| Some([scale * p[0], scale * p[1], 0.0]))
                .collect(),
            states: vec![State::Placed; 3],
        };
        let table = LandmarkTable {
            dim: 2,
            landmarks: vec!["a".into(), "b".into(), "c".into()],
            observations: vec![obs(0, 1.0), obs(1, 1.1), obs(2, 0.9)],
        };
        for fit in [Fit::Partial, Fit::Full] {
            let a = analyse(&table, &options(fit)).unwrap();
            // centroid of (0,0), (3,0), (0,4) is (1, 4/3): squared distances 1+16/9, 4+16/9,
            // 1+64/9, summing to 50/3 (Dryden & Mardia 2016, eq. 2.1)
            let cs = a.gpa.centroid_sizes[0] / scale;
            assert!((cs - (50.0f64 / 3.0).sqrt()).abs() < 1e-12, "{scale}: {cs}");
        }
    }
}
