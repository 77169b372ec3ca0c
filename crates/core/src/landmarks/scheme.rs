//! Landmark schemes: the small, human-editable TOML file a lab shares.
//!
//! A scheme names, in order, the landmarks to place on every specimen, the curves of
//! semilandmarks between them, and the linear measurements taken from them. The file is TOML
//! (comments allowed, errors with line numbers):
//!
//! ```toml
//! format_version = 1                 # of the scheme file format; newer files are refused
//! id = "lab-skull-v3"                # stored with every project that uses the scheme
//! name = "Skull, dorsal and lateral" # optional
//! description = "…"                  # optional
//!
//! [[landmark]]                       # one block per landmark, in the order of digitising
//! id = "snout_tip"                   # short id: letters, digits, _ . -
//! name = "tip of snout"              # optional, defaults to the id
//! type = "II"                        # Bookstein type: "I", "II" or "III"
//! definition = "anterior-most point of the rostrum on the midline"
//! partner = "…"                      # optional: the bilateral counterpart (must name this one back)
//! surface = true                     # optional, default true: placed on the surface (picked);
//!                                    # false: a constructed point inside a space (placed on slices)
//!
//! [[curve]]
//! id = "dorsal_midline"
//! anchors = ["snout_tip", "crest_top"] # at least two landmarks, in tracing order
//! semilandmarks = 8                  # per segment between consecutive anchors: one number for
//!                                    # all, or a list with one number per segment
//!
//! [[measurement]]                    # exactly one of the four kinds below
//! id = "skull_length"
//! distance = ["snout_tip", "occipital_condyle"]                 # mm
//! # angle = ["snout_tip", "occipital_condyle", "crest_top"]    # degrees, vertex in the middle
//! # point_to_line = { point = "crest_top", line = ["snout_tip", "occipital_condyle"] } # mm
//! # curve_length = "dorsal_midline"                             # mm, along the traced curve
//! ```
//!
//! Bookstein types (Bookstein 1991, *Morphometric tools for landmark data*, ch. 3, from memory):
//! I, a discrete juxtaposition of tissues; II, a maximum of curvature or the tip of a process;
//! III, an extremal point defined relative to other structures (the end of a diameter).
//!
//! Validation on load reports the first problem with the file, its line and the key: unknown
//! keys (typos), missing keys, bad ids, duplicate ids, references to unknown landmarks or
//! curves, a landmark paired with itself or with one that does not pair back, a curve with
//! fewer than two anchors or with a segment from a landmark to itself, a measurement with no
//! kind or two kinds, and a measurement whose points repeat. Landmark ids and curve ids share a
//! namespace, because the semilandmarks of a curve are named after it (`dorsal_midline_s01`,
//! see [`CurveDef::semilandmark_names`]).

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use std::collections::{HashMap, HashSet};
use std::path::{Path, PathBuf};
use toml::Spanned;

/// The newest scheme file format this build reads.
pub const SCHEME_FORMAT_VERSION: i64 = 1;

/// Most semilandmarks allowed on one curve segment (a guard against typos like `80000`).
pub const MAX_SEMILANDMARKS_PER_SEGMENT: usize = 1000;

/// Why a scheme cannot be used. `origin` names the file (or where the text came from).
#[derive(Debug, thiserror::Error)]
pub enum SchemeError {
    #[error("{}: {source}", path.display())]
    Os {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    /// The text is not TOML, or a key has the wrong type or is unknown.
    #[error("{origin}{}: {}", at_line(*line), clean(message))]
    Syntax {
        origin: String,
        line: Option<usize>,
        message: String,
    },
    /// The TOML is well formed but the scheme breaks a rule; `key` says where.
    #[error("{origin}{}: {}: {}", at_line(*line), clean(key), clean(what))]
    Invalid {
        origin: String,
        line: Option<usize>,
        key: String,
        what: String,
    },
    #[error(
        "{origin}: scheme format_version {found} is newer than this build of Sutura reads \
         ({SCHEME_FORMAT_VERSION}); update Sutura to use it"
    )]
    Newer { origin: String, found: i64 },
}

/// A part of a message, as one bounded line (see [`crate::message`]).
fn clean(text: &str) -> String {
    crate::message::one_line(text, crate::message::MAX_DETAIL_CHARS)
}

fn at_line(line: Option<usize>) -> String {
    line.map(|l| format!(":{l}")).unwrap_or_default()
}

/// Bookstein's classification of a landmark (see the module docs).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub enum BooksteinType {
    I,
    II,
    III,
}

impl BooksteinType {
    /// `"I"`, `"II"` or `"III"`.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::I => "I",
            Self::II => "II",
            Self::III => "III",
        }
    }
}

/// One landmark of a scheme.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct LandmarkDef {
    pub id: String,
    pub name: String,
    pub definition: String,
    pub bookstein_type: BooksteinType,
    /// The bilateral counterpart, which names this landmark back.
    pub partner: Option<String>,
    /// `true`: a point on the material's surface (picked); `false`: a constructed point inside
    /// a space, placed on slices.
    pub on_surface: bool,
}

/// A curve: an ordered run of anchor landmarks with semilandmarks between consecutive ones.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct CurveDef {
    pub id: String,
    pub name: String,
    pub definition: String,
    /// Landmark ids in tracing order, at least two; consecutive ones differ.
    pub anchors: Vec<String>,
    /// Semilandmarks strictly between `anchors[s]` and `anchors[s + 1]`, one entry per segment.
    pub semilandmarks: Vec<usize>,
}

impl CurveDef {
    /// Number of segments (`anchors.len() - 1`).
    #[must_use]
    pub fn segments(&self) -> usize {
        self.anchors.len() - 1
    }

    /// All semilandmarks of the curve.
    #[must_use]
    pub fn total_semilandmarks(&self) -> usize {
        self.semilandmarks.iter().sum()
    }

    /// Names of the semilandmarks in curve order: `{id}_s01`, `{id}_s02`, … (zero-padded to
    /// the width of the count, numbered along the whole curve).
    #[must_use]
    pub fn semilandmark_names(&self) -> Vec<String> {
        let n = self.total_semilandmarks();
        let width = n.to_string().len().max(2);
        (1..=n)
            .map(|i| format!("{}_s{i:0width$}", self.id))
            .collect()
    }
}

/// What a measurement measures, by landmark or curve id.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum MeasurementKind {
    /// Straight-line distance between two landmarks, mm.
    Distance { from: String, to: String },
    /// Angle at `vertex` between the rays to `from` and `to`, degrees in `[0, 180]`.
    Angle {
        from: String,
        vertex: String,
        to: String,
    },
    /// Distance from `point` to the infinite line through `line[0]` and `line[1]`, mm.
    PointToLine { point: String, line: [String; 2] },
    /// Length along a curve's traced polyline through its anchors, mm.
    CurveLength { curve: String },
}

impl MeasurementKind {
    /// The kind's name as written in files: `distance`, `angle`, `point_to_line`, `curve_length`.
    #[must_use]
    pub const fn name(&self) -> &'static str {
        match self {
            Self::Distance { .. } => "distance",
            Self::Angle { .. } => "angle",
            Self::PointToLine { .. } => "point_to_line",
            Self::CurveLength { .. } => "curve_length",
        }
    }

    /// The unit of the value: `mm` or `deg`.
    #[must_use]
    pub const fn unit(&self) -> &'static str {
        match self {
            Self::Angle { .. } => "deg",
            _ => "mm",
        }
    }
}

/// One measurement of a scheme.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct MeasurementDef {
    pub id: String,
    pub name: String,
    pub definition: String,
    pub kind: MeasurementKind,
}

/// A validated landmark scheme.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Scheme {
    pub id: String,
    pub name: String,
    pub description: String,
    pub landmarks: Vec<LandmarkDef>,
    pub curves: Vec<CurveDef>,
    pub measurements: Vec<MeasurementDef>,
}

impl Scheme {
    /// Reads and validates a scheme file; returns it with the file's text (which a project
    /// stores verbatim).
    pub fn load(path: &Path) -> Result<(Self, String), SchemeError> {
        let text = crate::io::require_regular_file(path)
            .and_then(|_| std::fs::read_to_string(path))
            .map_err(|source| SchemeError::Os {
                path: path.to_owned(),
                source,
            })?;
        let scheme = Self::parse(&text, &path.display().to_string())?;
        Ok((scheme, text))
    }

    /// Parses and validates scheme text; `origin` names it in errors (a file name).
    pub fn parse(text: &str, origin: &str) -> Result<Self, SchemeError> {
        let syntax = |e: &toml::de::Error| SchemeError::Syntax {
            origin: origin.to_owned(),
            line: e.span().map(|s| line_of(text, s.start)),
            message: e.message().trim().to_owned(),
        };
        // the version first, so a newer file is refused before its new keys are called unknown
        let table: toml::Table = toml::from_str(text).map_err(|e| syntax(&e))?;
        match table.get("format_version") {
            Some(toml::Value::Integer(v)) if *v > SCHEME_FORMAT_VERSION => {
                return Err(SchemeError::Newer {
                    origin: origin.to_owned(),
                    found: *v,
                });
            }
            Some(toml::Value::Integer(v)) if *v >= 1 => {}
            Some(other) => {
                return Err(SchemeError::Invalid {
                    origin: origin.to_owned(),
                    line: None,
                    key: "format_version".into(),
                    what: format!("{other} is not a format version (write format_version = 1)"),
                });
            }
            None => {
                return Err(SchemeError::Invalid {
                    origin: origin.to_owned(),
                    line: None,
                    key: "format_version".into(),
                    what: "missing (write format_version = 1 at the top)".into(),
                });
            }
        }
        let raw: RawScheme = toml::from_str(text).map_err(|e| syntax(&e))?;
        Validator { text, origin }.scheme(raw)
    }

    /// The position of a landmark in the scheme's order.
    #[must_use]
    pub fn landmark_index(&self, id: &str) -> Option<usize> {
        self.landmarks.iter().position(|l| l.id == id)
    }

    /// A landmark by id.
    #[must_use]
    pub fn landmark(&self, id: &str) -> Option<&LandmarkDef> {
        self.landmarks.iter().find(|l| l.id == id)
    }

    /// The position of a curve in the scheme's order.
    #[must_use]
    pub fn curve_index(&self, id: &str) -> Option<usize> {
        self.curves.iter().position(|c| c.id == id)
    }

    /// A curve by id.
    #[must_use]
    pub fn curve(&self, id: &str) -> Option<&CurveDef> {
        self.curves.iter().find(|c| c.id == id)
    }

    /// The curves that have `landmark` among their anchors.
    pub fn curves_anchored_at<'a>(
        &'a self,
        landmark: &'a str,
    ) -> impl Iterator<Item = &'a CurveDef> {
        self.curves
            .iter()
            .filter(move |c| c.anchors.iter().any(|a| a == landmark))
    }
}

/// SHA-256 of a text, lowercase hex: how a project records which scheme text it holds.
#[must_use]
pub fn sha256_hex(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

/// Bytes as lowercase hex.
pub(crate) fn hex(bytes: &[u8]) -> String {
    use std::fmt::Write;
    bytes
        .iter()
        .fold(String::with_capacity(2 * bytes.len()), |mut s, b| {
            let _ = write!(s, "{b:02x}");
            s
        })
}

/// Whether `id` is a valid landmark, curve or measurement id: 1–64 characters from ASCII
/// letters, digits, `_`, `.`, `-`, starting with a letter or digit (so it is safe as a CSV
/// column name and a file name).
#[must_use]
pub fn is_valid_id(id: &str) -> bool {
    (1..=64).contains(&id.len())
        && id.chars().next().is_some_and(|c| c.is_ascii_alphanumeric())
        && id
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, '_' | '.' | '-'))
}

#[allow(clippy::naive_bytecount, reason = "scheme files are a few kilobytes")]
fn line_of(text: &str, offset: usize) -> usize {
    text.as_bytes()[..offset.min(text.len())]
        .iter()
        .filter(|&&b| b == b'\n')
        .count()
        + 1
}

// ---- the file as written -------------------------------------------------------------------

type Id = Spanned<String>;

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawScheme {
    #[allow(dead_code, reason = "checked before this struct is read")]
    format_version: i64,
    id: Id,
    name: Option<String>,
    description: Option<String>,
    #[serde(default, rename = "landmark")]
    landmarks: Vec<RawLandmark>,
    #[serde(default, rename = "curve")]
    curves: Vec<RawCurve>,
    #[serde(default, rename = "measurement")]
    measurements: Vec<RawMeasurement>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawLandmark {
    id: Id,
    name: Option<String>,
    #[serde(rename = "type")]
    bookstein_type: Spanned<String>,
    definition: Option<String>,
    partner: Option<Id>,
    surface: Option<bool>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawCurve {
    id: Id,
    name: Option<String>,
    definition: Option<String>,
    anchors: Spanned<Vec<Id>>,
    semilandmarks: Spanned<toml::Value>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawMeasurement {
    id: Id,
    name: Option<String>,
    definition: Option<String>,
    distance: Option<Spanned<Vec<Id>>>,
    angle: Option<Spanned<Vec<Id>>>,
    point_to_line: Option<Spanned<RawPointLine>>,
    curve_length: Option<Id>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawPointLine {
    point: Id,
    line: Spanned<Vec<Id>>,
}

// ---- validation ----------------------------------------------------------------------------

struct Validator<'a> {
    text: &'a str,
    origin: &'a str,
}

impl Validator<'_> {
    fn err<T>(
        &self,
        span: &std::ops::Range<usize>,
        key: String,
        what: String,
    ) -> Result<T, SchemeError> {
        Err(SchemeError::Invalid {
            origin: self.origin.to_owned(),
            line: Some(line_of(self.text, span.start)),
            key,
            what,
        })
    }

    fn check_id(&self, id: &Id, key: &str) -> Result<String, SchemeError> {
        if is_valid_id(id.get_ref()) {
            Ok(id.get_ref().clone())
        } else {
            self.err(
                &id.span(),
                key.to_owned(),
                format!(
                    "'{}' is not a valid id (1-64 ASCII letters, digits, _ . -, starting with a \
                     letter or digit)",
                    id.get_ref()
                ),
            )
        }
    }

    #[allow(
        clippy::too_many_lines,
        reason = "one rule after another, in the order documented"
    )]
    fn scheme(&self, raw: RawScheme) -> Result<Scheme, SchemeError> {
        let id = self.check_id(&raw.id, "id")?;
        if raw.landmarks.is_empty() {
            return self.err(
                &raw.id.span(),
                "landmark".into(),
                "the scheme has no landmarks (add [[landmark]] blocks)".into(),
            );
        }

        // landmarks: ids, types, names
        let mut seen: HashMap<String, String> = HashMap::new(); // id → what it names
        let mut landmarks = Vec::with_capacity(raw.landmarks.len());
        for l in &raw.landmarks {
            let lid = self.check_id(&l.id, "landmark.id")?;
            let key = format!("landmark \"{lid}\"");
            if let Some(what) = seen.insert(lid.clone(), "landmark".into()) {
                return self.err(&l.id.span(), key, format!("duplicate id: already a {what}"));
            }
            let bookstein_type = match l.bookstein_type.get_ref().as_str() {
                "I" | "1" => BooksteinType::I,
                "II" | "2" => BooksteinType::II,
                "III" | "3" => BooksteinType::III,
                other => {
                    return self.err(
                        &l.bookstein_type.span(),
                        format!("{key}.type"),
                        format!(
                            "'{other}' is not a Bookstein type (write \"I\", \"II\" or \"III\")"
                        ),
                    );
                }
            };
            landmarks.push(LandmarkDef {
                name: l.name.clone().unwrap_or_else(|| lid.clone()),
                id: lid,
                definition: l.definition.clone().unwrap_or_default(),
                bookstein_type,
                partner: l.partner.as_ref().map(|p| p.get_ref().clone()),
                on_surface: l.surface.unwrap_or(true),
            });
        }

        // bilateral partners: known, not itself, reciprocal
        for (l, def) in raw.landmarks.iter().zip(&landmarks) {
            let Some(p) = &l.partner else { continue };
            let key = format!("landmark \"{}\".partner", def.id);
            let pid = p.get_ref();
            if *pid == def.id {
                return self.err(
                    &p.span(),
                    key,
                    "a landmark cannot be its own partner".into(),
                );
            }
            let Some(other) = landmarks.iter().find(|o| o.id == *pid) else {
                return self.err(
                    &p.span(),
                    key,
                    format!("'{pid}' is not a landmark of this scheme"),
                );
            };
            if other.partner.as_deref() != Some(def.id.as_str()) {
                let back = other
                    .partner
                    .as_deref()
                    .map_or_else(|| "names no partner".to_owned(), |b| format!("names '{b}'"));
                return self.err(
                    &p.span(),
                    key,
                    format!(
                        "'{pid}' does not pair back: its partner should be '{}' but it {back}",
                        def.id
                    ),
                );
            }
        }

        // curves
        let mut curves = Vec::with_capacity(raw.curves.len());
        for c in &raw.curves {
            let cid = self.check_id(&c.id, "curve.id")?;
            let key = format!("curve \"{cid}\"");
            if let Some(what) = seen.insert(cid.clone(), "curve".into()) {
                return self.err(&c.id.span(), key, format!("duplicate id: already a {what}"));
            }
            let anchors = c.anchors.get_ref();
            if anchors.len() < 2 {
                return self.err(
                    &c.anchors.span(),
                    format!("{key}.anchors"),
                    format!(
                        "a curve needs at least two anchor landmarks, found {}",
                        anchors.len()
                    ),
                );
            }
            for (i, a) in anchors.iter().enumerate() {
                if !landmarks.iter().any(|l| l.id == *a.get_ref()) {
                    return self.err(
                        &a.span(),
                        format!("{key}.anchors"),
                        format!("'{}' is not a landmark of this scheme", a.get_ref()),
                    );
                }
                if i > 0 && anchors[i - 1].get_ref() == a.get_ref() {
                    return self.err(
                        &a.span(),
                        format!("{key}.anchors"),
                        format!(
                            "'{}' follows itself: a segment needs two different ends",
                            a.get_ref()
                        ),
                    );
                }
            }
            let segments = anchors.len() - 1;
            let semilandmarks = self.semilandmarks(&c.semilandmarks, segments, &key)?;
            curves.push(CurveDef {
                name: c.name.clone().unwrap_or_else(|| cid.clone()),
                id: cid,
                definition: c.definition.clone().unwrap_or_default(),
                anchors: anchors.iter().map(|a| a.get_ref().clone()).collect(),
                semilandmarks,
            });
        }
        // semilandmark names must not collide with landmark or curve ids
        for (c, rc) in curves.iter().zip(&raw.curves) {
            for name in c.semilandmark_names() {
                if let Some(what) = seen.get(&name) {
                    return self.err(
                        &rc.id.span(),
                        format!("curve \"{}\"", c.id),
                        format!("its semilandmark '{name}' has the same name as a {what}"),
                    );
                }
            }
        }

        // measurements
        let mut measurements = Vec::with_capacity(raw.measurements.len());
        let mut seen_m: HashSet<String> = HashSet::new();
        for m in &raw.measurements {
            let mid = self.check_id(&m.id, "measurement.id")?;
            let key = format!("measurement \"{mid}\"");
            if !seen_m.insert(mid.clone()) {
                return self.err(&m.id.span(), key, "duplicate id".into());
            }
            let kind = self.measurement_kind(m, &key, &landmarks, &curves)?;
            measurements.push(MeasurementDef {
                name: m.name.clone().unwrap_or_else(|| mid.clone()),
                id: mid,
                definition: m.definition.clone().unwrap_or_default(),
                kind,
            });
        }

        Ok(Scheme {
            id,
            name: raw.name.unwrap_or_else(|| raw.id.get_ref().clone()),
            description: raw.description.unwrap_or_default(),
            landmarks,
            curves,
            measurements,
        })
    }

    fn semilandmarks(
        &self,
        v: &Spanned<toml::Value>,
        segments: usize,
        key: &str,
    ) -> Result<Vec<usize>, SchemeError> {
        let key = format!("{key}.semilandmarks");
        let count = |x: &toml::Value| -> Option<usize> {
            x.as_integer()
                .and_then(|n| usize::try_from(n).ok())
                .filter(|&n| n <= MAX_SEMILANDMARKS_PER_SEGMENT)
        };
        let bad = |what: String| self.err(&v.span(), key.clone(), what);
        let limit = MAX_SEMILANDMARKS_PER_SEGMENT;
        match v.get_ref() {
            toml::Value::Array(a) => {
                if a.len() != segments {
                    return bad(format!(
                        "{} numbers for {segments} segments (one per pair of consecutive anchors)",
                        a.len()
                    ));
                }
                a.iter()
                    .map(|x| count(x).ok_or(()))
                    .collect::<Result<Vec<_>, _>>()
                    .or_else(|()| {
                        bad(format!(
                            "each number must be a whole number from 0 to {limit}"
                        ))
                    })
            }
            x => match count(x) {
                Some(n) => Ok(vec![n; segments]),
                None => bad(format!(
                    "{x} is not a count: give a whole number from 0 to {limit}, or a list with one \
                     per segment"
                )),
            },
        }
    }

    #[allow(
        clippy::too_many_lines,
        reason = "one check after another for the four kinds"
    )]
    fn measurement_kind(
        &self,
        m: &RawMeasurement,
        key: &str,
        landmarks: &[LandmarkDef],
        curves: &[CurveDef],
    ) -> Result<MeasurementKind, SchemeError> {
        let given: Vec<&str> = [
            m.distance.as_ref().map(|_| "distance"),
            m.angle.as_ref().map(|_| "angle"),
            m.point_to_line.as_ref().map(|_| "point_to_line"),
            m.curve_length.as_ref().map(|_| "curve_length"),
        ]
        .into_iter()
        .flatten()
        .collect();
        if given.len() != 1 {
            let what = if given.is_empty() {
                "no kind: give one of distance, angle, point_to_line, curve_length".to_owned()
            } else {
                format!(
                    "{} kinds given ({}); give exactly one",
                    given.len(),
                    given.join(", ")
                )
            };
            return self.err(&m.id.span(), key.to_owned(), what);
        }
        let landmark = |id: &Id, sub: &str| -> Result<String, SchemeError> {
            if landmarks.iter().any(|l| l.id == *id.get_ref()) {
                Ok(id.get_ref().clone())
            } else {
                self.err(
                    &id.span(),
                    format!("{key}.{sub}"),
                    format!("'{}' is not a landmark of this scheme", id.get_ref()),
                )
            }
        };
        let list = |v: &Spanned<Vec<Id>>,
                    sub: &str,
                    n: usize,
                    what: &str|
         -> Result<Vec<String>, SchemeError> {
            if v.get_ref().len() != n {
                return self.err(
                    &v.span(),
                    format!("{key}.{sub}"),
                    format!("needs {n} landmarks ({what}), found {}", v.get_ref().len()),
                );
            }
            let ids = v
                .get_ref()
                .iter()
                .map(|id| landmark(id, sub))
                .collect::<Result<Vec<_>, _>>()?;
            for i in 0..n {
                for j in i + 1..n {
                    if ids[i] == ids[j] {
                        return self.err(
                            &v.span(),
                            format!("{key}.{sub}"),
                            format!("'{}' appears twice: the points must differ", ids[i]),
                        );
                    }
                }
            }
            Ok(ids)
        };
        if let Some(d) = &m.distance {
            let ids = list(d, "distance", 2, "the two ends")?;
            return Ok(MeasurementKind::Distance {
                from: ids[0].clone(),
                to: ids[1].clone(),
            });
        }
        if let Some(a) = &m.angle {
            let ids = list(a, "angle", 3, "end, vertex, end")?;
            return Ok(MeasurementKind::Angle {
                from: ids[0].clone(),
                vertex: ids[1].clone(),
                to: ids[2].clone(),
            });
        }
        if let Some(pl) = &m.point_to_line {
            let pl = pl.get_ref();
            let point = landmark(&pl.point, "point_to_line.point")?;
            let line = list(&pl.line, "point_to_line.line", 2, "two points on the line")?;
            if line.contains(&point) {
                return self.err(
                    &pl.point.span(),
                    format!("{key}.point_to_line"),
                    format!("'{point}' is also on the line: its distance would always be 0"),
                );
            }
            return Ok(MeasurementKind::PointToLine {
                point,
                line: [line[0].clone(), line[1].clone()],
            });
        }
        let c = m.curve_length.as_ref().expect("exactly one kind was given");
        if !curves.iter().any(|x| x.id == *c.get_ref()) {
            return self.err(
                &c.span(),
                format!("{key}.curve_length"),
                format!("'{}' is not a curve of this scheme", c.get_ref()),
            );
        }
        Ok(MeasurementKind::CurveLength {
            curve: c.get_ref().clone(),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const GOOD: &str = r#"
format_version = 1
id = "test-scheme"
name = "Test"

[[landmark]]
id = "tip"
type = "II"
definition = "the tip"

[[landmark]]
id = "eye_L"
type = "I"
partner = "eye_R"

[[landmark]]
id = "eye_R"
type = "I"
partner = "eye_L"

[[landmark]]
id = "back"
type = "III"
surface = false

[[curve]]
id = "outline"
anchors = ["tip", "eye_L", "back"]
semilandmarks = [3, 2]

[[measurement]]
id = "length"
distance = ["tip", "back"]

[[measurement]]
id = "eye_angle"
angle = ["eye_L", "tip", "eye_R"]

[[measurement]]
id = "height"
point_to_line = { point = "eye_L", line = ["tip", "back"] }

[[measurement]]
id = "outline_length"
curve_length = "outline"
"#;

    fn parse(text: &str) -> Result<Scheme, SchemeError> {
        Scheme::parse(text, "s.toml")
    }

    /// Parses GOOD with `from` replaced by `to` and returns the error text.
    fn broken(from: &str, to: &str) -> String {
        assert!(GOOD.contains(from), "{from}");
        parse(&GOOD.replacen(from, to, 1)).unwrap_err().to_string()
    }

    #[test]
    fn reads_a_good_scheme() {
        let s = parse(GOOD).unwrap();
        assert_eq!(s.id, "test-scheme");
        assert_eq!(s.landmarks.len(), 4);
        assert_eq!(s.landmarks[0].name, "tip", "name defaults to the id");
        assert_eq!(s.landmarks[1].bookstein_type, BooksteinType::I);
        assert_eq!(s.landmarks[1].partner.as_deref(), Some("eye_R"));
        assert!(s.landmarks[0].on_surface && !s.landmarks[3].on_surface);
        assert_eq!(s.curves[0].semilandmarks, vec![3, 2]);
        assert_eq!(
            s.curves[0].semilandmark_names(),
            [
                "outline_s01",
                "outline_s02",
                "outline_s03",
                "outline_s04",
                "outline_s05"
            ]
        );
        assert_eq!(
            s.measurements[2].kind,
            MeasurementKind::PointToLine {
                point: "eye_L".into(),
                line: ["tip".into(), "back".into()]
            }
        );
        assert_eq!(s.measurements[1].kind.unit(), "deg");
        assert_eq!(s.landmark_index("back"), Some(3));
        assert_eq!(s.curves_anchored_at("eye_L").count(), 1);
        let one = parse(&GOOD.replace("semilandmarks = [3, 2]", "semilandmarks = 4")).unwrap();
        assert_eq!(one.curves[0].semilandmarks, vec![4, 4]);
    }

    #[test]
    #[allow(clippy::too_many_lines, reason = "a table of cases")]
    fn errors_name_the_key_and_line() {
        let cases = [
            // (replace, with, expected fragments)
            (
                "id = \"eye_R\"\ntype",
                "id = \"eye_L\"\ntype",
                vec!["s.toml:17", "landmark \"eye_L\"", "duplicate id"],
            ),
            (
                "partner = \"eye_R\"",
                "partner = \"eye_X\"",
                vec![":14:", ".partner", "'eye_X' is not a landmark"],
            ),
            (
                "partner = \"eye_R\"",
                "partner = \"eye_L\"",
                vec![":14:", "own partner"],
            ),
            (
                "partner = \"eye_L\"",
                "partner = \"tip\"",
                vec![
                    "landmark \"eye_L\".partner",
                    "'eye_R' does not pair back",
                    "names 'tip'",
                ],
            ),
            (
                "anchors = [\"tip\", \"eye_L\", \"back\"]",
                "anchors = [\"tip\"]",
                vec![":28:", "curve \"outline\".anchors", "at least two"],
            ),
            (
                "anchors = [\"tip\", \"eye_L\", \"back\"]",
                "anchors = [\"tip\", \"tip\"]",
                vec!["follows itself"],
            ),
            (
                "anchors = [\"tip\", \"eye_L\", \"back\"]",
                "anchors = [\"tip\", \"nose\"]",
                vec!["'nose' is not a landmark"],
            ),
            (
                "semilandmarks = [3, 2]",
                "semilandmarks = [3]",
                vec![":29:", "1 numbers for 2 segments"],
            ),
            (
                "semilandmarks = [3, 2]",
                "semilandmarks = -1",
                vec!["is not a count"],
            ),
            (
                "type = \"II\"",
                "type = \"IV\"",
                vec![":8:", "landmark \"tip\".type", "not a Bookstein type"],
            ),
            (
                "distance = [\"tip\", \"back\"]",
                "distance = [\"tip\", \"tip\"]",
                vec!["measurement \"length\".distance", "appears twice"],
            ),
            (
                "distance = [\"tip\", \"back\"]",
                "distance = [\"tip\"]",
                vec!["needs 2 landmarks"],
            ),
            (
                "distance = [\"tip\", \"back\"]",
                "",
                vec!["measurement \"length\"", "no kind"],
            ),
            (
                "distance = [\"tip\", \"back\"]",
                "distance = [\"tip\", \"back\"]\ncurve_length = \"outline\"",
                vec!["2 kinds given"],
            ),
            (
                "angle = [\"eye_L\", \"tip\", \"eye_R\"]",
                "angle = [\"eye_L\", \"eye_L\", \"eye_R\"]",
                vec!["appears twice"],
            ),
            (
                "line = [\"tip\", \"back\"]",
                "line = [\"eye_L\", \"back\"]",
                vec!["also on the line"],
            ),
            (
                "curve_length = \"outline\"",
                "curve_length = \"rim\"",
                vec!["'rim' is not a curve"],
            ),
            (
                "id = \"tip\"",
                "id = \"t ip\"",
                vec!["landmark.id", "not a valid id"],
            ),
            (
                "definition = \"the tip\"",
                "defintion = \"the tip\"",
                vec!["s.toml:9", "unknown field `defintion`"],
            ),
            (
                "id = \"outline\"",
                "id = \"tip\"",
                vec!["curve \"tip\"", "already a landmark"],
            ),
            (
                "id = \"eye_angle\"",
                "id = \"length\"",
                vec!["measurement \"length\"", "duplicate id"],
            ),
            (
                "format_version = 1",
                "format_version = \"one\"",
                vec!["format_version", "not a format version"],
            ),
            ("format_version = 1", "", vec!["format_version", "missing"]),
            ("name = \"Test\"", "name = \"Test", vec!["s.toml:4"]),
        ];
        for (from, to, want) in cases {
            let e = broken(from, to);
            for w in want {
                assert!(
                    e.contains(w),
                    "replacing {from:?} with {to:?}: {e:?} lacks {w:?}"
                );
            }
        }
    }

    #[test]
    fn semilandmark_names_must_not_clash() {
        let text = GOOD
            .replace("id = \"back\"", "id = \"outline_s02\"")
            .replace("\"back\"", "\"outline_s02\"");
        let e = parse(&text).unwrap_err().to_string();
        assert!(e.contains("same name as a landmark"), "{e}");
    }

    #[test]
    fn newer_format_is_refused_before_its_keys() {
        let text = GOOD.replace("format_version = 1", "format_version = 2\nnew_key = true");
        let e = parse(&text).unwrap_err();
        assert!(matches!(e, SchemeError::Newer { found: 2, .. }), "{e}");
        assert!(e.to_string().contains("newer than this build"), "{e}");
    }

    #[test]
    fn empty_scheme_is_refused() {
        let e = parse("format_version = 1\nid = \"x\"\n")
            .unwrap_err()
            .to_string();
        assert!(e.contains("no landmarks"), "{e}");
    }

    #[test]
    fn ids() {
        for ok in ["a", "snout_tip", "LM.1", "3-b"] {
            assert!(is_valid_id(ok), "{ok}");
        }
        for bad in ["", "_a", "a b", "a,b", "é", &"x".repeat(65)] {
            assert!(!is_valid_id(bad), "{bad}");
        }
    }

    #[test]
    fn sha256_of_abc() {
        // FIPS 180-2, appendix B.1: SHA-256("abc")
        assert_eq!(
            sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }
}
