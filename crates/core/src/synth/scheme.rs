//! The landmark scheme of the synthetic skulls: named points, their Bookstein types, bilateral
//! pairs, which are surface points, one curve of semilandmarks, and linear measurements;
//! [`scheme_toml`] writes it as a scheme file (`sample_volumes/scheme.toml`).
//!
//! Bookstein types (Bookstein 1991, "Morphometric tools for landmark data", ch. 3, from memory):
//! 1 = a discrete juxtaposition of structures, 2 = a maximum of curvature or the tip of a
//! process, 3 = an extremal point defined relative to other structures (an end of a diameter).

use serde::Serialize;

/// The identifier written into every ground-truth file.
pub const SCHEME_ID: &str = "sutura-synthetic-skull-v1";

/// One named landmark.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct LandmarkDef {
    pub id: &'static str,
    pub name: &'static str,
    pub definition_text: &'static str,
    /// 1, 2 or 3 (see the module docs).
    pub bookstein_type: u8,
    pub bilateral_partner: Option<&'static str>,
    /// `true` for a point on the bone surface (the iso-50 level of the partial-volume edge);
    /// `false` for a constructed point inside a space (a cavity or socket centre).
    pub on_surface: bool,
}

/// A curve of sliding semilandmarks between two fixed landmarks.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct CurveDef {
    pub id: &'static str,
    pub name: &'static str,
    pub definition_text: &'static str,
    /// The fixed landmarks at its ends; they are not repeated among the curve's points.
    pub start: &'static str,
    pub end: &'static str,
    /// Number of semilandmarks strictly between `start` and `end`.
    pub n_points: usize,
}

const fn lm(
    id: &'static str,
    name: &'static str,
    definition_text: &'static str,
    bookstein_type: u8,
    bilateral_partner: Option<&'static str>,
    on_surface: bool,
) -> LandmarkDef {
    LandmarkDef {
        id,
        name,
        definition_text,
        bookstein_type,
        bilateral_partner,
        on_surface,
    }
}

/// The landmarks, midline first, then left/right pairs (left = the animal's left, `+y` in the
/// specimen frame).
#[must_use]
#[allow(clippy::too_many_lines, reason = "one literal entry per landmark")]
pub fn scheme() -> Vec<LandmarkDef> {
    vec![
        lm(
            "snout_tip",
            "tip of snout",
            "anterior-most point of the rostrum on the midline",
            2,
            None,
            true,
        ),
        lm(
            "crest_top",
            "top of midline crest",
            "dorsal-most point of the sagittal crest over the braincase",
            3,
            None,
            true,
        ),
        lm(
            "occipital_condyle",
            "occipital condyle",
            "posterior-most point of the occipital condyle on the midline",
            2,
            None,
            true,
        ),
        lm(
            "symphysis_ventral",
            "mandibular symphysis, ventral",
            "ventral-most point of the mandibular symphysis on the midline",
            2,
            None,
            true,
        ),
        lm(
            "endocranium_centre",
            "centre of endocranial cavity",
            "centre of the braincase cavity (constructed, not on bone)",
            3,
            None,
            false,
        ),
        lm(
            "naris_anterior_L",
            "left naris, anterior wall",
            "anterior wall of the left external naris, at the height of the opening's centre",
            2,
            Some("naris_anterior_R"),
            true,
        ),
        lm(
            "naris_anterior_R",
            "right naris, anterior wall",
            "anterior wall of the right external naris, at the height of the opening's centre",
            2,
            Some("naris_anterior_L"),
            true,
        ),
        lm(
            "orbit_anterior_L",
            "left orbit, anterior margin",
            "anterior wall of the left orbit, in the horizontal plane through its centre",
            2,
            Some("orbit_anterior_R"),
            true,
        ),
        lm(
            "orbit_anterior_R",
            "right orbit, anterior margin",
            "anterior wall of the right orbit, in the horizontal plane through its centre",
            2,
            Some("orbit_anterior_L"),
            true,
        ),
        lm(
            "orbit_posterior_L",
            "left orbit, posterior margin",
            "posterior wall of the left orbit (postorbital bar or braincase), in the horizontal \
             plane through its centre",
            2,
            Some("orbit_posterior_R"),
            true,
        ),
        lm(
            "orbit_posterior_R",
            "right orbit, posterior margin",
            "posterior wall of the right orbit (postorbital bar or braincase), in the horizontal \
             plane through its centre",
            2,
            Some("orbit_posterior_L"),
            true,
        ),
        lm(
            "orbit_centre_L",
            "left orbit centre",
            "centre of the left orbit (constructed, in the socket space)",
            3,
            Some("orbit_centre_R"),
            false,
        ),
        lm(
            "orbit_centre_R",
            "right orbit centre",
            "centre of the right orbit (constructed, in the socket space)",
            3,
            Some("orbit_centre_L"),
            false,
        ),
        lm(
            "jaw_joint_L",
            "left jaw articulation",
            "lateral-most point of the left quadrate condyle, where the mandible articulates",
            1,
            Some("jaw_joint_R"),
            true,
        ),
        lm(
            "jaw_joint_R",
            "right jaw articulation",
            "lateral-most point of the right quadrate condyle, where the mandible articulates",
            1,
            Some("jaw_joint_L"),
            true,
        ),
        lm(
            "braincase_lateral_L",
            "left endocranial wall",
            "lateral-most point of the inner surface of the left braincase wall (end of the \
             greatest endocranial width)",
            3,
            Some("braincase_lateral_R"),
            true,
        ),
        lm(
            "braincase_lateral_R",
            "right endocranial wall",
            "lateral-most point of the inner surface of the right braincase wall (end of the \
             greatest endocranial width)",
            3,
            Some("braincase_lateral_L"),
            true,
        ),
    ]
}

/// The curves of the scheme.
#[must_use]
pub fn curves() -> Vec<CurveDef> {
    vec![CurveDef {
        id: "dorsal_midline",
        name: "dorsal midline",
        definition_text: "the dorsal outline of the skull in the midsagittal plane, from the snout \
                          tip to the top of the crest, traced through control points; its \
                          semilandmarks sit at equal arc length along the trace",
        start: "snout_tip",
        end: "crest_top",
        n_points: 8,
    }]
}

/// A linear measurement of the sample scheme: `kind` is `distance` (two points),
/// `angle` (end, vertex, end), `point_to_line` (the point, then two points on the line) or
/// `curve_length` (one curve id).
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct MeasurementSpec {
    pub id: &'static str,
    pub name: &'static str,
    pub definition_text: &'static str,
    pub kind: &'static str,
    pub points: &'static [&'static str],
}

const fn ms(
    id: &'static str,
    name: &'static str,
    definition_text: &'static str,
    kind: &'static str,
    points: &'static [&'static str],
) -> MeasurementSpec {
    MeasurementSpec {
        id,
        name,
        definition_text,
        kind,
        points,
    }
}

/// The measurements of the sample scheme: lengths and widths that differ between the two
/// groups (snout length, endocranial width), two angles of the head's outline, and the dorsal
/// outline's length.
#[must_use]
pub fn measurements() -> Vec<MeasurementSpec> {
    vec![
        ms(
            "skull_length",
            "skull length",
            "snout tip to occipital condyle",
            "distance",
            &["snout_tip", "occipital_condyle"],
        ),
        ms(
            "preorbital_length",
            "preorbital length",
            "snout tip to the line through the anterior orbit margins",
            "point_to_line",
            &["snout_tip", "orbit_anterior_L", "orbit_anterior_R"],
        ),
        ms(
            "endocranial_width",
            "endocranial width",
            "greatest width of the endocranial cavity, between the inner braincase walls",
            "distance",
            &["braincase_lateral_L", "braincase_lateral_R"],
        ),
        ms(
            "jaw_joint_width",
            "width across the jaw joints",
            "left to right jaw articulation",
            "distance",
            &["jaw_joint_L", "jaw_joint_R"],
        ),
        ms(
            "interorbital_distance",
            "distance between orbit centres",
            "left to right orbit centre",
            "distance",
            &["orbit_centre_L", "orbit_centre_R"],
        ),
        ms(
            "orbit_length_L",
            "left orbit length",
            "anterior to posterior margin of the left orbit",
            "distance",
            &["orbit_anterior_L", "orbit_posterior_L"],
        ),
        ms(
            "orbit_length_R",
            "right orbit length",
            "anterior to posterior margin of the right orbit",
            "distance",
            &["orbit_anterior_R", "orbit_posterior_R"],
        ),
        ms(
            "crest_height",
            "crest height",
            "top of the crest above the line from snout tip to occipital condyle",
            "point_to_line",
            &["crest_top", "snout_tip", "occipital_condyle"],
        ),
        ms(
            "head_taper_angle",
            "head taper angle",
            "angle at the snout tip between the two jaw joints",
            "angle",
            &["jaw_joint_L", "snout_tip", "jaw_joint_R"],
        ),
        ms(
            "profile_angle",
            "profile angle",
            "angle at the occipital condyle between the snout tip and the top of the crest",
            "angle",
            &["snout_tip", "occipital_condyle", "crest_top"],
        ),
        ms(
            "dorsal_outline_length",
            "dorsal outline length",
            "length along the traced dorsal midline from snout tip to crest top",
            "curve_length",
            &["dorsal_midline"],
        ),
    ]
}

/// A string as a TOML value (quoted and escaped).
fn quoted(s: &str) -> String {
    toml::Value::String(s.to_owned()).to_string()
}

fn list(items: &[&str]) -> String {
    let q: Vec<String> = items.iter().map(|s| quoted(s)).collect();
    format!("[{}]", q.join(", "))
}

/// The sample scheme as a TOML scheme file (the format `landmarks::scheme` reads).
#[must_use]
pub fn scheme_toml() -> String {
    use std::fmt::Write;
    let mut t = String::new();
    let roman = ["", "I", "II", "III"];
    let _ = write!(
        t,
        "# Landmark scheme of Sutura's synthetic skull sample (invented data: `sutura sample`).\n\
         # A lab's own scheme has the same layout; the README documents every key.\n\
         format_version = 1\n\
         id = {}\n\
         name = \"Synthetic skull\"\n\
         description = \"\"\"\n\
         Small reptile-like skulls embedded in resin. Specimen frame: x forward (snout), y to the \
         animal's left, z up; left landmarks end in _L, right ones in _R.\"\"\"\n",
        quoted(SCHEME_ID)
    );
    for l in scheme() {
        let _ = write!(
            t,
            "\n[[landmark]]\nid = {}\nname = {}\ntype = \"{}\"\ndefinition = {}\n",
            quoted(l.id),
            quoted(l.name),
            roman[usize::from(l.bookstein_type)],
            quoted(l.definition_text)
        );
        if let Some(p) = l.bilateral_partner {
            let _ = writeln!(t, "partner = {}", quoted(p));
        }
        if !l.on_surface {
            let _ = writeln!(t, "surface = false");
        }
    }
    for c in curves() {
        let _ = write!(
            t,
            "\n[[curve]]\nid = {}\nname = {}\ndefinition = {}\nanchors = {}\nsemilandmarks = {}\n",
            quoted(c.id),
            quoted(c.name),
            quoted(c.definition_text),
            list(&[c.start, c.end]),
            c.n_points
        );
    }
    for m in measurements() {
        let _ = write!(
            t,
            "\n[[measurement]]\nid = {}\nname = {}\ndefinition = {}\n",
            quoted(m.id),
            quoted(m.name),
            quoted(m.definition_text)
        );
        let _ = match m.kind {
            "point_to_line" => writeln!(
                t,
                "point_to_line = {{ point = {}, line = {} }}",
                quoted(m.points[0]),
                list(&m.points[1..])
            ),
            "curve_length" => writeln!(t, "curve_length = {}", quoted(m.points[0])),
            kind => writeln!(t, "{kind} = {}", list(m.points)),
        };
    }
    t
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::BTreeSet;

    #[test]
    fn ids_unique_and_pairs_reciprocal() {
        let s = scheme();
        let ids: BTreeSet<_> = s.iter().map(|l| l.id).collect();
        assert_eq!(ids.len(), s.len());
        for l in &s {
            assert!((1..=3).contains(&l.bookstein_type));
            if let Some(p) = l.bilateral_partner {
                let partner = s.iter().find(|o| o.id == p).expect("partner exists");
                assert_eq!(partner.bilateral_partner, Some(l.id));
                assert_eq!(partner.on_surface, l.on_surface);
            }
        }
        for c in curves() {
            assert!(ids.contains(c.start) && ids.contains(c.end));
        }
    }

    /// The bundled `sample_volumes/scheme.toml` is what the generator writes.
    #[test]
    fn bundled_scheme_file_is_current() {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("../../sample_volumes/scheme.toml");
        let bundled = std::fs::read_to_string(&path).unwrap();
        assert!(
            bundled == scheme_toml(),
            "{} is stale: regenerate it with `sutura sample`",
            path.display()
        );
    }

    /// The TOML text reads back through the scheme parser as the same scheme.
    #[test]
    fn toml_scheme_matches_the_definitions() {
        use crate::landmarks::scheme::{BooksteinType, MeasurementKind, Scheme};
        let s = Scheme::parse(&scheme_toml(), "scheme.toml").unwrap();
        assert_eq!(s.id, SCHEME_ID);
        let defs = scheme();
        assert_eq!(s.landmarks.len(), defs.len());
        for (l, d) in s.landmarks.iter().zip(&defs) {
            assert_eq!(l.id, d.id);
            assert_eq!(l.name, d.name);
            assert_eq!(l.definition, d.definition_text);
            let t = [BooksteinType::I, BooksteinType::II, BooksteinType::III];
            assert_eq!(l.bookstein_type, t[usize::from(d.bookstein_type) - 1]);
            assert_eq!(l.partner.as_deref(), d.bilateral_partner);
            assert_eq!(l.on_surface, d.on_surface);
        }
        let c = &s.curves[0];
        assert_eq!(
            (c.anchors.as_slice(), c.semilandmarks.as_slice()),
            (
                &["snout_tip".to_owned(), "crest_top".to_owned()][..],
                &[8][..]
            )
        );
        assert_eq!(s.measurements.len(), measurements().len());
        assert_eq!(
            s.measurements[1].kind,
            MeasurementKind::PointToLine {
                point: "snout_tip".into(),
                line: ["orbit_anterior_L".into(), "orbit_anterior_R".into()]
            }
        );
        assert_eq!(s.measurements[9].kind.name(), "angle");
    }
}
