//! The project file: JSON, written atomically with a backup, versioned and migrated.
//!
//! Layout (the README documents every field):
//!
//! ```json
//! {
//!   "format": "sutura-project",
//!   "format_version": 2,
//!   "scheme": { "origin": "scheme.toml", "sha256": "…", "text": "…" },
//!   "specimens": [ … ]
//! }
//! ```
//!
//! - **Exact.** Floats are written in their shortest form that reads back to the same `f64`
//!   (`serde_json`'s, with its `float_roundtrip` parsing), fields in a fixed order, group labels
//!   sorted by key, lists in document order; so loading and saving gives the same bytes. Arrays
//!   of numbers (positions, matrix rows) stay on one line, everything else is indented two
//!   spaces, and the file ends with a newline.
//! - **Safe to save.** [`Project::save`] writes to a temporary file in the same folder, syncs
//!   it, keeps the file it replaces as `NAME.bak` ([`backup_path`]), renames the new file over
//!   the old and syncs the folder (`export::write_atomic_keeping_backup`): a crash or a full
//!   disk at any moment leaves the previous project intact.
//! - **Versioned.** `format_version` is [`FORMAT_VERSION`]; a file from a newer Sutura is
//!   refused with a message saying so; an older one is upgraded step by step on its JSON value
//!   ([`UPGRADES`]) before it is read, and saved in the current format.
//! - **Autosave.** The GUI saves unsaved work to `NAME.autosave` ([`autosave_path`]) beside the
//!   project; [`autosave_status`] tells whether it holds work newer than the project.
//!
//! On load the embedded scheme text must still match its recorded SHA-256, and the document
//! must satisfy every invariant of the project module; errors name the file and the item.

use serde::{Deserialize, Serialize};
use serde_json::ser::{CompactFormatter, Formatter};
use std::io::Write;
use std::path::{Path, PathBuf};

use super::{Project, SchemeCopy, Specimen};
use crate::export::{ExportError, write_atomic, write_atomic_keeping_backup};
use crate::landmarks::scheme::{Scheme, SchemeError, sha256_hex};

/// The value of the `format` field.
pub const FORMAT_NAME: &str = "sutura-project";
/// The format version this build writes, and the newest it reads.
///
/// - 1: the first release.
/// - 2: a landmark entry may carry `pick`, the ray, threshold and refinement of a surface
///   point picked along a ray.
pub const FORMAT_VERSION: u64 = 2;

/// An upgrade of the JSON value from version `n` to `n + 1` (`UPGRADES[n - 1]`).
type Upgrade = fn(&mut serde_json::Value) -> Result<(), String>;

/// The chain of upgrades from each older format version to the next.
pub const UPGRADES: &[Upgrade] = &[upgrade_1_to_2];

/// Version 2 added the optional `pick` record to landmark entries; a version 1 file has none,
/// so its content stands as it is. Checks that it holds no key version 2 would misread.
fn upgrade_1_to_2(v: &mut serde_json::Value) -> Result<(), String> {
    let entries = v["specimens"]
        .as_array()
        .into_iter()
        .flatten()
        .flat_map(|s| s["trials"].as_array().into_iter().flatten())
        .flat_map(|t| t["landmarks"].as_array().into_iter().flatten());
    for e in entries {
        if e.get("pick").is_some() {
            return Err("a version 1 landmark entry has a 'pick' key".into());
        }
    }
    Ok(())
}

/// Why a project cannot be read or written. Every variant names the file.
#[derive(Debug, thiserror::Error)]
pub enum ProjectError {
    #[error("{}: {source}", path.display())]
    Os {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    /// Not a project file, or one that breaks the format's rules.
    #[error("{}: {what}", path.display())]
    Corrupt { path: PathBuf, what: String },
    #[error(
        "{}: written by a newer Sutura (project format_version {found}; this build reads up to \
         {FORMAT_VERSION}): update Sutura to open it",
        path.display()
    )]
    Newer { path: PathBuf, found: u64 },
    #[error("{}: the project's scheme: {source}", path.display())]
    Scheme {
        path: PathBuf,
        #[source]
        source: SchemeError,
    },
    #[error("{}: another program is changing this project (it holds {}); try again when it is done", path.display(), lock_path(path).display())]
    Busy { path: PathBuf },
    #[error(transparent)]
    Write(#[from] ExportError),
}

/// Whether a file is a landmark project: a `.json` file whose first kilobyte names the project
/// format (other JSON files, such as exported tables, are not). The one test both front ends
/// use to tell a project from a scan.
#[must_use]
pub fn is_project_file(path: &Path) -> bool {
    use std::io::Read as _;
    let is_json = path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("json"));
    if !is_json || !path.is_file() {
        return false;
    }
    let mut head = Vec::with_capacity(1024);
    std::fs::File::open(path)
        .and_then(|f| f.take(1024).read_to_end(&mut head))
        .is_ok_and(|_| {
            let text = String::from_utf8_lossy(&head);
            let compact: String = text.split_whitespace().collect();
            compact.contains(&format!("\"format\":\"{FORMAT_NAME}\""))
        })
}

/// `NAME.bak`: the previous version, kept by every save.
#[must_use]
pub fn backup_path(project_file: &Path) -> PathBuf {
    with_suffix(project_file, ".bak")
}

/// `NAME.autosave`: unsaved work, written by the GUI now and then.
#[must_use]
pub fn autosave_path(project_file: &Path) -> PathBuf {
    with_suffix(project_file, ".autosave")
}

fn with_suffix(p: &Path, suffix: &str) -> PathBuf {
    let mut s = p.as_os_str().to_owned();
    s.push(suffix);
    PathBuf::from(s)
}

/// `.NAME.lock`: the file a writer holds locked while it reads, changes and saves the project.
#[must_use]
pub fn lock_path(project_file: &Path) -> PathBuf {
    let name = project_file
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    super::project_dir(project_file).join(format!(".{name}.lock"))
}

/// An exclusive advisory lock on a project, held until dropped, so two programs (the command
/// line and the GUI, or two scripts) cannot both read, change and save it and lose one's work.
#[derive(Debug)]
pub struct ProjectLock {
    _file: std::fs::File,
}

impl ProjectLock {
    /// Takes the lock, or fails at once if another program holds it.
    pub fn acquire(project_file: &Path) -> Result<Self, ProjectError> {
        let path = lock_path(project_file);
        let file = std::fs::OpenOptions::new()
            .create(true)
            .truncate(false)
            .write(true)
            .open(&path)
            .map_err(|source| ProjectError::Os {
                path: path.clone(),
                source,
            })?;
        match file.try_lock() {
            Ok(()) => Ok(Self { _file: file }),
            Err(std::fs::TryLockError::WouldBlock) => Err(ProjectError::Busy {
                path: project_file.to_owned(),
            }),
            Err(std::fs::TryLockError::Error(source)) => Err(ProjectError::Os { path, source }),
        }
    }
}

/// What lies in the autosave file beside a project.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum AutosaveStatus {
    /// No autosave file.
    None,
    /// An autosave that is older than the project or holds the same document: safe to delete.
    Stale,
    /// An autosave written after the project was last saved, holding a different document:
    /// offer to recover it.
    Newer { modified: std::time::SystemTime },
}

/// Compares the autosave beside `project_file` with the project file.
pub fn autosave_status(project_file: &Path) -> Result<AutosaveStatus, ProjectError> {
    let auto = autosave_path(project_file);
    let os = |path: &Path, source| ProjectError::Os {
        path: path.to_owned(),
        source,
    };
    let auto_meta = match std::fs::metadata(&auto) {
        Ok(m) => m,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(AutosaveStatus::None),
        Err(e) => return Err(os(&auto, e)),
    };
    let modified = auto_meta.modified().map_err(|e| os(&auto, e))?;
    let project_modified = match std::fs::metadata(project_file) {
        Ok(m) => Some(m.modified().map_err(|e| os(project_file, e))?),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => None,
        Err(e) => return Err(os(project_file, e)),
    };
    if project_modified.is_some_and(|p| p > modified) {
        return Ok(AutosaveStatus::Stale);
    }
    let same = project_modified.is_some()
        && std::fs::read(&auto).map_err(|e| os(&auto, e))?
            == std::fs::read(project_file).map_err(|e| os(project_file, e))?;
    Ok(if same {
        AutosaveStatus::Stale
    } else {
        AutosaveStatus::Newer { modified }
    })
}

/// The file's layout, for reading.
#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct OnDisk {
    #[allow(
        dead_code,
        reason = "checked on the JSON value before this struct is read"
    )]
    format: String,
    #[allow(
        dead_code,
        reason = "checked on the JSON value before this struct is read"
    )]
    format_version: u64,
    scheme: SchemeCopy,
    specimens: Vec<Specimen>,
}

/// The file's layout, for writing (same field order as [`OnDisk`]).
#[derive(Serialize)]
struct OnDiskRef<'a> {
    format: &'static str,
    format_version: u64,
    scheme: &'a SchemeCopy,
    specimens: &'a [Specimen],
}

impl Project {
    /// Reads a project file (migrating an older format in memory).
    pub fn load(path: &Path) -> Result<Self, ProjectError> {
        let bytes = std::fs::read(path).map_err(|source| ProjectError::Os {
            path: path.to_owned(),
            source,
        })?;
        Self::from_slice(&bytes, path)
    }

    /// Reads a project from bytes; `path` names it in errors.
    pub fn from_slice(bytes: &[u8], path: &Path) -> Result<Self, ProjectError> {
        let corrupt = |what: String| ProjectError::Corrupt {
            path: path.to_owned(),
            what,
        };
        let mut value: serde_json::Value = serde_json::from_slice(bytes)
            .map_err(|e| corrupt(format!("not a readable JSON file: {e}")))?;
        if value.get("format").and_then(|f| f.as_str()) != Some(FORMAT_NAME) {
            return Err(corrupt(format!(
                "not a Sutura project (no \"format\": \"{FORMAT_NAME}\")"
            )));
        }
        let version = value
            .get("format_version")
            .and_then(serde_json::Value::as_u64)
            .filter(|&v| v >= 1)
            .ok_or_else(|| corrupt("no valid format_version".into()))?;
        if version > FORMAT_VERSION {
            return Err(ProjectError::Newer {
                path: path.to_owned(),
                found: version,
            });
        }
        for from in version..FORMAT_VERSION {
            let step = UPGRADES[usize::try_from(from - 1).expect("small version")];
            step(&mut value).map_err(|e| {
                corrupt(format!(
                    "upgrading from format_version {from} to {}: {e}",
                    from + 1
                ))
            })?;
            value["format_version"] = serde_json::Value::from(from + 1);
        }
        let disk: OnDisk = serde_json::from_value(value).map_err(|e| corrupt(format!("{e}")))?;
        if sha256_hex(disk.scheme.text.as_bytes()) != disk.scheme.sha256 {
            return Err(corrupt(
                "the embedded scheme text does not match its recorded SHA-256 (was the file \
                 edited by hand?)"
                    .into(),
            ));
        }
        let origin = format!("scheme copied from {}", disk.scheme.origin);
        let scheme =
            Scheme::parse(&disk.scheme.text, &origin).map_err(|source| ProjectError::Scheme {
                path: path.to_owned(),
                source,
            })?;
        let project = Self {
            scheme,
            scheme_copy: disk.scheme,
            specimens: disk.specimens,
        };
        project.validate().map_err(corrupt)?;
        Ok(project)
    }

    /// Writes the project's JSON (see the module docs for the layout and formatting).
    pub fn write_to(&self, w: &mut dyn Write) -> std::io::Result<()> {
        let doc = OnDiskRef {
            format: FORMAT_NAME,
            format_version: FORMAT_VERSION,
            scheme: &self.scheme_copy,
            specimens: &self.specimens,
        };
        let mut ser = serde_json::Serializer::with_formatter(&mut *w, InlineNumbers::default());
        doc.serialize(&mut ser).map_err(std::io::Error::other)?;
        w.write_all(b"\n")
    }

    /// The project's file content.
    #[must_use]
    pub fn to_bytes(&self) -> Vec<u8> {
        let mut out = Vec::new();
        self.write_to(&mut out).expect("writing to memory succeeds");
        out
    }

    /// Saves atomically, keeping the previous file as [`backup_path`].
    pub fn save(&self, path: &Path) -> Result<(), ProjectError> {
        write_atomic_keeping_backup(path, &backup_path(path), |w| self.write_to(w))?;
        Ok(())
    }

    /// Writes the autosave beside `project_file` (atomically, no backup).
    pub fn save_autosave(&self, project_file: &Path) -> Result<(), ProjectError> {
        write_atomic(&autosave_path(project_file), |w| self.write_to(w))?;
        Ok(())
    }
}

/// Pretty JSON with arrays of scalars on one line: `"position_mm": [1.5, 2.25, 0.75]`.
///
/// `serde_json` tells a formatter that an array starts before it says what the elements are, so
/// the layout of each array is decided at its first element: inline if it is a scalar, one
/// element per line if it is an object or an array.
#[derive(Default)]
struct InlineNumbers {
    indent: usize,
    /// Per open container: `None` for an object, `Some(layout)` for an array.
    stack: Vec<Option<ArrayLayout>>,
    /// An array element is about to start; `true` if it is the first.
    pending: Option<bool>,
    /// Whether the innermost open object has any key yet.
    has_key: Vec<bool>,
}

#[derive(Clone, Copy, PartialEq, Eq)]
enum ArrayLayout {
    Undecided,
    Inline,
    Block,
}

impl InlineNumbers {
    fn newline<W: ?Sized + Write>(&self, w: &mut W) -> std::io::Result<()> {
        w.write_all(b"\n")?;
        for _ in 0..self.indent {
            w.write_all(b"  ")?;
        }
        Ok(())
    }

    /// Called before any value; writes the separator of a pending array element.
    fn value_start<W: ?Sized + Write>(&mut self, w: &mut W, scalar: bool) -> std::io::Result<()> {
        let Some(first) = self.pending.take() else {
            return Ok(());
        };
        let Some(Some(layout)) = self.stack.last_mut() else {
            return Ok(());
        };
        if *layout == ArrayLayout::Undecided {
            *layout = if scalar {
                ArrayLayout::Inline
            } else {
                self.indent += 1;
                ArrayLayout::Block
            };
        }
        let layout = *layout;
        if !first {
            w.write_all(b",")?;
        }
        match layout {
            ArrayLayout::Inline if !first => w.write_all(b" "),
            ArrayLayout::Block => self.newline(w),
            _ => Ok(()),
        }
    }
}

macro_rules! scalar {
    ($($name:ident: $t:ty),* $(,)?) => {
        $(
            fn $name<W: ?Sized + Write>(&mut self, w: &mut W, v: $t) -> std::io::Result<()> {
                self.value_start(w, true)?;
                CompactFormatter.$name(w, v)
            }
        )*
    };
}

impl Formatter for InlineNumbers {
    scalar!(
        write_bool: bool, write_i8: i8, write_i16: i16, write_i32: i32, write_i64: i64,
        write_i128: i128, write_u8: u8, write_u16: u16, write_u32: u32, write_u64: u64,
        write_u128: u128, write_f32: f32, write_f64: f64, write_number_str: &str,
    );

    fn write_null<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        self.value_start(w, true)?;
        w.write_all(b"null")
    }

    fn begin_string<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        self.value_start(w, true)?;
        w.write_all(b"\"")
    }

    fn begin_array<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        self.value_start(w, false)?;
        self.stack.push(Some(ArrayLayout::Undecided));
        w.write_all(b"[")
    }

    fn begin_array_value<W: ?Sized + Write>(
        &mut self,
        _w: &mut W,
        first: bool,
    ) -> std::io::Result<()> {
        self.pending = Some(first);
        Ok(())
    }

    fn end_array_value<W: ?Sized + Write>(&mut self, _w: &mut W) -> std::io::Result<()> {
        Ok(())
    }

    fn end_array<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        if self.stack.pop() == Some(Some(ArrayLayout::Block)) {
            self.indent -= 1;
            self.newline(w)?;
        }
        w.write_all(b"]")
    }

    fn begin_object<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        self.value_start(w, false)?;
        self.stack.push(None);
        self.has_key.push(false);
        self.indent += 1;
        w.write_all(b"{")
    }

    fn begin_object_key<W: ?Sized + Write>(
        &mut self,
        w: &mut W,
        first: bool,
    ) -> std::io::Result<()> {
        if let Some(k) = self.has_key.last_mut() {
            *k = true;
        }
        if !first {
            w.write_all(b",")?;
        }
        self.newline(w)
    }

    fn begin_object_value<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        w.write_all(b": ")
    }

    fn end_object<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        self.stack.pop();
        self.indent -= 1;
        if self.has_key.pop() == Some(true) {
            self.newline(w)?;
        }
        w.write_all(b"}")
    }
}
