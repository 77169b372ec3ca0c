//! Helpers shared by the integration tests: temp dirs, the built binary, the reference files
//! and the reference values computed by the Python libraries (numpy, scipy, nibabel, tifffile,
//! statsmodels), kept as committed fixtures so that `cargo test` needs neither Python nor the
//! network.
//!
//! # Reference values and their fixtures
//!
//! Every call of a script in `tests/python/` goes through [`Reference`] and has a stable name.
//! Its answer is kept in `tests/fixtures/reference/<name>.json` together with what it was
//! computed from: the script's SHA-256, its arguments (with the folders named below written as
//! `${refdata}`, `${root}` or `${<key>}`, so a temp dir never enters a fixture), the SHA-256 of
//! every input file it read, and the versions of the pinned Python packages
//! (`tests/python/requirements.txt`). `SUTURA_REFERENCE` chooses what a call does:
//!
//! - unset or `fixture` (the default): reads the fixture; no Python runs. The fixture must
//!   have been made by the same script from the same arguments and the same input bytes,
//!   otherwise the test fails and says what changed: an old fixture is never used for new
//!   inputs.
//! - `live` (what `scripts/test.sh` sets in CI): runs the script as well, checks that its answer
//!   agrees with the fixture (numbers to [`OUTPUT_TOLERANCE`] unless the call states its own,
//!   everything else exactly), fails on drift, and returns the live answer.
//! - `record`: runs the script and (re)writes the fixture. `scripts/refresh_references.sh` does
//!   this for the whole suite; commit the fixtures it writes.
//!
//! Adding a check: write the script so that everything it reads is deterministic (seeded
//! generators, files written by the test from fixed data, or reference files under
//! `target/refdata`), then
//!
//! ```ignore
//! let r = common::Reference::new("shape_tps_2d", "shape2_tps.py")
//!     .arg(json_text)                  // plain arguments
//!     .dir("tmp", dir.path())          // a temp folder appears as ${tmp} in the fixture
//!     .path_arg(&dir.path().join("x")) // a path argument (rewritten through the folders)
//!     .input(&dir.path().join("x"))    // a file or folder whose bytes the answer depends on
//!     .run();
//! ```
//!
//! and run `scripts/refresh_references.sh` once (it needs the venv: `scripts/fetch_refdata.sh`
//! makes it). Reference files (nibabel's test files, Pillow's TIFF images, files written by
//! tifffile and nibabel) are made by `scripts/fetch_refdata.sh` under `target/refdata`; the
//! tests read them there, offline.

#![allow(
    dead_code,
    reason = "each test binary uses a different subset of the helpers"
)]

use serde_json::Value;
use std::collections::{BTreeMap, HashMap};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::{Mutex, OnceLock};
use sutura_core::landmarks::scheme::sha256_hex;

/// The project root.
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// The folder of reference files made by `scripts/fetch_refdata.sh` (`$SUTURA_REFDATA`, else
/// `target/refdata`).
pub fn reference_dir() -> PathBuf {
    std::env::var_os("SUTURA_REFDATA").map_or_else(|| root().join("target/refdata"), PathBuf::from)
}

/// A folder of `reference_dir()`, checked to exist.
pub fn reference_path(rel: &str) -> PathBuf {
    let p = reference_dir().join(rel);
    assert!(
        p.exists(),
        "{} missing: run scripts/fetch_refdata.sh once (it needs the network the first time)",
        p.display()
    );
    p
}

/// The `sutura` binary built for these tests.
pub fn sutura() -> Command {
    Command::new(env!("CARGO_BIN_EXE_sutura"))
}

/// Runs the binary and returns (success, stdout, stderr).
pub fn run_sutura(args: &[&str], cwd: &Path) -> (bool, String, String) {
    let out = sutura()
        .args(args)
        .current_dir(cwd)
        .output()
        .expect("start sutura");
    (
        out.status.success(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// How far a live answer may be from its fixture before it counts as drift: relative, then
/// absolute. The packages are pinned, so the only expected difference is in the last bits of
/// floating-point results (another CPU's BLAS kernels, another summation order), a few ulps
/// amplified by the conditioning of a fit; 1e-9 leaves room for that and nothing else.
pub const OUTPUT_TOLERANCE: (f64, f64) = (1e-9, 1e-12);

/// How close numbers in a call's arguments must be to those it was recorded with: the last few
/// bits only (a different summation order in the Rust code that made them), so a fixture
/// answers only the question it was asked.
pub const ARGUMENT_TOLERANCE: (f64, f64) = (1e-12, 1e-15);

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Mode {
    Fixture,
    Live,
    Record,
}

fn mode() -> Mode {
    match std::env::var("SUTURA_REFERENCE").as_deref() {
        Err(_) | Ok("" | "fixture") => Mode::Fixture,
        Ok("live") => Mode::Live,
        Ok("record") => Mode::Record,
        Ok(other) => panic!("SUTURA_REFERENCE={other}: expected fixture, live or record"),
    }
}

/// The Python interpreter of the reference venv: `$SUTURA_PYTHON`, else `.venv/bin/python`.
/// Only live and record runs need it.
pub fn python() -> PathBuf {
    let p = std::env::var_os("SUTURA_PYTHON")
        .map_or_else(|| root().join(".venv/bin/python"), PathBuf::from);
    assert!(
        p.exists(),
        "reference Python not found at {}: run scripts/fetch_refdata.sh (it builds the venv) or set SUTURA_PYTHON",
        p.display()
    );
    p
}

/// Versions of the pinned packages in the venv, by name.
fn package_versions() -> Value {
    static VERSIONS: OnceLock<Value> = OnceLock::new();
    VERSIONS
        .get_or_init(|| {
            let req = std::fs::read_to_string(root().join("tests/python/requirements.txt"))
                .expect("tests/python/requirements.txt");
            let names: Vec<&str> = req
                .lines()
                .map(|l| l.split('#').next().unwrap_or("").trim())
                .filter(|l| !l.is_empty())
                .map(|l| l.split(['=', '<', '>', '~', '!', '[', ';']).next().unwrap().trim())
                .collect();
            let out = Command::new(python())
                .arg("-c")
                .arg("import importlib.metadata as m, json, sys; print(json.dumps({n: m.version(n) for n in sys.argv[1:]}))")
                .args(&names)
                .output()
                .expect("start python");
            assert!(
                out.status.success(),
                "reading package versions failed:\n{}",
                String::from_utf8_lossy(&out.stderr)
            );
            serde_json::from_slice(&out.stdout).expect("versions as JSON")
        })
        .clone()
}

/// SHA-256 of a file, or of a folder: every file under it, by relative path, in sorted order.
fn digest(path: &Path) -> String {
    if path.is_dir() {
        let mut files = Vec::new();
        collect_files(path, &mut files);
        files.sort();
        let mut listing = String::new();
        for f in files {
            let rel = f.strip_prefix(path).unwrap().to_string_lossy().into_owned();
            let _ = writeln!(listing, "{rel}\t{}", digest(&f));
        }
        sha256_hex(listing.as_bytes())
    } else {
        let bytes = std::fs::read(path).unwrap_or_else(|e| {
            panic!(
                "reference input {}: {e} (reference files come from scripts/fetch_refdata.sh)",
                path.display()
            )
        });
        sha256_hex(&bytes)
    }
}

fn collect_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for e in std::fs::read_dir(dir).unwrap_or_else(|e| panic!("{}: {e}", dir.display())) {
        let p = e.unwrap().path();
        if p.is_dir() {
            collect_files(&p, out);
        } else {
            out.push(p);
        }
    }
}

/// Names already recorded in this process, with their arguments: one name, one question.
fn recorded() -> &'static Mutex<HashMap<String, Value>> {
    static SEEN: OnceLock<Mutex<HashMap<String, Value>>> = OnceLock::new();
    SEEN.get_or_init(|| Mutex::new(HashMap::new()))
}

/// One call of a reference script, by a stable name (see the module's documentation).
#[must_use = "a reference does nothing until it is run"]
pub struct Reference {
    name: String,
    script: String,
    args: Vec<String>,
    dirs: Vec<(String, String)>,
    inputs: Vec<PathBuf>,
    tolerance: (f64, f64),
}

impl Reference {
    /// A call of `tests/python/<script>` named `name` (the fixture's file name: letters, digits,
    /// `_` and `-`).
    pub fn new(name: &str, script: &str) -> Self {
        assert!(
            !name.is_empty()
                && name
                    .chars()
                    .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-'),
            "reference name {name:?}: use letters, digits, _ and -"
        );
        let mut r = Self {
            name: name.to_owned(),
            script: script.to_owned(),
            args: Vec::new(),
            dirs: Vec::new(),
            inputs: Vec::new(),
            tolerance: OUTPUT_TOLERANCE,
        };
        r = r.dir("refdata", &reference_dir());
        r.dir("root", &root())
    }

    /// One argument.
    pub fn arg(mut self, a: impl Into<String>) -> Self {
        self.args.push(a.into());
        self
    }

    /// A path argument.
    pub fn path_arg(self, p: &Path) -> Self {
        let s = p.to_str().expect("UTF-8 path").to_owned();
        self.arg(s)
    }

    /// Writes `path` as `${key}` in the fixture, in arguments and answers alike.
    pub fn dir(mut self, key: &str, path: &Path) -> Self {
        let p = path.to_str().expect("UTF-8 path").to_owned();
        self.dirs.push((key.to_owned(), p));
        // longest first, so a folder inside another is named by its own key
        self.dirs.sort_by_key(|(_, p)| std::cmp::Reverse(p.len()));
        self
    }

    /// A file or folder the script reads: the fixture holds its SHA-256 and applies to those
    /// bytes only.
    pub fn input(mut self, path: &Path) -> Self {
        self.inputs.push(path.to_owned());
        self
    }

    /// Several inputs.
    pub fn inputs<'a>(mut self, paths: impl IntoIterator<Item = &'a PathBuf>) -> Self {
        self.inputs.extend(paths.into_iter().cloned());
        self
    }

    /// The drift tolerance of this call's numbers (relative, absolute), when
    /// [`OUTPUT_TOLERANCE`] does not fit; say why where it is used.
    pub fn tolerance(mut self, relative: f64, absolute: f64) -> Self {
        self.tolerance = (relative, absolute);
        self
    }

    fn fixture_path(&self) -> PathBuf {
        root()
            .join("tests/fixtures/reference")
            .join(format!("{}.json", self.name))
    }

    fn name_placeholders(&self, s: &str) -> String {
        let mut s = s.to_owned();
        for (key, path) in &self.dirs {
            s = s.replace(path.as_str(), &format!("${{{key}}}"));
        }
        s
    }

    fn expand_placeholders(&self, s: &str) -> String {
        let mut s = s.to_owned();
        for (key, path) in &self.dirs {
            s = s.replace(&format!("${{{key}}}"), path);
        }
        s
    }

    /// The question, as the fixture records it.
    fn question(&self) -> (String, Value, Value) {
        let script = root().join("tests/python").join(&self.script);
        let script_sha = digest(&script);
        let args: Vec<Value> = self
            .args
            .iter()
            .map(|a| Value::String(self.name_placeholders(a)))
            .collect();
        let inputs: BTreeMap<String, Value> = self
            .inputs
            .iter()
            .map(|p| {
                (
                    self.name_placeholders(p.to_str().expect("UTF-8 path")),
                    Value::String(digest(p)),
                )
            })
            .collect();
        (
            script_sha,
            Value::Array(args),
            serde_json::to_value(inputs).unwrap(),
        )
    }

    fn run_script(&self) -> Value {
        let out = Command::new(python())
            .arg(root().join("tests/python").join(&self.script))
            .args(&self.args)
            .output()
            .expect("start python");
        assert!(
            out.status.success(),
            "reference {} ({}) failed:\n{}",
            self.name,
            self.script,
            String::from_utf8_lossy(&out.stderr)
        );
        serde_json::from_slice(&out.stdout).unwrap_or_else(|e| {
            panic!(
                "reference {} ({}) printed no JSON ({e}):\n{}",
                self.name,
                self.script,
                String::from_utf8_lossy(&out.stdout)
            )
        })
    }

    /// Runs the script and writes its fixture.
    fn record(&self, path: &Path, script_sha: String, args: &Value, inputs: &Value) -> Value {
        let live = self.run_script();
        {
            let mut seen = recorded().lock().unwrap();
            if let Some(before) = seen.insert(self.name.clone(), args.clone()) {
                assert!(
                    &before == args,
                    "reference name {} is used for two different calls: {before} and {args}",
                    self.name
                );
            }
        }
        let output = map_strings(&live, &|s| self.name_placeholders(s));
        let text = format!(
            "{{\n\"script\": {},\n\"script_sha256\": {},\n\"args\": {},\n\"inputs\": {},\n\"versions\": {},\n\"output\": {}\n}}\n",
            Value::String(self.script.clone()),
            Value::String(script_sha),
            args,
            serde_json::to_string_pretty(inputs).unwrap(),
            package_versions(),
            output
        );
        let dir = path.parent().unwrap();
        std::fs::create_dir_all(dir).unwrap();
        let mut tmp = tempfile::NamedTempFile::new_in(dir).unwrap();
        std::io::Write::write_all(&mut tmp, text.as_bytes()).unwrap();
        tmp.persist(path).unwrap();
        live
    }

    /// Answers the question: from the fixture, live, or live and recorded (see the module's
    /// documentation). Fails, never skips, when the answer cannot be had.
    pub fn run(self) -> Value {
        let mode = mode();
        let (script_sha, args, inputs) = self.question();
        let path = self.fixture_path();
        let rel = path.strip_prefix(root()).unwrap().display().to_string();
        if mode == Mode::Record {
            return self.record(&path, script_sha, &args, &inputs);
        }
        let text = std::fs::read_to_string(&path).unwrap_or_else(|e| {
            panic!(
                "reference {}: no fixture {rel} ({e}); make it with scripts/refresh_references.sh",
                self.name
            )
        });
        let fixture: Value = serde_json::from_str(&text)
            .unwrap_or_else(|e| panic!("{rel}: not JSON ({e}); regenerate it"));
        let stale = |what: String| -> ! {
            panic!(
                "reference {}: {what} since {rel} was made; if the change is meant, regenerate the fixtures with scripts/refresh_references.sh and commit them",
                self.name
            )
        };
        if fixture["script"] != Value::String(self.script.clone()) {
            stale(format!(
                "the script is now {} (was {})",
                self.script, fixture["script"]
            ));
        }
        if fixture["script_sha256"] != Value::String(script_sha) {
            stale(format!("tests/python/{} changed", self.script));
        }
        let mut diffs = Vec::new();
        compare(
            &fixture["args"],
            &args,
            "args",
            ARGUMENT_TOLERANCE,
            &mut diffs,
        );
        if !diffs.is_empty() {
            stale(format!(
                "the arguments changed ({})",
                diffs.iter().take(5).cloned().collect::<Vec<_>>().join("; ")
            ));
        }
        if fixture["inputs"] != inputs {
            let old = fixture["inputs"].as_object().cloned().unwrap_or_default();
            let new = inputs.as_object().cloned().unwrap_or_default();
            let changed: Vec<String> = old
                .keys()
                .chain(new.keys())
                .filter(|k| old.get(*k) != new.get(*k))
                .take(5)
                .cloned()
                .collect();
            stale(format!(
                "input files changed: {} (if they are under ${{refdata}}, run scripts/fetch_refdata.sh first)",
                changed.join(", ")
            ));
        }
        if mode == Mode::Fixture {
            return map_strings(&fixture["output"], &|s| self.expand_placeholders(s));
        }
        let live = self.run_script();
        let mut drift = Vec::new();
        compare(
            &fixture["output"],
            &map_strings(&live, &|s| self.name_placeholders(s)),
            "output",
            self.tolerance,
            &mut drift,
        );
        assert!(
            drift.is_empty(),
            "reference {} drifted from {rel} ({} differences; tolerance {:?}); fixture made with {}, live with {}:\n{}\nif the change is meant, regenerate with scripts/refresh_references.sh and commit",
            self.name,
            drift.len(),
            self.tolerance,
            fixture["versions"],
            package_versions(),
            drift
                .iter()
                .take(10)
                .cloned()
                .collect::<Vec<_>>()
                .join("\n")
        );
        live
    }
}

/// `v` with `f` applied to every string in it.
fn map_strings(v: &Value, f: &dyn Fn(&str) -> String) -> Value {
    match v {
        Value::String(s) => Value::String(f(s)),
        Value::Array(a) => Value::Array(a.iter().map(|x| map_strings(x, f)).collect()),
        Value::Object(o) => Value::Object(
            o.iter()
                .map(|(k, x)| (k.clone(), map_strings(x, f)))
                .collect(),
        ),
        other => other.clone(),
    }
}

/// Differences between `want` and `got` at `at`: numbers within `(relative, absolute)`,
/// strings that hold JSON compared as JSON, everything else exactly.
pub fn compare(want: &Value, got: &Value, at: &str, tol: (f64, f64), out: &mut Vec<String>) {
    match (want, got) {
        (Value::Number(a), Value::Number(b)) => {
            let (a, b) = (a.as_f64().unwrap(), b.as_f64().unwrap());
            if (a - b).abs() > tol.0 * a.abs().max(b.abs()) + tol.1 {
                out.push(format!("{at}: {a} vs {b}"));
            }
        }
        (Value::String(a), Value::String(b)) if a != b => {
            match (
                serde_json::from_str::<Value>(a),
                serde_json::from_str::<Value>(b),
            ) {
                (Ok(ja), Ok(jb)) if ja.is_array() || ja.is_object() => {
                    compare(&ja, &jb, at, tol, out);
                }
                _ => out.push(format!("{at}: {a:?} vs {b:?}")),
            }
        }
        (Value::Array(a), Value::Array(b)) => {
            if a.len() == b.len() {
                for (i, (x, y)) in a.iter().zip(b).enumerate() {
                    compare(x, y, &format!("{at}[{i}]"), tol, out);
                }
            } else {
                out.push(format!("{at}: {} items vs {}", a.len(), b.len()));
            }
        }
        (Value::Object(a), Value::Object(b)) => {
            for k in a.keys().chain(b.keys().filter(|k| !a.contains_key(*k))) {
                match (a.get(k), b.get(k)) {
                    (Some(x), Some(y)) => compare(x, y, &format!("{at}.{k}"), tol, out),
                    _ => out.push(format!("{at}.{k}: present on one side only")),
                }
            }
        }
        (a, b) if a != b => out.push(format!("{at}: {a} vs {b}")),
        _ => {}
    }
}
