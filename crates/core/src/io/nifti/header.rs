//! The NIfTI-1 (348-byte) and NIfTI-2 (540-byte) headers: parsing in either byte order,
//! serialising (little-endian), and the standard's three ways to place voxels in the world.
//!
//! Field offsets and meanings follow the NIfTI-1 standard's `nifti1.h` and the NIfTI-2
//! `nifti2.h` (reference: `NIfTI` Data Format Working Group, nifti1.h / nifti2.h comments).
//! Every value is widened to f64 / i64 so the rest of the loader does not care which
//! version the file is.

use crate::geometry::Affine3;
use nalgebra::{Matrix3, Matrix4, Vector3};

/// Which header layout a file uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Version {
    Nifti1,
    Nifti2,
}

impl Version {
    /// Header length in bytes (`sizeof_hdr`).
    #[must_use]
    pub const fn header_len(self) -> usize {
        match self {
            Self::Nifti1 => 348,
            Self::Nifti2 => 540,
        }
    }
}

/// The header fields Sutura uses, widened to one representation for both versions.
#[derive(Clone, Debug, PartialEq)]
pub struct Header {
    pub version: Version,
    /// Byte order of the file (header and voxels).
    pub big_endian: bool,
    /// `true` for `n+1`/`n+2` (data in the same file), `false` for `ni1`/`ni2` (a `.hdr`/`.img` pair).
    pub single_file: bool,
    pub dim: [i64; 8],
    pub datatype: i16,
    pub bitpix: i16,
    pub pixdim: [f64; 8],
    pub vox_offset: f64,
    pub scl_slope: f64,
    pub scl_inter: f64,
    pub xyzt_units: u8,
    pub intent_code: i32,
    pub qform_code: i32,
    pub sform_code: i32,
    /// `quatern_b, quatern_c, quatern_d`.
    pub quatern: [f64; 3],
    /// `qoffset_x, qoffset_y, qoffset_z`.
    pub qoffset: [f64; 3],
    /// `srow_x, srow_y, srow_z`.
    pub srow: [[f64; 4]; 3],
    pub descrip: String,
}

/// Why header bytes are not a `NIfTI` header.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum HeaderError {
    #[error("file is {0} bytes long, too short for a NIfTI header")]
    TooShort(usize),
    #[error("sizeof_hdr is {0} in both byte orders, expected 348 (NIfTI-1) or 540 (NIfTI-2)")]
    BadSize(u32),
    #[error("no NIfTI magic (found {}); an Analyze 7.5 header is not read", crate::message::quoted(.0))]
    BadMagic(String),
}

struct Reader<'a> {
    b: &'a [u8],
    be: bool,
}

impl Reader<'_> {
    fn arr<const N: usize>(&self, at: usize) -> [u8; N] {
        let mut a = [0u8; N];
        a.copy_from_slice(&self.b[at..at + N]);
        a
    }
    fn i16(&self, at: usize) -> i16 {
        let a = self.arr::<2>(at);
        if self.be {
            i16::from_be_bytes(a)
        } else {
            i16::from_le_bytes(a)
        }
    }
    fn i32(&self, at: usize) -> i32 {
        let a = self.arr::<4>(at);
        if self.be {
            i32::from_be_bytes(a)
        } else {
            i32::from_le_bytes(a)
        }
    }
    fn i64(&self, at: usize) -> i64 {
        let a = self.arr::<8>(at);
        if self.be {
            i64::from_be_bytes(a)
        } else {
            i64::from_le_bytes(a)
        }
    }
    fn f32(&self, at: usize) -> f64 {
        let a = self.arr::<4>(at);
        f64::from(if self.be {
            f32::from_be_bytes(a)
        } else {
            f32::from_le_bytes(a)
        })
    }
    fn f64(&self, at: usize) -> f64 {
        let a = self.arr::<8>(at);
        if self.be {
            f64::from_be_bytes(a)
        } else {
            f64::from_le_bytes(a)
        }
    }
}

/// Tells the header version and byte order from the first four bytes (`sizeof_hdr`).
pub fn sniff(first4: [u8; 4]) -> Result<(Version, bool), HeaderError> {
    let le = u32::from_le_bytes(first4);
    let be = u32::from_be_bytes(first4);
    match (le, be) {
        (348, _) => Ok((Version::Nifti1, false)),
        (_, 348) => Ok((Version::Nifti1, true)),
        (540, _) => Ok((Version::Nifti2, false)),
        (_, 540) => Ok((Version::Nifti2, true)),
        _ => Err(HeaderError::BadSize(le)),
    }
}

fn c_string(b: &[u8]) -> String {
    let end = b.iter().position(|&c| c == 0).unwrap_or(b.len());
    String::from_utf8_lossy(&b[..end]).into_owned()
}

impl Header {
    /// Parses a header from the start of `bytes` (at least `sizeof_hdr` bytes).
    pub fn parse(bytes: &[u8]) -> Result<Self, HeaderError> {
        if bytes.len() < 4 {
            return Err(HeaderError::TooShort(bytes.len()));
        }
        let (version, be) = sniff([bytes[0], bytes[1], bytes[2], bytes[3]])?;
        if bytes.len() < version.header_len() {
            return Err(HeaderError::TooShort(bytes.len()));
        }
        let r = Reader { b: bytes, be };
        match version {
            Version::Nifti1 => Self::parse1(&r),
            Version::Nifti2 => Self::parse2(&r),
        }
    }

    fn parse1(r: &Reader<'_>) -> Result<Self, HeaderError> {
        // reference: nifti1.h, struct nifti_1_header (offsets in its comments)
        let magic = &r.b[344..348];
        let single_file = match magic {
            b"n+1\0" => true,
            b"ni1\0" => false,
            _ => return Err(HeaderError::BadMagic(c_string(magic))),
        };
        let mut dim = [0i64; 8];
        let mut pixdim = [0f64; 8];
        for i in 0..8 {
            dim[i] = i64::from(r.i16(40 + 2 * i));
            pixdim[i] = r.f32(76 + 4 * i);
        }
        let mut srow = [[0f64; 4]; 3];
        for (row, s) in srow.iter_mut().enumerate() {
            for (c, v) in s.iter_mut().enumerate() {
                *v = r.f32(280 + 16 * row + 4 * c);
            }
        }
        Ok(Self {
            version: Version::Nifti1,
            big_endian: r.be,
            single_file,
            dim,
            datatype: r.i16(70),
            bitpix: r.i16(72),
            pixdim,
            vox_offset: r.f32(108),
            scl_slope: r.f32(112),
            scl_inter: r.f32(116),
            xyzt_units: r.b[123],
            intent_code: i32::from(r.i16(68)),
            qform_code: i32::from(r.i16(252)),
            sform_code: i32::from(r.i16(254)),
            quatern: [r.f32(256), r.f32(260), r.f32(264)],
            qoffset: [r.f32(268), r.f32(272), r.f32(276)],
            srow,
            descrip: c_string(&r.b[148..228]),
        })
    }

    fn parse2(r: &Reader<'_>) -> Result<Self, HeaderError> {
        // reference: nifti2.h, struct nifti_2_header (540 bytes, 64-bit fields)
        let magic = &r.b[4..12];
        let single_file = match &magic[..4] {
            b"n+2\0" => true,
            b"ni2\0" => false,
            _ => return Err(HeaderError::BadMagic(c_string(magic))),
        };
        let mut dim = [0i64; 8];
        let mut pixdim = [0f64; 8];
        for i in 0..8 {
            dim[i] = r.i64(16 + 8 * i);
            pixdim[i] = r.f64(104 + 8 * i);
        }
        let mut srow = [[0f64; 4]; 3];
        for (row, s) in srow.iter_mut().enumerate() {
            for (c, v) in s.iter_mut().enumerate() {
                *v = r.f64(400 + 32 * row + 8 * c);
            }
        }
        Ok(Self {
            version: Version::Nifti2,
            big_endian: r.be,
            single_file,
            dim,
            datatype: r.i16(12),
            bitpix: r.i16(14),
            pixdim,
            vox_offset: r.i64(168) as f64,
            scl_slope: r.f64(176),
            scl_inter: r.f64(184),
            xyzt_units: (r.i32(500) & 0xff) as u8,
            intent_code: r.i32(504),
            qform_code: r.i32(344),
            sform_code: r.i32(348),
            quatern: [r.f64(352), r.f64(360), r.f64(368)],
            qoffset: [r.f64(376), r.f64(384), r.f64(392)],
            srow,
            descrip: c_string(&r.b[240..320]),
        })
    }

    /// Serialises the header little-endian, padded with the 4-byte extension flag (all zero):
    /// 352 bytes for NIfTI-1, 544 for NIfTI-2.
    #[must_use]
    pub fn to_bytes(&self) -> Vec<u8> {
        let mut b = vec![0u8; self.version.header_len() + 4];
        let put = |b: &mut [u8], at: usize, v: &[u8]| b[at..at + v.len()].copy_from_slice(v);
        let desc = self.descrip.as_bytes();
        match self.version {
            Version::Nifti1 => {
                // reference: nifti1.h field offsets
                put(&mut b, 0, &348i32.to_le_bytes());
                put(&mut b, 38, b"r"); // `regular`, as nifti1_io writes it
                for i in 0..8 {
                    put(&mut b, 40 + 2 * i, &(self.dim[i] as i16).to_le_bytes());
                    put(&mut b, 76 + 4 * i, &(self.pixdim[i] as f32).to_le_bytes());
                }
                put(&mut b, 68, &(self.intent_code as i16).to_le_bytes());
                put(&mut b, 70, &self.datatype.to_le_bytes());
                put(&mut b, 72, &self.bitpix.to_le_bytes());
                put(&mut b, 108, &(self.vox_offset as f32).to_le_bytes());
                put(&mut b, 112, &(self.scl_slope as f32).to_le_bytes());
                put(&mut b, 116, &(self.scl_inter as f32).to_le_bytes());
                b[123] = self.xyzt_units;
                put(&mut b, 148, &desc[..desc.len().min(79)]);
                put(&mut b, 252, &(self.qform_code as i16).to_le_bytes());
                put(&mut b, 254, &(self.sform_code as i16).to_le_bytes());
                for i in 0..3 {
                    put(&mut b, 256 + 4 * i, &(self.quatern[i] as f32).to_le_bytes());
                    put(&mut b, 268 + 4 * i, &(self.qoffset[i] as f32).to_le_bytes());
                }
                for (row, s) in self.srow.iter().enumerate() {
                    for (c, v) in s.iter().enumerate() {
                        put(&mut b, 280 + 16 * row + 4 * c, &(*v as f32).to_le_bytes());
                    }
                }
                put(
                    &mut b,
                    344,
                    if self.single_file { b"n+1\0" } else { b"ni1\0" },
                );
            }
            Version::Nifti2 => {
                // reference: nifti2.h field offsets
                put(&mut b, 0, &540i32.to_le_bytes());
                let magic: &[u8; 8] = if self.single_file {
                    b"n+2\0\r\n\x1a\n"
                } else {
                    b"ni2\0\r\n\x1a\n"
                };
                put(&mut b, 4, magic);
                put(&mut b, 12, &self.datatype.to_le_bytes());
                put(&mut b, 14, &self.bitpix.to_le_bytes());
                for i in 0..8 {
                    put(&mut b, 16 + 8 * i, &self.dim[i].to_le_bytes());
                    put(&mut b, 104 + 8 * i, &self.pixdim[i].to_le_bytes());
                }
                put(&mut b, 168, &(self.vox_offset as i64).to_le_bytes());
                put(&mut b, 176, &self.scl_slope.to_le_bytes());
                put(&mut b, 184, &self.scl_inter.to_le_bytes());
                put(&mut b, 240, &desc[..desc.len().min(79)]);
                put(&mut b, 344, &self.qform_code.to_le_bytes());
                put(&mut b, 348, &self.sform_code.to_le_bytes());
                for i in 0..3 {
                    put(&mut b, 352 + 8 * i, &self.quatern[i].to_le_bytes());
                    put(&mut b, 376 + 8 * i, &self.qoffset[i].to_le_bytes());
                }
                for (row, s) in self.srow.iter().enumerate() {
                    for (c, v) in s.iter().enumerate() {
                        put(&mut b, 400 + 32 * row + 8 * c, &v.to_le_bytes());
                    }
                }
                put(&mut b, 500, &i32::from(self.xyzt_units).to_le_bytes());
                put(&mut b, 504, &self.intent_code.to_le_bytes());
            }
        }
        b
    }

    /// Millimetres per spatial unit of `xyzt_units` (reference: nifti1.h, `NIFTI_UNITS_*`:
    /// 1 metre, 2 mm, 3 micron), or `None` when the code is 0 (unknown) or not a spatial unit.
    #[must_use]
    pub fn mm_per_unit(&self) -> Option<f64> {
        match self.xyzt_units & 0x07 {
            1 => Some(1000.0),
            2 => Some(1.0),
            3 => Some(0.001),
            _ => None,
        }
    }

    /// The sform matrix (method 3 of nifti1.h), in the file's spatial units.
    #[must_use]
    pub fn sform_matrix(&self) -> Matrix4<f64> {
        let s = &self.srow;
        Matrix4::new(
            s[0][0], s[0][1], s[0][2], s[0][3], s[1][0], s[1][1], s[1][2], s[1][3], s[2][0],
            s[2][1], s[2][2], s[2][3], 0.0, 0.0, 0.0, 1.0,
        )
    }

    /// The qform matrix (method 2 of nifti1.h), in the file's spatial units.
    #[must_use]
    pub fn qform_matrix(&self) -> Matrix4<f64> {
        let qfac = if self.pixdim[0] < 0.0 { -1.0 } else { 1.0 };
        let spacing = [self.pixdim[1], self.pixdim[2], self.pixdim[3]];
        let lin = quatern_to_linear(self.quatern, spacing, qfac);
        let mut m = Matrix4::identity();
        m.fixed_view_mut::<3, 3>(0, 0).copy_from(&lin);
        m.fixed_view_mut::<3, 1>(0, 3)
            .copy_from(&Vector3::from(self.qoffset));
        m
    }

    /// Method 1 of nifti1.h: voxel index times pixdim, no rotation, no offset.
    #[must_use]
    pub fn pixdim_matrix(&self) -> Matrix4<f64> {
        let mut m = Matrix4::identity();
        for a in 0..3 {
            let d = self.pixdim[a + 1].abs();
            m[(a, a)] = if d > 0.0 { d } else { 1.0 };
        }
        m
    }
}

/// The 3x3 linear part of the qform: rotation from the quaternion `(b, c, d)` times the voxel
/// spacing, with the third column negated when `qfac < 0`.
///
/// reference: `nifti1.h` "METHOD 2" and `nifti1_io.c` `nifti_quatern_to_mat44`:
/// `a = sqrt(1 - b² - c² - d²)`; when `1 - (b²+c²+d²) < 1e-7`, `a = 0` and `(b, c, d)` is
/// renormalised to unit length (a 180° rotation); a spacing that is not positive is taken as 1.
#[must_use]
pub fn quatern_to_linear(bcd: [f64; 3], spacing: [f64; 3], qfac: f64) -> Matrix3<f64> {
    let [mut b, mut c, mut d] = bcd;
    let mut a = 1.0 - (b * b + c * c + d * d);
    if a < 1.0e-7 {
        let n = (b * b + c * c + d * d).sqrt();
        if n > 0.0 {
            b /= n;
            c /= n;
            d /= n;
        }
        a = 0.0;
    } else {
        a = a.sqrt();
    }
    let pos = |v: f64| if v > 0.0 { v } else { 1.0 };
    let xd = pos(spacing[0]);
    let yd = pos(spacing[1]);
    let zd = if qfac < 0.0 {
        -pos(spacing[2])
    } else {
        pos(spacing[2])
    };
    Matrix3::new(
        (a * a + b * b - c * c - d * d) * xd,
        2.0 * (b * c - a * d) * yd,
        2.0 * (b * d + a * c) * zd,
        2.0 * (b * c + a * d) * xd,
        (a * a + c * c - b * b - d * d) * yd,
        2.0 * (c * d - a * b) * zd,
        2.0 * (b * d - a * c) * xd,
        2.0 * (c * d + a * b) * yd,
        (a * a + d * d - c * c - b * b) * zd,
    )
}

/// The inverse of [`quatern_to_linear`] for a shear-free linear part: returns
/// `(quaternion (b, c, d), spacing, qfac)`, or `None` when the columns are not orthogonal
/// (relative tolerance 1e-6, common practice) or one has zero length.
///
/// reference: `nifti1_io.c` `nifti_mat44_to_quatern`: spacing = column norms; a negative
/// determinant gives `qfac = -1` and negates the third column; the quaternion comes from the
/// rotation by the trace / largest-diagonal branches, with `a ≥ 0`.
#[must_use]
pub fn linear_to_quatern(lin: &Matrix3<f64>) -> Option<([f64; 3], [f64; 3], f64)> {
    let mut cols = [
        lin.column(0).into_owned(),
        lin.column(1).into_owned(),
        lin.column(2).into_owned(),
    ];
    let mut spacing = [0.0; 3];
    for (s, c) in spacing.iter_mut().zip(cols.iter()) {
        *s = c.norm();
        if !(*s > 0.0 && s.is_finite()) {
            return None;
        }
    }
    for c in &mut cols {
        *c /= c.norm();
    }
    for (p, q) in [(0, 1), (0, 2), (1, 2)] {
        if cols[p].dot(&cols[q]).abs() > 1e-6 {
            return None;
        }
    }
    let mut r = Matrix3::from_columns(&cols);
    let qfac = if r.determinant() < 0.0 {
        r.column_mut(2).neg_mut();
        -1.0
    } else {
        1.0
    };
    let (r11, r12, r13) = (r[(0, 0)], r[(0, 1)], r[(0, 2)]);
    let (r21, r22, r23) = (r[(1, 0)], r[(1, 1)], r[(1, 2)]);
    let (r31, r32, r33) = (r[(2, 0)], r[(2, 1)], r[(2, 2)]);
    let trace1 = r11 + r22 + r33 + 1.0;
    let (a, b, c, d);
    if trace1 > 0.5 {
        a = 0.5 * trace1.sqrt();
        b = 0.25 * (r32 - r23) / a;
        c = 0.25 * (r13 - r31) / a;
        d = 0.25 * (r21 - r12) / a;
    } else {
        let xd = 1.0 + r11 - (r22 + r33);
        let yd = 1.0 + r22 - (r11 + r33);
        let zd = 1.0 + r33 - (r11 + r22);
        if xd > 1.0 {
            b = 0.5 * xd.sqrt();
            c = 0.25 * (r12 + r21) / b;
            d = 0.25 * (r13 + r31) / b;
            a = 0.25 * (r32 - r23) / b;
        } else if yd > 1.0 {
            c = 0.5 * yd.sqrt();
            b = 0.25 * (r12 + r21) / c;
            d = 0.25 * (r23 + r32) / c;
            a = 0.25 * (r13 - r31) / c;
        } else {
            d = 0.5 * zd.sqrt();
            b = 0.25 * (r13 + r31) / d;
            c = 0.25 * (r23 + r32) / d;
            a = 0.25 * (r21 - r12) / d;
        }
    }
    let q = if a < 0.0 { [-b, -c, -d] } else { [b, c, d] };
    Some((q, spacing, qfac))
}

/// Scales a matrix given in the file's spatial units to millimetres.
#[must_use]
pub fn to_mm(m: &Matrix4<f64>, mm_per_unit: f64) -> Matrix4<f64> {
    let mut out = *m;
    for r in 0..3 {
        for c in 0..4 {
            out[(r, c)] *= mm_per_unit;
        }
    }
    out
}

/// An [`Affine3`] from a checked matrix, as a message when it is not finite or singular.
pub fn affine(m: Matrix4<f64>) -> Result<Affine3, String> {
    Affine3::from_matrix(m).map_err(|e| e.to_string())
}
