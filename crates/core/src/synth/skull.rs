//! The skull as an implicit solid in its own specimen frame, and its landmarks.
//!
//! Specimen frame (millimetres): `x` runs from the back of the skull to the snout (anterior is
//! `+x`), `y` to the animal's left, `z` dorsal. The midsagittal plane is `y = 0`, and the
//! function is built from `|y|` for every paired part, so the solid is exactly mirror
//! symmetric: `f(x, y, z) == f(x, -y, z)` bit for bit.
//!
//! [`Skull::sdf`] is negative inside bone, positive outside, zero on the surface. Its parts are
//! distance functions of simple primitives (ellipsoids, tapered capsules, spheres) joined by a
//! polynomial smooth minimum, so the value is close to a signed distance near the surface, which
//! is what the partial-volume edge of the renderer needs.
//!
//! Landmarks are built from the parameters: each is a construction point and a direction in the
//! specimen frame, and a surface landmark is the first crossing of the zero level along that ray,
//! found by marching and then bisection on the implicit function itself (to 1e-10 mm). The
//! position is therefore exact for the solid, independent of any voxel grid.

use nalgebra::{Point3, Vector3};
use rand::Rng;
use rand_distr::StandardNormal;

/// The shape parameters of one skull, in millimetres (angles none).
///
/// Group means come from [`SkullParams::group_mean`]; a specimen is the mean with a size factor
/// and per-parameter variation drawn by [`SkullParams::sample`].
#[derive(Clone, Debug, PartialEq)]
pub struct SkullParams {
    /// Overall size factor applied to every length (1.0 = the reference skull).
    pub size: f64,
    /// Rostrum (snout) length from its base to the centre of its tip sphere, before scaling.
    pub rostrum_length: f64,
    /// Rostrum radius at its base and at its tip.
    pub rostrum_base_radius: f64,
    pub rostrum_tip_radius: f64,
    /// Dorsoventral flattening of the rostrum (z radius / lateral radius).
    pub rostrum_flatten: f64,
    /// Braincase outer ellipsoid semi-axes (anteroposterior, lateral, dorsoventral).
    pub braincase_radii: [f64; 3],
    /// Braincase wall thickness.
    pub braincase_wall: f64,
    /// Height of the midline crest above the braincase roof, and its half-length.
    pub crest_height: f64,
    pub crest_half_length: f64,
    /// Orbit (eye socket) radius and its lateral offset from the midline.
    pub orbit_radius: f64,
    pub orbit_lateral: f64,
    /// Lateral offset of the jaw articulation (quadrate) from the midline.
    pub quadrate_lateral: f64,
    /// Radius of the jaw bars (upper arch and mandible).
    pub bar_radius: f64,
    /// External naris radius.
    pub naris_radius: f64,
    /// Occipital condyle radius.
    pub condyle_radius: f64,
}

/// The allometric exponent of rostrum length on size: the snout grows faster than the skull
/// (positive allometry), so the size factor alone changes shape a little.
pub const ROSTRUM_ALLOMETRY: f64 = 1.3;

impl SkullParams {
    /// The mean skull of a group. `long_snout` selects the long-snouted, narrow-headed form.
    #[must_use]
    pub fn group_mean(long_snout: bool) -> Self {
        if long_snout {
            Self {
                size: 1.0,
                rostrum_length: 1.55,
                rostrum_base_radius: 0.40,
                rostrum_tip_radius: 0.13,
                rostrum_flatten: 0.62,
                braincase_radii: [0.72, 0.58, 0.46],
                braincase_wall: 0.13,
                crest_height: 0.16,
                crest_half_length: 0.42,
                orbit_radius: 0.33,
                orbit_lateral: 0.46,
                quadrate_lateral: 0.70,
                bar_radius: 0.09,
                naris_radius: 0.075,
                condyle_radius: 0.12,
            }
        } else {
            Self {
                size: 0.88,
                rostrum_length: 1.15,
                rostrum_base_radius: 0.44,
                rostrum_tip_radius: 0.17,
                rostrum_flatten: 0.66,
                braincase_radii: [0.74, 0.70, 0.50],
                braincase_wall: 0.13,
                crest_height: 0.10,
                crest_half_length: 0.36,
                orbit_radius: 0.36,
                orbit_lateral: 0.52,
                quadrate_lateral: 0.82,
                bar_radius: 0.095,
                naris_radius: 0.085,
                condyle_radius: 0.13,
            }
        }
    }

    /// A specimen: the group mean with its size drawn with coefficient of variation `size_cv`
    /// and each other parameter varied independently with coefficient `shape_cv` (the crest,
    /// a display structure, varies twice as much).
    pub fn sample<R: Rng>(mean: &Self, size_cv: f64, shape_cv: f64, rng: &mut R) -> Self {
        let mut normal = |cv: f64| {
            let z: f64 = rng.sample(StandardNormal);
            // truncated at 2.5 SD so that no draw builds a degenerate solid
            1.0 + cv * z.clamp(-2.5, 2.5)
        };
        let size = mean.size * normal(size_cv);
        let mut p = Self {
            size,
            rostrum_length: mean.rostrum_length * normal(shape_cv),
            rostrum_base_radius: mean.rostrum_base_radius * normal(shape_cv),
            rostrum_tip_radius: mean.rostrum_tip_radius * normal(shape_cv),
            rostrum_flatten: mean.rostrum_flatten * normal(shape_cv),
            braincase_radii: [
                mean.braincase_radii[0] * normal(shape_cv),
                mean.braincase_radii[1] * normal(shape_cv),
                mean.braincase_radii[2] * normal(shape_cv),
            ],
            braincase_wall: mean.braincase_wall * normal(shape_cv),
            crest_height: mean.crest_height * normal(2.0 * shape_cv),
            crest_half_length: mean.crest_half_length * normal(shape_cv),
            orbit_radius: mean.orbit_radius * normal(shape_cv),
            orbit_lateral: mean.orbit_lateral * normal(shape_cv),
            quadrate_lateral: mean.quadrate_lateral * normal(shape_cv),
            bar_radius: mean.bar_radius * normal(shape_cv),
            naris_radius: mean.naris_radius * normal(shape_cv),
            condyle_radius: mean.condyle_radius * normal(shape_cv),
        };
        // allometry relative to the group's mean size
        p.rostrum_length *= (size / mean.size).powf(ROSTRUM_ALLOMETRY - 1.0);
        p
    }
}

/// A skull built from its parameters: the primitives placed in the specimen frame, lengths
/// already multiplied by the size factor.
#[derive(Clone, Debug)]
pub struct Skull {
    pub params: SkullParams,
    braincase_centre: Point3<f64>,
    braincase_radii: Vector3<f64>,
    wall: f64,
    rostrum_base: Point3<f64>,
    rostrum_tip: Point3<f64>,
    rostrum_r0: f64,
    rostrum_r1: f64,
    flatten: f64,
    crest_centre: Point3<f64>,
    crest_radii: Vector3<f64>,
    condyle: Point3<f64>,
    condyle_r: f64,
    /// Left-side parts (`y > 0`); the right side is their mirror image.
    orbit: Point3<f64>,
    orbit_r: f64,
    naris: Point3<f64>,
    naris_r: f64,
    quadrate: Point3<f64>,
    quadrate_r: f64,
    quadrate_top: Point3<f64>,
    arch_front: Point3<f64>,
    postorbital_top: Point3<f64>,
    symphysis: Point3<f64>,
    bar_r: f64,
    blend: f64,
}

impl Skull {
    #[must_use]
    pub fn new(params: &SkullParams) -> Self {
        let s = params.size;
        let [bx, by, bz] = params.braincase_radii.map(|r| r * s);
        let braincase_centre = Point3::new(-0.8 * s, 0.0, 0.0);
        let rl = params.rostrum_length * s;
        let r0 = params.rostrum_base_radius * s;
        let r1 = params.rostrum_tip_radius * s;
        let flatten = params.rostrum_flatten;
        let rostrum_base = Point3::new(braincase_centre.x + 0.55 * bx, 0.0, -0.02 * s);
        // the snout droops a little towards its tip
        let rostrum_tip = Point3::new(rostrum_base.x + rl, 0.0, -0.16 * s);
        let crest_radii = Vector3::new(
            params.crest_half_length * s,
            0.075 * s,
            (params.crest_height * s + 0.12 * s).max(0.05),
        );
        let crest_centre = Point3::new(braincase_centre.x - 0.1 * bx, 0.0, bz - 0.12 * s);
        let condyle_r = params.condyle_radius * s;
        let condyle = Point3::new(braincase_centre.x - bx + 0.02 * s, 0.0, -0.3 * bz);
        let orbit_r = params.orbit_radius * s;
        let orbit = Point3::new(rostrum_base.x + 0.05 * s, params.orbit_lateral * s, 0.0);
        let naris_r = params.naris_radius * s;
        // the naris sits on the dorsolateral face of the rostrum, 70 % of the way to its tip
        let t_n = 0.72;
        let axis_n = rostrum_base + (rostrum_tip - rostrum_base) * t_n;
        let rad_n = r0 + (r1 - r0) * t_n;
        let naris = Point3::new(axis_n.x, 0.45 * rad_n, axis_n.z + 0.8 * rad_n * flatten);
        let bar_r = params.bar_radius * s;
        let quadrate = Point3::new(
            braincase_centre.x - 0.45 * bx,
            params.quadrate_lateral * s,
            -0.42 * s,
        );
        let quadrate_top = Point3::new(quadrate.x + 0.05 * s, 0.55 * by, 0.05 * s);
        let arch_front = Point3::new(
            rostrum_base.x + 0.35 * rl,
            0.75 * (r0 + (r1 - r0) * 0.35),
            rostrum_base.z - 0.25 * s,
        );
        let postorbital_top = Point3::new(orbit.x - orbit_r - 0.06 * s, 0.62 * by, 0.30 * s);
        let symphysis = Point3::new(rostrum_tip.x - 0.12 * s, 0.0, rostrum_tip.z - 0.2 * s);
        Self {
            params: params.clone(),
            braincase_centre,
            braincase_radii: Vector3::new(bx, by, bz),
            wall: params.braincase_wall * s,
            rostrum_base,
            rostrum_tip,
            rostrum_r0: r0,
            rostrum_r1: r1,
            flatten,
            crest_centre,
            crest_radii,
            condyle,
            condyle_r,
            orbit,
            orbit_r,
            naris,
            naris_r,
            quadrate,
            quadrate_r: 0.11 * s,
            quadrate_top,
            arch_front,
            postorbital_top,
            symphysis,
            bar_r,
            blend: 0.08 * s,
        }
    }

    /// Signed distance-like value in millimetres at a specimen-frame point: negative in bone.
    #[must_use]
    pub fn sdf(&self, p: Point3<f64>) -> f64 {
        let q = Point3::new(p.x, p.y.abs(), p.z);
        let k = self.blend;
        // braincase and rostrum, then the endocranial cavity carved from both
        let bc = sd_ellipsoid(p - self.braincase_centre, &self.braincase_radii);
        let ro = self.sd_rostrum(p);
        let mut f = smin(bc, ro, 2.0 * k);
        let cavity = sd_ellipsoid(
            p - self.braincase_centre,
            &self.braincase_radii.map(|r| r - self.wall),
        );
        f = f.max(-cavity);
        // midline crest and occipital condyle
        f = smin(f, sd_ellipsoid(p - self.crest_centre, &self.crest_radii), k);
        f = smin(f, (p - self.condyle).norm() - self.condyle_r, 0.5 * k);
        // paired: quadrate with its column to the braincase, the upper arch (front of the snout
        // to the quadrate, with a postorbital bar), and the mandible (quadrate to symphysis)
        let quad = (q - self.quadrate).norm() - self.quadrate_r;
        let column = sd_capsule(q, self.quadrate, self.quadrate_top, 0.8 * self.bar_r);
        let arch = sd_capsule(q, self.arch_front, self.quadrate, self.bar_r);
        let arch_mid = self.arch_front + (self.quadrate - self.arch_front) * 0.42;
        let postorbital = sd_capsule(q, arch_mid, self.postorbital_top, 1.1 * self.bar_r);
        let mandible_back = self.quadrate + Vector3::new(0.0, 0.0, -0.06 * self.params.size);
        let mandible = sd_capsule(
            q,
            mandible_back,
            self.symphysis + Vector3::new(0.0, 0.06 * self.params.size, 0.0),
            1.1 * self.bar_r,
        );
        let paired = smin(smin(quad, column, k), smin(arch, postorbital, k), k);
        f = smin(f, paired, k);
        f = smin(f, mandible, 0.5 * k);
        // paired openings cut last: orbits and external nares
        f = f.max(-((q - self.orbit).norm() - self.orbit_r));
        f = f.max(-((q - self.naris).norm() - self.naris_r));
        f
    }

    fn sd_rostrum(&self, p: Point3<f64>) -> f64 {
        // a tapered capsule in a frame squashed along z
        let squash = |v: Point3<f64>| Point3::new(v.x, v.y, v.z / self.flatten);
        let a = squash(self.rostrum_base);
        let b = squash(self.rostrum_tip);
        let ps = squash(p);
        let ba = b - a;
        let t = ((ps - a).dot(&ba) / ba.norm_squared()).clamp(0.0, 1.0);
        let r = self.rostrum_r0 + (self.rostrum_r1 - self.rostrum_r0) * t;
        // scale back towards a distance: the squash stretches z by 1 / flatten
        ((ps - (a + ba * t)).norm() - r) * self.flatten.sqrt()
    }

    /// An axis-aligned box in the specimen frame that holds the whole solid.
    #[must_use]
    pub fn bounds(&self) -> (Point3<f64>, Point3<f64>) {
        let s = self.params.size;
        let lo = Point3::new(
            self.condyle.x - self.condyle_r - 0.05 * s,
            -(self.quadrate.y + self.quadrate_r + 0.05 * s),
            self.symphysis.z.min(self.quadrate.z - 0.06 * s) - 1.2 * self.bar_r - 0.05 * s,
        );
        let hi = Point3::new(
            self.rostrum_tip.x + self.rostrum_r1 + 0.05 * s,
            self.quadrate.y + self.quadrate_r + 0.05 * s,
            self.crest_centre.z + self.crest_radii.z + 0.05 * s,
        );
        (lo, hi)
    }

    /// The first crossing of the zero level along the ray `origin + t·dir`, `0 < t ≤ t_max`,
    /// from whichever side the origin is on. `None` when there is no crossing.
    #[must_use]
    pub fn surface_along(
        &self,
        origin: Point3<f64>,
        dir: Vector3<f64>,
        t_max: f64,
    ) -> Option<Point3<f64>> {
        let d = dir.try_normalize(1e-12)?;
        let step = 0.002 * self.params.size;
        let inside0 = self.sdf(origin) < 0.0;
        let mut t0 = 0.0;
        let mut t = step;
        while t <= t_max {
            if (self.sdf(origin + d * t) < 0.0) != inside0 {
                let (mut lo, mut hi) = (t0, t);
                for _ in 0..60 {
                    let mid = 0.5 * (lo + hi);
                    if (self.sdf(origin + d * mid) < 0.0) == inside0 {
                        lo = mid;
                    } else {
                        hi = mid;
                    }
                }
                return Some(origin + d * (0.5 * (lo + hi)));
            }
            t0 = t;
            t += step;
        }
        None
    }

    /// Left-side construction points and directions; the right side is the mirror (`y → -y`).
    fn mirror(p: Point3<f64>, left: bool) -> Point3<f64> {
        if left { p } else { Point3::new(p.x, -p.y, p.z) }
    }

    fn mirror_v(v: Vector3<f64>, left: bool) -> Vector3<f64> {
        if left {
            v
        } else {
            Vector3::new(v.x, -v.y, v.z)
        }
    }

    /// The landmark with scheme id `id`, in the specimen frame, or `None` if the id is unknown
    /// or its construction ray finds no surface (a parameter set outside the supported range).
    #[must_use]
    pub fn landmark(&self, id: &str) -> Option<Point3<f64>> {
        let s = self.params.size;
        let reach = 2.0 * s;
        let side = |name: &str| -> Option<(bool, String)> {
            if let Some(base) = name.strip_suffix("_L") {
                Some((true, base.to_owned()))
            } else {
                name.strip_suffix("_R").map(|base| (false, base.to_owned()))
            }
        };
        match id {
            // exit from inside the tip sphere forwards
            "snout_tip" => self.surface_along(self.rostrum_tip, Vector3::x(), reach),
            // straight down onto the crest from above its centre
            "crest_top" => self.surface_along(
                self.crest_centre + Vector3::new(0.0, 0.0, reach),
                -Vector3::z(),
                2.0 * reach,
            ),
            // exit from the condyle centre backwards
            "occipital_condyle" => self.surface_along(self.condyle, -Vector3::x(), reach),
            // exit from the symphysis downwards
            "symphysis_ventral" => self.surface_along(self.symphysis, -Vector3::z(), reach),
            // internal: the centre of the endocranial cavity
            "endocranium_centre" => Some(self.braincase_centre),
            _ => {
                let (left, base) = side(id)?;
                let m = |p: Point3<f64>| Self::mirror(p, left);
                let mv = |v: Vector3<f64>| Self::mirror_v(v, left);
                match base.as_str() {
                    "naris_anterior" => {
                        self.surface_along(m(self.naris), mv(Vector3::new(1.0, 0.0, -0.5)), reach)
                    }
                    "orbit_anterior" => self.surface_along(
                        m(self.orbit),
                        // towards the rostral axis two orbit radii ahead
                        mv(Vector3::new(2.0 * self.orbit_r, -self.orbit.y, 0.0)),
                        reach,
                    ),
                    "orbit_posterior" => {
                        self.surface_along(m(self.orbit), mv(-Vector3::x()), reach)
                    }
                    "orbit_centre" => Some(m(self.orbit)),
                    "jaw_joint" => self.surface_along(m(self.quadrate), mv(Vector3::y()), reach),
                    "braincase_lateral" => self.surface_along(
                        m(self.braincase_centre + Vector3::new(-0.15 * s, 0.0, 0.0)),
                        mv(Vector3::y()),
                        reach,
                    ),
                    _ => None,
                }
            }
        }
    }

    /// `n` points on the dorsal midline between the snout tip and the crest top (both
    /// excluded), evenly spaced in `x`, each the first surface met by a ray straight down.
    #[must_use]
    pub fn dorsal_midline(&self, n: usize) -> Option<Vec<Point3<f64>>> {
        let a = self.landmark("snout_tip")?;
        let b = self.landmark("crest_top")?;
        let top = self.crest_centre.z + self.crest_radii.z + 1.0;
        (1..=n)
            .map(|i| {
                let x = a.x + (b.x - a.x) * i as f64 / (n + 1) as f64;
                self.surface_along(Point3::new(x, 0.0, top), -Vector3::z(), 4.0)
            })
            .collect()
    }
}

/// Smooth minimum (polynomial, blend width `k`): equals `min(a, b)` when they differ by more
/// than `k`. Reference: the quadratic smooth minimum of C. Hargreaves / I. Quilez ("smooth
/// minimum" article, iquilezles.org), from memory.
fn smin(a: f64, b: f64, k: f64) -> f64 {
    let h = (k - (a - b).abs()).max(0.0) / k;
    a.min(b) - h * h * k * 0.25
}

/// Approximate signed distance to an axis-aligned ellipsoid with semi-axes `r`, centred at the
/// origin: `k0 (k0 - 1) / k1` with `k0 = |p / r|`, `k1 = |p / r²|`. Exact on the surface (zero
/// level) and first-order accurate near it. Reference: I. Quilez, "ellipsoid SDF" (from memory).
fn sd_ellipsoid(p: Vector3<f64>, r: &Vector3<f64>) -> f64 {
    let k0 = p.component_div(r).norm();
    let k1 = p.component_div(&r.component_mul(r)).norm();
    if k1 < 1e-12 {
        // at the centre: the distance to the nearest point of the surface
        return -r.min();
    }
    k0 * (k0 - 1.0) / k1
}

/// Exact signed distance to a capsule (segment `a`–`b`, radius `r`).
fn sd_capsule(p: Point3<f64>, a: Point3<f64>, b: Point3<f64>, r: f64) -> f64 {
    let pa = p - a;
    let ba = b - a;
    let t = (pa.dot(&ba) / ba.norm_squared()).clamp(0.0, 1.0);
    (pa - ba * t).norm() - r
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn primitives_are_distances_where_exact() {
        // sphere-shaped ellipsoid equals the sphere distance
        let r = Vector3::new(1.0, 1.0, 1.0);
        assert_relative_eq!(sd_ellipsoid(Vector3::new(2.0, 0.0, 0.0), &r), 1.0);
        assert_relative_eq!(sd_ellipsoid(Vector3::new(0.0, 0.5, 0.0), &r), -0.5);
        // ellipsoid zero level is exact
        let r = Vector3::new(2.0, 1.0, 0.5);
        assert_relative_eq!(sd_ellipsoid(Vector3::new(0.0, 0.0, 0.5), &r), 0.0);
        assert_relative_eq!(sd_ellipsoid(Vector3::new(2.0, 0.0, 0.0), &r), 0.0);
        let c = sd_capsule(
            Point3::new(0.5, 1.0, 0.0),
            Point3::origin(),
            Point3::new(1.0, 0.0, 0.0),
            0.25,
        );
        assert_relative_eq!(c, 0.75);
        assert_relative_eq!(smin(0.0, 5.0, 1.0), 0.0);
        assert!(smin(0.0, 0.0, 1.0) < 0.0);
    }

    #[test]
    fn solid_is_mirror_symmetric_and_landmarks_are_on_it() {
        let sk = Skull::new(&SkullParams::group_mean(true));
        for &(x, y, z) in &[(0.3, 0.21, 0.05), (-1.0, 0.6, -0.3), (0.9, 0.07, 0.1)] {
            let a = sk.sdf(Point3::new(x, y, z));
            let b = sk.sdf(Point3::new(x, -y, z));
            assert_eq!(a.to_bits(), b.to_bits());
        }
        let p = sk.landmark("snout_tip").unwrap();
        assert!(sk.sdf(p).abs() < 1e-9);
        assert!(sk.landmark("no_such_landmark").is_none());
    }

    #[test]
    fn bounds_hold_the_solid() {
        // on a grid over each face of the box the solid must be absent
        for long in [true, false] {
            for size in [0.8, 1.2] {
                let mut p = SkullParams::group_mean(long);
                p.size = size;
                let sk = Skull::new(&p);
                let (lo, hi) = sk.bounds();
                let n: u32 = 24;
                for a in 0..n {
                    for b in 0..n {
                        let u = f64::from(a) / f64::from(n - 1);
                        let v = f64::from(b) / f64::from(n - 1);
                        let x = lo.x + (hi.x - lo.x) * u;
                        let y = lo.y + (hi.y - lo.y) * v;
                        let z = lo.z + (hi.z - lo.z) * v;
                        let yy = lo.y + (hi.y - lo.y) * u;
                        for q in [
                            Point3::new(x, y, lo.z),
                            Point3::new(x, y, hi.z),
                            Point3::new(x, lo.y, z),
                            Point3::new(x, hi.y, z),
                            Point3::new(lo.x, yy, z),
                            Point3::new(hi.x, yy, z),
                        ] {
                            assert!(sk.sdf(q) > 0.0, "bone on the box face at {q:?}");
                        }
                    }
                }
            }
        }
    }
}
