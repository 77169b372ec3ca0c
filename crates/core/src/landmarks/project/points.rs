//! A project's points flattened into observations for export (`export::points` writes them).

use super::{LandmarkState, Project};
use crate::export::points::PointSets;
use crate::export::table::{LandmarkTable, Observation, State};
use crate::landmarks::scheme::Scheme;
use crate::shape::sliding::Curve;

/// The project's points as observations ready for export, one per specimen × trial in
/// project order, trials with nothing digitised left out; points are the scheme's landmarks,
/// then (with `with_semilandmarks`) each curve's semilandmarks, named as
/// `CurveDef::semilandmark_names` says. A landmark not yet digitised is written as missing and
/// counted in `not_digitised`; a curve not traced, or whose anchors lack positions, gives
/// missing semilandmarks. `group_key`: the group label copied into the table's `group` column.
#[must_use]
pub fn flatten(project: &Project, group_key: Option<&str>, with_semilandmarks: bool) -> PointSets {
    let scheme = project.scheme();
    let mut names: Vec<String> = scheme.landmarks.iter().map(|l| l.id.clone()).collect();
    let mut semilandmark = vec![false; names.len()];
    if with_semilandmarks {
        for c in &scheme.curves {
            let n = c.semilandmark_names();
            semilandmark.extend(std::iter::repeat_n(true, n.len()));
            names.extend(n);
        }
    }
    let mut observations = Vec::new();
    let (mut operators, mut groups) = (Vec::new(), Vec::new());
    let mut not_digitised = 0;
    for s in project.specimens() {
        for t in s
            .trials
            .iter()
            .filter(|t| !(t.landmarks.is_empty() && t.curves.is_empty()))
        {
            let mut coords = Vec::with_capacity(names.len());
            let mut states = Vec::with_capacity(names.len());
            for l in &scheme.landmarks {
                match t.landmark(&l.id) {
                    None => {
                        not_digitised += 1;
                        coords.push(None);
                        states.push(State::Missing);
                    }
                    Some(e) => {
                        coords.push(e.position_mm);
                        states.push(match e.state {
                            LandmarkState::Placed => State::Placed,
                            LandmarkState::Missing => State::Missing,
                            LandmarkState::Estimated => State::Estimated,
                        });
                    }
                }
            }
            if with_semilandmarks {
                for c in &scheme.curves {
                    let pts = t.curve(&c.id).and_then(|e| e.semilandmarks(c));
                    for i in 0..c.total_semilandmarks() {
                        let p = pts.as_ref().map(|v| v[i]);
                        coords.push(p);
                        states.push(if p.is_some() {
                            State::Placed
                        } else {
                            State::Missing
                        });
                    }
                }
            }
            observations.push(Observation {
                specimen: s.id.clone(),
                trial: t.id.clone(),
                group: group_key.and_then(|k| s.groups.get(k).cloned()),
                coords,
                states,
            });
            operators.push(t.operator.clone());
            groups.push(s.groups.clone());
        }
    }
    PointSets {
        table: LandmarkTable {
            dim: 3,
            landmarks: names,
            observations,
        },
        semilandmark,
        operators,
        groups,
        not_digitised,
    }
}

/// The scheme's curves as sliding curves over the point order of [`flatten`] with
/// semilandmarks: one curve per segment between two consecutive anchors, running from the
/// first anchor through the segment's semilandmarks to the second (both anchors fixed).
/// Segments without semilandmarks have nothing to slide and are left out.
#[must_use]
pub fn sliding_curves(scheme: &Scheme) -> Vec<Curve> {
    let index = |id: &str| {
        scheme
            .landmarks
            .iter()
            .position(|l| l.id == id)
            .expect("a validated scheme's curve anchors are its landmarks")
    };
    let mut next = scheme.landmarks.len();
    let mut curves = Vec::new();
    for c in &scheme.curves {
        for (s, &n) in c.semilandmarks.iter().enumerate() {
            if n > 0 {
                let mut landmarks = vec![index(&c.anchors[s])];
                landmarks.extend(next..next + n);
                landmarks.push(index(&c.anchors[s + 1]));
                curves.push(Curve { landmarks });
            }
            next += n;
        }
    }
    curves
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::landmarks::project::tests::sample_project;

    #[test]
    fn flattens_in_scheme_order_with_semilandmarks() {
        let p = sample_project();
        let e = flatten(&p, Some("locality"), true);
        // 4 landmarks, then outline's 3 + 2 semilandmarks
        assert_eq!(e.table.landmarks.len(), 9);
        assert_eq!(e.table.landmarks[4], "outline_s01");
        assert_eq!(e.table.observations.len(), 1, "B has no trial");
        let o = &e.table.observations[0];
        assert_eq!(o.group.as_deref(), Some("north pit"));
        assert_eq!(o.coords[0], Some([3.0, 0.2, 0.3]));
        assert_eq!(o.states[2], State::Missing, "eye_R not digitised");
        assert_eq!(e.not_digitised, 1);
        assert!(o.coords[4..].iter().all(Option::is_some));
        assert_eq!(e.semilandmark.iter().filter(|s| **s).count(), 5);
        assert_eq!(e.operators, vec!["ana".to_owned()]);
        // the sample scheme's outline runs through three anchors (3 + 2 semilandmarks)
        let curves = sliding_curves(p.scheme());
        let anchors = &p.scheme().curves[0].anchors;
        let at = |id: &str| e.table.landmarks.iter().position(|n| n == id).unwrap();
        assert_eq!(curves.len(), 2);
        assert_eq!(
            curves[0].landmarks,
            vec![at(&anchors[0]), 4, 5, 6, at(&anchors[1])]
        );
        assert_eq!(
            curves[1].landmarks,
            vec![at(&anchors[1]), 7, 8, at(&anchors[2])]
        );
        let without = flatten(&p, None, false);
        assert_eq!(without.table.landmarks.len(), 4);
        assert_eq!(without.table.observations[0].group, None);
    }
}
