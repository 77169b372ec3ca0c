//! The landmark scheme of the synthetic skulls: named points, their Bookstein types, bilateral
//! pairs, which are surface points, and one curve of semilandmarks.
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
            "left braincase width",
            "lateral-most point of the left braincase wall (end of the greatest width)",
            3,
            Some("braincase_lateral_R"),
            true,
        ),
        lm(
            "braincase_lateral_R",
            "right braincase width",
            "lateral-most point of the right braincase wall (end of the greatest width)",
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
                          tip to the top of the crest; points equally spaced along the \
                          anteroposterior axis",
        start: "snout_tip",
        end: "crest_top",
        n_points: 8,
    }]
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
}
