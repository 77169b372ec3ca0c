//! Window/level and colour maps.
//!
//! A [`WindowLevel`] maps a value range `[centre - width/2, centre + width/2]` linearly onto
//! grey levels 0..=255, clamping outside; the mapping is monotone (non-decreasing) in the value.
//! [`WindowLevel::from_percentiles`] picks the range from percentiles of the values shown.
//!
//! A [`ColourMap`] turns the grey level into RGBA. `NaN` (outside the volume, or a ray that
//! missed) becomes transparent black `(0, 0, 0, 0)` in RGBA and 0 (black) in grey.

use super::{F32Image, GreyImage, RgbaImage};
use rayon::prelude::*;

/// A display window: values at or below `centre - width/2` are black, at or above
/// `centre + width/2` white, linear between (common practice).
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct WindowLevel {
    pub centre: f64,
    pub width: f64,
}

impl WindowLevel {
    /// `None` unless both are finite and `width > 0`.
    #[must_use]
    pub fn new(centre: f64, width: f64) -> Option<Self> {
        (centre.is_finite() && width.is_finite() && width > 0.0).then_some(Self { centre, width })
    }

    /// The window from `lo` (black) to `hi` (white); `None` unless `lo < hi`, both finite.
    #[must_use]
    pub fn from_range(lo: f64, hi: f64) -> Option<Self> {
        Self::new(0.5 * (lo + hi), hi - lo)
    }

    /// The window from the `lo_pct` to the `hi_pct` percentile (0..=100) of the finite
    /// values, with linear interpolation between order statistics (numpy's default
    /// `percentile` method). When the two percentiles coincide (a flat image) the window is
    /// widened to 1 around them. `None` when there is no finite value or the percentiles are
    /// not `0 <= lo_pct < hi_pct <= 100`.
    #[must_use]
    pub fn from_percentiles(values: &[f32], lo_pct: f64, hi_pct: f64) -> Option<Self> {
        if !(0.0..=100.0).contains(&lo_pct) || !(0.0..=100.0).contains(&hi_pct) || lo_pct >= hi_pct
        {
            return None;
        }
        let mut v: Vec<f32> = values.iter().copied().filter(|x| x.is_finite()).collect();
        if v.is_empty() {
            return None;
        }
        let lo = percentile_in_place(&mut v, lo_pct);
        let hi = percentile_in_place(&mut v, hi_pct);
        if hi > lo {
            Self::from_range(lo, hi)
        } else {
            Self::new(lo, 1.0)
        }
    }

    /// As [`Self::from_percentiles`] over an image's pixels.
    #[must_use]
    pub fn from_image_percentiles(image: &F32Image, lo_pct: f64, hi_pct: f64) -> Option<Self> {
        Self::from_percentiles(&image.pixels, lo_pct, hi_pct)
    }

    /// Lower end of the window (maps to 0).
    #[must_use]
    pub fn low(self) -> f64 {
        self.centre - 0.5 * self.width
    }

    /// Upper end of the window (maps to 255).
    #[must_use]
    pub fn high(self) -> f64 {
        self.centre + 0.5 * self.width
    }

    /// The grey level of a value; `NaN` gives 0.
    #[inline]
    #[must_use]
    pub fn grey(self, value: f64) -> u8 {
        let t = (value - self.low()) / self.width;
        if t.is_nan() {
            return 0;
        }
        (t.clamp(0.0, 1.0) * 255.0).round() as u8
    }

    /// Applies the window to every pixel (`NaN` → 0).
    #[must_use]
    pub fn apply(self, image: &F32Image) -> GreyImage {
        let (lo, scale) = (self.low() as f32, (255.0 / self.width) as f32);
        let pixels = image
            .pixels
            .par_iter()
            .map(|&v| grey_f32(v, lo, scale))
            .collect();
        GreyImage {
            width: image.width,
            height: image.height,
            pixels,
        }
    }

    /// Applies the window and a colour map (`NaN` → transparent black).
    #[must_use]
    pub fn colourize(self, image: &F32Image, map: ColourMap) -> RgbaImage {
        let mut out = RgbaImage {
            width: 0,
            height: 0,
            pixels: Vec::new(),
        };
        self.colourize_into(image, map, &mut out);
        out
    }

    /// As [`Self::colourize`], into `out`, reusing its buffer (no allocation when the size
    /// is unchanged).
    pub fn colourize_into(self, image: &F32Image, map: ColourMap, out: &mut RgbaImage) {
        let lut = map.table();
        let (lo, scale) = (self.low() as f32, (255.0 / self.width) as f32);
        out.pixels.clear();
        out.pixels.resize(image.pixels.len() * 4, 0);
        out.width = image.width;
        out.height = image.height;
        out.pixels
            .par_chunks_mut(4 * 4096)
            .zip(image.pixels.par_chunks(4096))
            .for_each(|(out, vals)| {
                for (o, &v) in out.chunks_exact_mut(4).zip(vals) {
                    let rgba = if v.is_nan() {
                        [0; 4]
                    } else {
                        lut[usize::from(grey_f32(v, lo, scale))]
                    };
                    o.copy_from_slice(&rgba);
                }
            });
    }
}

#[inline]
fn grey_f32(v: f32, lo: f32, scale: f32) -> u8 {
    let t = (v - lo) * scale;
    if t.is_nan() {
        0
    } else {
        (t.clamp(0.0, 255.0) + 0.5) as u8
    }
}

/// The `pct` percentile (0..=100) of non-empty finite `v`, numpy's "linear" method:
/// `h = (n - 1)·pct/100`, `x[floor h] + (h - floor h)·(x[floor h + 1] - x[floor h])`.
fn percentile_in_place(v: &mut [f32], pct: f64) -> f64 {
    let n = v.len();
    let h = (n as f64 - 1.0) * pct / 100.0;
    let lo = (h.floor() as usize).min(n - 1);
    let (_, &mut x_lo, rest) = v.select_nth_unstable_by(lo, f32::total_cmp);
    let x_lo = f64::from(x_lo);
    let frac = h - lo as f64;
    if frac > 0.0 && !rest.is_empty() {
        let x_hi = rest.iter().copied().fold(f32::INFINITY, f32::min);
        x_lo + frac * (f64::from(x_hi) - x_lo)
    } else {
        x_lo
    }
}

/// Colour maps from grey level to RGBA.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum ColourMap {
    /// Black to white.
    #[default]
    Grey,
    /// White to black.
    InvertedGrey,
    /// The perceptually uniform "viridis" map (van der Walt & Smith, 2015), taken from the
    /// `colorous` crate's 256-entry table (itself from d3-scale-chromatic).
    Viridis,
}

impl ColourMap {
    /// The 256-entry RGBA look-up table, opaque.
    #[must_use]
    pub fn table(self) -> [[u8; 4]; 256] {
        let mut t = [[0u8; 4]; 256];
        for (i, e) in t.iter_mut().enumerate() {
            let g = i as u8;
            *e = match self {
                Self::Grey => [g, g, g, 255],
                Self::InvertedGrey => [255 - g, 255 - g, 255 - g, 255],
                Self::Viridis => {
                    let c = colorous::VIRIDIS.eval_rational(i, 256);
                    [c.r, c.g, c.b, 255]
                }
            };
        }
        t
    }

    /// The RGBA colour of one grey level.
    #[must_use]
    pub fn colour(self, grey: u8) -> [u8; 4] {
        self.table()[usize::from(grey)]
    }
}

impl GreyImage {
    /// Grey to RGBA through a colour map (every pixel opaque).
    #[must_use]
    pub fn to_rgba(&self, map: ColourMap) -> RgbaImage {
        let lut = map.table();
        RgbaImage {
            width: self.width,
            height: self.height,
            pixels: self
                .pixels
                .iter()
                .flat_map(|&g| lut[usize::from(g)])
                .collect(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    #[test]
    fn window_ends_and_nan() {
        let w = WindowLevel::new(100.0, 50.0).unwrap();
        assert_eq!(w.grey(75.0), 0);
        assert_eq!(w.grey(50.0), 0);
        assert_eq!(w.grey(125.0), 255);
        assert_eq!(w.grey(1e9), 255);
        assert_eq!(w.grey(100.0), 128);
        assert_eq!(w.grey(f64::NAN), 0);
        assert!(WindowLevel::new(0.0, 0.0).is_none());
        assert!(WindowLevel::new(f64::NAN, 1.0).is_none());
        let img = F32Image {
            width: 3,
            height: 1,
            pixels: vec![f32::NAN, 75.0, 125.0],
            pixel_mm: 1.0,
        };
        assert_eq!(w.apply(&img).pixels, vec![0, 0, 255]);
        let rgba = w.colourize(&img, ColourMap::InvertedGrey);
        assert_eq!(rgba.get(0, 0), [0, 0, 0, 0]);
        assert_eq!(rgba.get(1, 0), [255, 255, 255, 255]);
        assert_eq!(rgba.get(2, 0), [0, 0, 0, 255]);
    }

    #[test]
    fn percentiles_match_numpy_linear() {
        // numpy.percentile([1, 2, 3, 4, 10], [25, 90]) = [2.0, 7.6] (numpy "linear" method:
        // h = (n-1)p/100; 25% → h = 1 → 2; 90% → h = 3.6 → 4 + 0.6·6 = 7.6)
        let v = [10.0f32, 3.0, f32::NAN, 1.0, 4.0, 2.0];
        let w = WindowLevel::from_percentiles(&v, 25.0, 90.0).unwrap();
        assert!((w.low() - 2.0).abs() < 1e-9);
        assert!((w.high() - 7.6).abs() < 1e-6);
        // flat input still gives a usable window
        let w = WindowLevel::from_percentiles(&[5.0; 4], 1.0, 99.0).unwrap();
        assert!((w.centre - 5.0).abs() < 1e-12 && w.width > 0.0);
        assert!(WindowLevel::from_percentiles(&[f32::NAN], 1.0, 99.0).is_none());
        assert!(WindowLevel::from_percentiles(&[1.0, 2.0], 50.0, 50.0).is_none());
    }

    #[test]
    fn viridis_ends() {
        // viridis runs from dark purple (#440154) to yellow (#fde725): the published end
        // points of the map (matplotlib _cm_listed.py, first and last entries).
        let t = ColourMap::Viridis.table();
        assert_eq!(t[0], [0x44, 0x01, 0x54, 255]);
        assert_eq!(t[255], [0xfd, 0xe7, 0x25, 255]);
        // perceptual ordering: lightness (approximated by luma) rises along the map
        let luma = |c: [u8; 4]| {
            0.299 * f64::from(c[0]) + 0.587 * f64::from(c[1]) + 0.114 * f64::from(c[2])
        };
        for i in (0..255).step_by(15) {
            assert!(luma(t[i + 15.min(255 - i)]) >= luma(t[i]));
        }
    }

    proptest! {
        // law: window/level is monotone (non-decreasing) in the value, for grey and the f32 path
        #[test]
        fn window_is_monotone(c in -1e4..1e4f64, w in 1e-3..1e4f64, a in -2e4..2e4f64, b in -2e4..2e4f64) {
            let wl = WindowLevel::new(c, w).unwrap();
            let (lo, hi) = if a <= b { (a, b) } else { (b, a) };
            prop_assert!(wl.grey(lo) <= wl.grey(hi));
            let img = F32Image { width: 2, height: 1, pixels: vec![lo as f32, hi as f32], pixel_mm: 1.0 };
            let g = wl.apply(&img).pixels;
            prop_assert!(g[0] <= g[1]);
        }
    }
}
