//! Lengths typed by a user: `12um`, `12µm`, `0.012mm`, `1.2e-5m`. Stored in millimetres.

/// Why a length could not be read.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum LengthError {
    #[error("'{0}' is not a length: write a number and a unit, e.g. 12um or 0.012mm")]
    Syntax(String),
    #[error("'{0}': unknown unit '{1}' (use m, mm, um or µm, nm)")]
    Unit(String, String),
    #[error("'{0}': a length must be positive and finite")]
    NotPositive(String),
    #[error(
        "voxel size '{0}': give one length for cubic voxels or three (x,y,z), e.g. 36um or 36um,36um,50um"
    )]
    VoxelSizeCount(String),
    #[error("'{0}' is not a point: give three numbers X,Y,Z")]
    Triple(String),
}

/// A length typed by a user (`12um`, `0.012mm`), in millimetres; see [`parse_length_mm`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LengthMm(pub f64);

impl std::str::FromStr for LengthMm {
    type Err = LengthError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        parse_length_mm(s).map(Self)
    }
}

/// A voxel size typed by a user, in millimetres along x, y, z: one length for cubic voxels
/// (`36um`) or three (`36um,36um,50um`). The one rule every front end reads voxel sizes by.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct VoxelSizeMm(pub [f64; 3]);

impl VoxelSizeMm {
    /// Reads a voxel size where an empty text means "none given" (the file's own).
    pub fn parse_optional(text: &str) -> Result<Option<Self>, LengthError> {
        if text.trim().is_empty() {
            Ok(None)
        } else {
            text.parse().map(Some)
        }
    }

    /// The text that reads back to this voxel size (`36um` for cubic voxels of 36 µm).
    #[must_use]
    pub fn to_text(&self) -> String {
        let one = |mm: f64| {
            if mm < 1.0 {
                format!("{}um", mm * 1e3)
            } else {
                format!("{mm}mm")
            }
        };
        let [x, y, z] = self.0;
        #[allow(
            clippy::float_cmp,
            reason = "cubic exactly when the three sizes are the same number"
        )]
        if x == y && y == z {
            one(x)
        } else {
            format!("{},{},{}", one(x), one(y), one(z))
        }
    }
}

impl std::str::FromStr for VoxelSizeMm {
    type Err = LengthError;
    fn from_str(text: &str) -> Result<Self, Self::Err> {
        let parts: Vec<f64> = text
            .split(',')
            .map(parse_length_mm)
            .collect::<Result<_, _>>()?;
        match parts.as_slice() {
            [s] => Ok(Self([*s; 3])),
            [x, y, z] => Ok(Self([*x, *y, *z])),
            _ => Err(LengthError::VoxelSizeCount(text.trim().to_owned())),
        }
    }
}

/// Three numbers `X,Y,Z` typed by a user (a point or a direction, in the frame the caller
/// states); every one must be finite.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Triple(pub [f64; 3]);

impl std::str::FromStr for Triple {
    type Err = LengthError;
    fn from_str(text: &str) -> Result<Self, Self::Err> {
        let v: Vec<f64> = text
            .split(',')
            .map(|t| t.trim().parse::<f64>())
            .collect::<Result<_, _>>()
            .map_err(|_| LengthError::Triple(text.trim().to_owned()))?;
        match v.as_slice() {
            [x, y, z] if v.iter().all(|c| c.is_finite()) => Ok(Self([*x, *y, *z])),
            _ => Err(LengthError::Triple(text.trim().to_owned())),
        }
    }
}

/// Parses a length with a unit into millimetres. A bare number is refused: voxel sizes in µm and
/// mm differ by a factor of 1000 and guessing wrong silently ruins every measurement.
pub fn parse_length_mm(text: &str) -> Result<f64, LengthError> {
    let t = text.trim();
    let split = t
        .find(|c: char| !(c.is_ascii_digit() || matches!(c, '.' | '+' | '-' | 'e' | 'E')))
        .ok_or_else(|| LengthError::Syntax(text.to_owned()))?;
    // an exponent 'e' directly followed by a unit letter is not an exponent ("5em" is no unit anyway)
    let (num, unit) = t.split_at(split);
    let value: f64 = num
        .parse()
        .map_err(|_| LengthError::Syntax(text.to_owned()))?;
    // divide by exact powers of ten rather than multiply by inexact ones, so "36um" is the
    // double nearest to 0.036 mm, as "0.036mm" is (36 · 1e-3 is one ulp above it)
    let mm = match unit.trim() {
        "m" => value * 1e3,
        "mm" => value,
        "um" | "µm" | "μm" | "micron" | "microns" => value / 1e3,
        "nm" => value / 1e6,
        other => return Err(LengthError::Unit(text.to_owned(), other.to_owned())),
    };
    if !(mm.is_finite() && mm > 0.0) {
        return Err(LengthError::NotPositive(text.to_owned()));
    }
    Ok(mm)
}

/// Formats a length in the unit a reader of CT scans expects: µm below 1 mm, else mm.
#[must_use]
pub fn format_length_mm(mm: f64) -> String {
    if mm.abs() < 1.0 {
        format!("{} µm", trim_float(mm * 1e3))
    } else {
        format!("{} mm", trim_float(mm))
    }
}

fn trim_float(v: f64) -> String {
    let s = format!("{v:.4}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    s.to_owned()
}

#[cfg(test)]
#[allow(
    clippy::float_cmp,
    reason = "whole µm must parse to the f64 nearest the decimal value, exactly"
)]
mod tests {
    use super::*;

    #[test]
    fn micrometres_are_exact() {
        for (a, b) in [
            ("36um", "0.036mm"),
            ("50um", "0.05mm"),
            ("12.5um", "0.0125mm"),
            ("700nm", "0.0007mm"),
        ] {
            assert_eq!(
                parse_length_mm(a).unwrap().to_bits(),
                parse_length_mm(b).unwrap().to_bits(),
                "{a}"
            );
        }
    }

    #[test]
    fn parses_units() {
        assert!((parse_length_mm("12um").unwrap() - 0.012).abs() < 1e-15);
        assert!((parse_length_mm("12 µm").unwrap() - 0.012).abs() < 1e-15);
        assert!((parse_length_mm("0.012mm").unwrap() - 0.012).abs() < 1e-15);
        assert!((parse_length_mm("1.2e-5m").unwrap() - 0.012).abs() < 1e-15);
        assert!((parse_length_mm("1.5e1um").unwrap() - 0.015).abs() < 1e-15);
        // whole µm and nm are the f64 nearest the decimal value in mm, not one step off
        assert_eq!(parse_length_mm("36um").unwrap(), 0.036);
        assert_eq!(parse_length_mm("50um").unwrap(), 0.05);
        assert_eq!(parse_length_mm("700nm").unwrap(), 0.0007);
    }

    #[test]
    fn refuses_bad_lengths() {
        assert!(matches!(parse_length_mm("12"), Err(LengthError::Syntax(_))));
        assert!(matches!(
            parse_length_mm("12 parsecs"),
            Err(LengthError::Unit(..))
        ));
        assert!(matches!(
            parse_length_mm("-3um"),
            Err(LengthError::NotPositive(_))
        ));
        assert!(matches!(
            parse_length_mm("0mm"),
            Err(LengthError::NotPositive(_))
        ));
        assert!(matches!(parse_length_mm("mm"), Err(LengthError::Syntax(_))));
    }

    #[test]
    fn voxel_sizes_take_one_or_three_lengths() {
        assert_eq!("36um".parse::<VoxelSizeMm>().unwrap().0, [0.036; 3]);
        assert_eq!(
            "36um,36um,50um".parse::<VoxelSizeMm>().unwrap().0,
            [0.036, 0.036, 0.05]
        );
        assert!(matches!(
            "36um,50um".parse::<VoxelSizeMm>(),
            Err(LengthError::VoxelSizeCount(_))
        ));
        assert!(matches!(
            "36".parse::<VoxelSizeMm>(),
            Err(LengthError::Syntax(_))
        ));
        assert_eq!(VoxelSizeMm::parse_optional("  ").unwrap(), None);
        for v in [[0.036; 3], [0.036, 0.036, 0.05], [1.5, 2.0, 2.0]] {
            let t = VoxelSizeMm(v).to_text();
            assert_eq!(t.parse::<VoxelSizeMm>().unwrap().0, v, "{t}");
        }
    }

    #[test]
    fn triples_need_three_finite_numbers() {
        assert_eq!("1,-2.5,3e1".parse::<Triple>().unwrap().0, [1.0, -2.5, 30.0]);
        for bad in ["1,2", "1,2,3,4", "1,x,3", "1,inf,3", "NaN,1,1"] {
            assert!(bad.parse::<Triple>().is_err(), "{bad}");
        }
    }

    #[test]
    fn formats() {
        assert_eq!(format_length_mm(0.012), "12 µm");
        assert_eq!(format_length_mm(2.5), "2.5 mm");
    }
}
