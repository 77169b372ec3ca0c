//! Curves of semilandmarks: a traced polyline resampled to equal arc-length spacing.
//!
//! The user traces a curve as control points between two anchor landmarks; the segment's
//! polyline runs from the first anchor through the control points to the second. Its
//! `n` semilandmarks sit at arc lengths `L·j/(n+1)`, `j = 1…n`, along that polyline (`L` its
//! length), so they divide it into `n + 1` pieces of equal length measured along the curve.
//! The anchors themselves are landmarks and are not repeated among the semilandmarks.
//! Resampling is a pure function of the points, so recomputing after an edit and undoing the
//! edit gives back the same bits.

/// Length of a polyline, mm.
#[must_use]
pub fn polyline_length(points: &[[f64; 3]]) -> f64 {
    points.windows(2).map(|w| dist(w[0], w[1])).sum()
}

fn dist(a: [f64; 3], b: [f64; 3]) -> f64 {
    ((b[0] - a[0]).powi(2) + (b[1] - a[1]).powi(2) + (b[2] - a[2]).powi(2)).sqrt()
}

/// The `n` points strictly inside a polyline that divide it into `n + 1` pieces of equal arc
/// length. A polyline of zero length (all points equal) gives `n` copies of its point; fewer
/// than two points give `None`.
#[must_use]
pub fn resample_interior(points: &[[f64; 3]], n: usize) -> Option<Vec<[f64; 3]>> {
    if points.len() < 2 {
        return None;
    }
    let mut cumulative = Vec::with_capacity(points.len());
    let mut total = 0.0;
    cumulative.push(0.0);
    for w in points.windows(2) {
        total += dist(w[0], w[1]);
        cumulative.push(total);
    }
    if total == 0.0 {
        return Some(vec![points[0]; n]);
    }
    let mut out = Vec::with_capacity(n);
    let mut seg = 0;
    for j in 1..=n {
        let s = total * j as f64 / (n + 1) as f64;
        // advance to the segment holding arc length s (segments of zero length are skipped)
        while seg + 2 < points.len() && cumulative[seg + 1] < s {
            seg += 1;
        }
        let len = cumulative[seg + 1] - cumulative[seg];
        let t = if len > 0.0 {
            ((s - cumulative[seg]) / len).clamp(0.0, 1.0)
        } else {
            0.0
        };
        let (a, b) = (points[seg], points[seg + 1]);
        out.push([
            a[0] + t * (b[0] - a[0]),
            a[1] + t * (b[1] - a[1]),
            a[2] + t * (b[2] - a[2]),
        ]);
    }
    Some(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    #[test]
    fn straight_line_is_divided_evenly() {
        let p = resample_interior(&[[0.0, 0.0, 0.0], [4.0, 0.0, 0.0]], 3).unwrap();
        assert_eq!(p, vec![[1.0, 0.0, 0.0], [2.0, 0.0, 0.0], [3.0, 0.0, 0.0]]);
        assert_eq!(resample_interior(&[[1.0, 2.0, 3.0]], 2), None);
        assert_eq!(
            resample_interior(&[[1.0, 2.0, 3.0], [1.0, 2.0, 3.0]], 2).unwrap(),
            vec![[1.0, 2.0, 3.0]; 2]
        );
        assert!(
            resample_interior(&[[0.0; 3], [1.0, 0.0, 0.0]], 0)
                .unwrap()
                .is_empty()
        );
    }

    #[test]
    fn around_a_corner() {
        // an L of legs 3 and 1 (length 4): points at arc lengths 1, 2, 3 lie on the first leg,
        // with 5 points at 2/3, 4/3, 2, 8/3 on it and 10/3 on the second leg
        let l = [[0.0, 0.0, 0.0], [3.0, 0.0, 0.0], [3.0, 1.0, 0.0]];
        let p = resample_interior(&l, 5).unwrap();
        assert!((p[3][0] - 8.0 / 3.0).abs() < 1e-12 && p[3][1] == 0.0);
        assert!((p[4][0] - 3.0).abs() < 1e-12 && (p[4][1] - 1.0 / 3.0).abs() < 1e-12);
    }

    proptest! {
        /// The semilandmarks lie on the polyline at arc lengths total·j/(n+1). The polyline is
        /// monotone in x (steps of 0.1..3 mm), so a point's segment, and its arc length, are
        /// unambiguous.
        #[test]
        fn equal_arc_length(
            steps in prop::collection::vec((0.1f64..3.0, -2.0f64..2.0, -2.0f64..2.0), 1..8),
            n in 0usize..12,
        ) {
            let mut pts = vec![[0.0, 0.0, 0.0]];
            for (dx, y, z) in &steps {
                let last = pts[pts.len() - 1];
                pts.push([last[0] + dx, *y, *z]);
            }
            let p = resample_interior(&pts, n).unwrap();
            prop_assert_eq!(p.len(), n);
            let total = polyline_length(&pts);
            for (j, q) in p.iter().enumerate() {
                let seg = (0..pts.len() - 1)
                    .find(|&s| q[0] <= pts[s + 1][0] + 1e-12)
                    .unwrap();
                let (a, b) = (pts[seg], pts[seg + 1]);
                // on the segment: the distances to its ends add up to its length
                let off = dist(a, *q) + dist(*q, b) - dist(a, b);
                prop_assert!(off.abs() < 1e-9, "point {} off its segment by {}", j, off);
                let arc = polyline_length(&pts[..=seg]) + dist(a, *q);
                let want = total * (j + 1) as f64 / (n + 1) as f64;
                prop_assert!((arc - want).abs() < 1e-9 * total, "arc {} want {}", arc, want);
            }
        }
    }
}
