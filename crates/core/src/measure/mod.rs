//! Linear measurements from landmarks: distances, angles, point-to-line distances and curve
//! lengths, each with the resolution it inherits from the scan's voxel size.
//!
//! Every value is computed in world millimetres (angles reported in degrees) from positions in
//! the frame of the specimen's `world_from_voxel`.
//!
//! **Resolution.** A landmark is placed in a scan whose voxels have a finite size, so each
//! measurement carries a figure for how finely the grid can resolve it. The convention used
//! here (common practice: quote one voxel as the positional uncertainty of a point placed in a
//! scan, and propagate it to first order; the exact form below is ours): each point `p` of the
//! measurement may be off by up to one voxel along the direction in which moving it changes the
//! value fastest, and the points are independent, so
//!
//! ```text
//! resolution = sqrt( Σ_p ( |∇_p f| · e(∇_p f / |∇_p f|) )² ),   e(u) = Σ_i |a_i · u|
//! ```
//!
//! where `f` is the measurement as a function of its points, `a_i` are the voxel's edge vectors
//! (the columns of `world_from_voxel`'s linear part, mm) and `e(u)` is the voxel's extent along
//! the unit direction `u` (its width when projected on a line along `u`). In words:
//! - a **distance** inherits the voxel extent along the line at each end, combined for both
//!   ends: `√2 · e(u)` for the line direction `u` (`√2 · sx` along `x` for voxels `sx × sy × sz`);
//! - a **point-to-line distance** inherits `e(n)` along the normal `n` from the point to the
//!   line, with weights `1`, `1 − t`, `t` for the point and the two line points (`t`: where the
//!   foot of the perpendicular falls along the line, 0 at the first point);
//! - an **angle** inherits, from each end, its voxel extent across its arm (in the plane of the
//!   angle) divided by the arm's length, and from the vertex the same for the vertex's
//!   gradient; reported in degrees;
//! - a **curve length** inherits from each vertex of the polyline (anchors and traced points)
//!   its extent along the sum of the unit directions of its two pieces; nearly straight runs
//!   of the curve contribute almost nothing.
//!
//! It is a resolution, not an error bar: sub-voxel placement (surface picking) can do better,
//! and an ambiguous structure worse; the repeated trials of a project measure the latter.
//!
//! [`table`] measures a whole project: every scheme measurement for every specimen and trial,
//! skipped with a reason where a point is missing. Must not import `gui` or `render`.

pub mod table;

use nalgebra::{Matrix3, Vector3};

/// A measured value with its resolution, in the same unit.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Measured {
    pub value: f64,
    pub resolution: f64,
}

/// Why a measurement has no value although its points exist.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum Degenerate {
    #[error("the two points coincide")]
    Coincident,
    #[error("the two points of the line coincide")]
    NoLine,
    #[error("an arm of the angle has zero length")]
    NoArm,
    #[error("a curve needs at least two points")]
    TooFewPoints,
}

fn v(p: [f64; 3]) -> Vector3<f64> {
    Vector3::new(p[0], p[1], p[2])
}

/// The voxel extent along gradient `g`, times `|g|`: `Σ_i |a_i · g|` (see the module docs).
fn weighted_extent(edges: &Matrix3<f64>, g: &Vector3<f64>) -> f64 {
    (0..3).map(|i| edges.column(i).dot(g).abs()).sum()
}

/// The resolution of a measurement from the gradients of its value with respect to each of
/// its points (module docs). `edges`: the voxel edge vectors as columns, mm.
#[must_use]
pub fn resolution(edges: &Matrix3<f64>, gradients: &[Vector3<f64>]) -> f64 {
    gradients
        .iter()
        .map(|g| weighted_extent(edges, g).powi(2))
        .sum::<f64>()
        .sqrt()
}

/// The largest voxel edge, for directions a degenerate configuration leaves undefined.
fn largest_edge(edges: &Matrix3<f64>) -> f64 {
    (0..3).map(|i| edges.column(i).norm()).fold(0.0, f64::max)
}

/// Distance between two points, mm.
pub fn distance(edges: &Matrix3<f64>, a: [f64; 3], b: [f64; 3]) -> Result<Measured, Degenerate> {
    let d = v(b) - v(a);
    let value = d.norm();
    if value == 0.0 {
        return Err(Degenerate::Coincident);
    }
    let u = d / value;
    Ok(Measured {
        value,
        resolution: resolution(edges, &[-u, u]),
    })
}

/// Angle at `vertex` between the rays to `a` and `c`, degrees in `[0, 180]`.
pub fn angle(
    edges: &Matrix3<f64>,
    a: [f64; 3],
    vertex: [f64; 3],
    c: [f64; 3],
) -> Result<Measured, Degenerate> {
    let (ra, rc) = (v(a) - v(vertex), v(c) - v(vertex));
    let (la, lc) = (ra.norm(), rc.norm());
    if la == 0.0 || lc == 0.0 {
        return Err(Degenerate::NoArm);
    }
    let (ua, uc) = (ra / la, rc / lc);
    // atan2 of |cross| and dot is accurate at every angle, unlike acos of the dot
    let theta = ua.cross(&uc).norm().atan2(ua.dot(&uc));
    // ∂θ/∂a = −(uc − cosθ·ua)/(|ra| sinθ): unit direction across arm a, magnitude 1/|ra|
    let across = |u: &Vector3<f64>, w: &Vector3<f64>| -> Option<Vector3<f64>> {
        (w - u * u.dot(w)).try_normalize(1e-12)
    };
    let deg = 180.0 / std::f64::consts::PI;
    let (Some(pa), Some(pc)) = (across(&ua, &uc), across(&uc, &ua)) else {
        // a straight or null angle: any direction across the arms; use the largest edge
        let e = largest_edge(edges);
        let r = e * (1.0 / la).hypot(1.0 / lc).hypot(1.0 / la + 1.0 / lc);
        return Ok(Measured {
            value: theta * deg,
            resolution: r * deg,
        });
    };
    let ga = -pa / la;
    let gc = -pc / lc;
    let grads = [ga, -(ga + gc), gc];
    Ok(Measured {
        value: theta * deg,
        resolution: resolution(edges, &grads) * deg,
    })
}

/// Distance from `p` to the infinite line through `a` and `b`, mm.
pub fn point_to_line(
    edges: &Matrix3<f64>,
    p: [f64; 3],
    a: [f64; 3],
    b: [f64; 3],
) -> Result<Measured, Degenerate> {
    let ab = v(b) - v(a);
    let len2 = ab.norm_squared();
    if len2 == 0.0 {
        return Err(Degenerate::NoLine);
    }
    let t = (v(p) - v(a)).dot(&ab) / len2;
    let foot = v(a) + ab * t;
    let off = v(p) - foot;
    let value = off.norm();
    let Some(n) = off.try_normalize(1e-300) else {
        // the point is on the line: the normal is any direction across it
        let e = largest_edge(edges);
        return Ok(Measured {
            value,
            resolution: e * (1.0 + (1.0 - t).powi(2) + t * t).sqrt(),
        });
    };
    Ok(Measured {
        value,
        resolution: resolution(edges, &[n, -n * (1.0 - t), -n * t]),
    })
}

/// Length of a polyline, mm.
pub fn polyline_length(edges: &Matrix3<f64>, points: &[[f64; 3]]) -> Result<Measured, Degenerate> {
    if points.len() < 2 {
        return Err(Degenerate::TooFewPoints);
    }
    let units: Vec<Vector3<f64>> = points
        .windows(2)
        .map(|w| {
            (v(w[1]) - v(w[0]))
                .try_normalize(0.0)
                .unwrap_or_else(Vector3::zeros)
        })
        .collect();
    let value = points.windows(2).map(|w| (v(w[1]) - v(w[0])).norm()).sum();
    // ∂L/∂p_i = u_{i−1} − u_i (u: unit direction of each piece; absent ends count as zero)
    let grads: Vec<Vector3<f64>> = (0..points.len())
        .map(|i| {
            let before = if i > 0 {
                units[i - 1]
            } else {
                Vector3::zeros()
            };
            let after = units.get(i).copied().unwrap_or_else(Vector3::zeros);
            before - after
        })
        .collect();
    Ok(Measured {
        value,
        resolution: resolution(edges, &grads),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;
    use proptest::prelude::*;

    fn cube(s: f64) -> Matrix3<f64> {
        Matrix3::from_diagonal_element(s)
    }

    #[test]
    fn closed_form_angles() {
        let e = cube(0.01);
        // right angle; equilateral triangle (60°); 3-4-5 triangle: angle opposite 3 is
        // atan(3/4) = 36.8698976…° (elementary trigonometry)
        let right = angle(&e, [1.0, 0.0, 0.0], [0.0; 3], [0.0, 2.0, 0.0]).unwrap();
        assert_relative_eq!(right.value, 90.0, epsilon = 1e-12);
        let h = 3f64.sqrt() / 2.0;
        let eq = angle(&e, [1.0, 0.0, 0.0], [0.0; 3], [0.5, h, 0.0]).unwrap();
        assert_relative_eq!(eq.value, 60.0, epsilon = 1e-12);
        let t = angle(&e, [4.0, 3.0, 0.0], [0.0; 3], [4.0, 0.0, 0.0]).unwrap();
        assert_relative_eq!(t.value, (3.0f64 / 4.0).atan().to_degrees(), epsilon = 1e-12);
        let straight = angle(&e, [-1.0, 0.0, 0.0], [0.0; 3], [2.0, 0.0, 0.0]).unwrap();
        assert_relative_eq!(straight.value, 180.0, epsilon = 1e-12);
        assert!(straight.resolution > 0.0);
        let tiny = angle(&e, [1.0, 0.0, 0.0], [0.0; 3], [1.0, 1e-9, 0.0]).unwrap();
        assert_relative_eq!(tiny.value, 1e-9f64.to_degrees(), max_relative = 1e-9);
        assert_eq!(
            angle(&e, [0.0; 3], [0.0; 3], [1.0; 3]),
            Err(Degenerate::NoArm)
        );
    }

    #[test]
    fn closed_form_point_line_distances() {
        let e = cube(0.01);
        // P = (0, 3, 4) from the x axis: √(3² + 4²) = 5, whatever the two line points
        for (a, b) in [
            ([0.0; 3], [1.0, 0.0, 0.0]),
            ([7.0, 0.0, 0.0], [-2.0, 0.0, 0.0]),
        ] {
            let d = point_to_line(&e, [0.0, 3.0, 4.0], a, b).unwrap();
            assert_relative_eq!(d.value, 5.0, epsilon = 1e-12);
        }
        // distance from (1, 1, 1) to the line through the origin along (1, 1, 0):
        // |p × u| = |(1,1,1) × (1,1,0)/√2| = √2/√2·… = 1 (the z offset)
        let d = point_to_line(&e, [1.0, 1.0, 1.0], [0.0; 3], [2.0, 2.0, 0.0]).unwrap();
        assert_relative_eq!(d.value, 1.0, epsilon = 1e-12);
        // resolution: normal along z, foot at t = 1/2: weights 1, 1/2, 1/2 of e(z) = 0.01
        assert_relative_eq!(d.resolution, 0.01 * 1.5f64.sqrt(), epsilon = 1e-15);
        let on = point_to_line(&e, [1.0, 0.0, 0.0], [0.0; 3], [2.0, 0.0, 0.0]).unwrap();
        assert!(on.value.abs() < 1e-15);
        assert_eq!(
            point_to_line(&e, [1.0; 3], [2.0; 3], [2.0; 3]),
            Err(Degenerate::NoLine)
        );
    }

    #[test]
    fn distance_resolution_is_the_voxel_extent_along_the_line_at_both_ends() {
        let aniso = Matrix3::from_diagonal(&Vector3::new(0.036, 0.036, 0.05));
        let along_x = distance(&aniso, [0.0; 3], [3.0, 0.0, 0.0]).unwrap();
        assert_relative_eq!(along_x.resolution, 2f64.sqrt() * 0.036, epsilon = 1e-15);
        let along_z = distance(&aniso, [0.0; 3], [0.0, 0.0, 3.0]).unwrap();
        assert_relative_eq!(along_z.resolution, 2f64.sqrt() * 0.05, epsilon = 1e-15);
        // along the cube diagonal a cubic voxel is √3·s wide: (s/√3)·3 = √3·s
        let diag = distance(&cube(0.01), [0.0; 3], [1.0, 1.0, 1.0]).unwrap();
        assert_relative_eq!(
            diag.resolution,
            2f64.sqrt() * 3f64.sqrt() * 0.01,
            epsilon = 1e-15
        );
        assert_relative_eq!(diag.value, 3f64.sqrt(), epsilon = 1e-15);
    }

    #[test]
    fn polyline() {
        let e = cube(0.01);
        let l = polyline_length(&e, &[[0.0; 3], [3.0, 0.0, 0.0], [3.0, 4.0, 0.0]]).unwrap();
        assert_relative_eq!(l.value, 7.0);
        // ends: e along their piece (0.01 each); corner: |(1,0,0) − (0,1,0)| extent = 0.02
        assert_relative_eq!(
            l.resolution,
            (0.0001f64 + 0.0001 + 0.0004).sqrt(),
            epsilon = 1e-15
        );
        assert_eq!(
            polyline_length(&e, &[[0.0; 3]]),
            Err(Degenerate::TooFewPoints)
        );
    }

    /// Central differences of a measurement with respect to one coordinate of one point.
    fn numeric_gradient(f: &dyn Fn(&[[f64; 3]]) -> f64, pts: &[[f64; 3]]) -> Vec<Vector3<f64>> {
        let h = 1e-6;
        (0..pts.len())
            .map(|p| {
                Vector3::from_fn(|a, _| {
                    let mut hi = pts.to_vec();
                    let mut lo = pts.to_vec();
                    hi[p][a] += h;
                    lo[p][a] -= h;
                    (f(&hi) - f(&lo)) / (2.0 * h)
                })
            })
            .collect()
    }

    proptest! {
        /// The resolutions use the analytic gradients; they agree with numeric ones (so the
        /// formulas in the module docs are what is computed).
        #[test]
        fn resolutions_match_numeric_gradients(
            pts in prop::collection::vec(prop::array::uniform3(-3.0f64..3.0), 4),
            s in prop::array::uniform3(0.005f64..0.1),
        ) {
            let edges = Matrix3::from_diagonal(&Vector3::new(s[0], s[1], s[2]))
                * nalgebra::Rotation3::from_euler_angles(0.3, -0.2, 0.7).matrix();
            let check = |f: &dyn Fn(&[[f64; 3]]) -> f64, m: Measured, p: &[[f64; 3]], scale: f64| {
                let g = numeric_gradient(f, p);
                let want = resolution(&edges, &g) * scale;
                prop_assert!((m.resolution - want).abs() <= 1e-5 * (1.0 + want), "{} vs {}", m.resolution, want);
                Ok(())
            };
            let [a, b, c, d] = [pts[0], pts[1], pts[2], pts[3]];
            prop_assume!((v(a) - v(b)).norm() > 0.1 && (v(c) - v(b)).norm() > 0.1);
            let da = distance(&edges, a, b).unwrap();
            check(&|p| (v(p[1]) - v(p[0])).norm(), da, &[a, b], 1.0)?;
            let an = angle(&edges, a, b, c).unwrap();
            prop_assume!(an.value > 1.0 && an.value < 179.0);
            check(&|p| angle(&edges, p[0], p[1], p[2]).unwrap().value, an, &[a, b, c], 1.0)?;
            let pl = point_to_line(&edges, d, a, b).unwrap();
            prop_assume!(pl.value > 0.05);
            check(&|p| point_to_line(&edges, p[0], p[1], p[2]).unwrap().value, pl, &[d, a, b], 1.0)?;
            let poly = polyline_length(&edges, &pts).unwrap();
            prop_assume!(pts.windows(2).all(|w| (v(w[1]) - v(w[0])).norm() > 0.05));
            check(&|p| polyline_length(&edges, p).unwrap().value, poly, &pts, 1.0)?;
        }
    }
}
