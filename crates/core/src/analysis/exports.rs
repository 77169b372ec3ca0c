//! Every export of a project, by kind: the one dispatch `sutura export`, `sutura measure -o`,
//! `sutura superimpose` and the workstation's export buttons share. Each kind has a default file
//! name (what the workstation writes into a chosen folder) and a description (the button's
//! tooltip, the README's list).

use std::path::{Path, PathBuf};

use crate::export::ExportError;
use crate::landmarks::Project;
use crate::landmarks::project::points::flatten;
use crate::measure::table::{measure_project, write_csv_file};

use super::{Analysis, AnalysisError};

/// What can be exported from a project.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum ExportKind {
    /// Landmarks, one CSV row per specimen × trial × landmark.
    LongCsv,
    /// Landmarks, one CSV row per specimen × trial.
    WideCsv,
    /// Landmarks with operators, group labels and states, as JSON.
    Json,
    /// Landmarks as a `NumPy` array (observations × points × 3, NaN where missing) and its index.
    Npy,
    /// One PLY point set per trial, in a folder.
    Ply,
    /// Every measurement of every trial, CSV.
    Measurements,
    /// The superimposition's tables (CSV, JSON, NPY), in a folder.
    AnalysisTables,
    /// The superimposition's figures (SVG and PNG), in a folder.
    AnalysisFigures,
}

impl ExportKind {
    pub const ALL: [Self; 8] = [
        Self::AnalysisTables,
        Self::AnalysisFigures,
        Self::LongCsv,
        Self::WideCsv,
        Self::Json,
        Self::Npy,
        Self::Ply,
        Self::Measurements,
    ];

    /// The file (or folder) name written into a chosen folder. Analysis outputs go straight
    /// into the folder (their names are in the README).
    #[must_use]
    pub const fn default_name(self) -> &'static str {
        match self {
            Self::LongCsv => "landmarks_long.csv",
            Self::WideCsv => "landmarks_wide.csv",
            Self::Json => "landmarks.json",
            Self::Npy => "landmarks.npy",
            Self::Ply => "ply",
            Self::Measurements => "measurements.csv",
            Self::AnalysisTables | Self::AnalysisFigures => "",
        }
    }

    /// A short title (a button's text).
    #[must_use]
    pub const fn title(self) -> &'static str {
        match self {
            Self::AnalysisTables => "Analysis tables",
            Self::AnalysisFigures => "Analysis figures",
            Self::LongCsv => "Landmarks, long CSV",
            Self::WideCsv => "Landmarks, wide CSV",
            Self::Json => "Landmarks, JSON",
            Self::Npy => "Landmarks, .npy + index",
            Self::Ply => "Landmarks, PLY",
            Self::Measurements => "Measurements CSV",
        }
    }

    /// What it writes.
    #[must_use]
    pub const fn description(self) -> &'static str {
        match self {
            Self::AnalysisTables => {
                "aligned coordinates, centroid sizes, PC scores and loadings, disparity, \
                 distances, measurement error (CSV, JSON, NPY)"
            }
            Self::AnalysisFigures => "morphospace, disparity and PC1 shape charts (SVG and PNG)",
            Self::LongCsv => "landmarks_long.csv: one row per specimen × trial × landmark",
            Self::WideCsv => "landmarks_wide.csv: one row per specimen × trial",
            Self::Json => "landmarks.json: operators, group labels, states, positions",
            Self::Npy => {
                "landmarks.npy (observations × points × 3, NaN where missing) and its index"
            }
            Self::Ply => "ply/SPECIMEN_TRIAL.ply: one point set per trial",
            Self::Measurements => "measurements.csv: every measurement of every trial",
        }
    }

    /// Whether it needs an analysis that has been run.
    #[must_use]
    pub const fn needs_analysis(self) -> bool {
        matches!(self, Self::AnalysisTables | Self::AnalysisFigures)
    }
}

/// What an export reads.
#[derive(Clone, Copy, Debug)]
pub struct ExportSource<'a> {
    pub project: &'a Project,
    /// The project file (named in the analysis summary).
    pub project_file: &'a Path,
    /// The group key copied into the landmark tables' `group` column.
    pub group_by: Option<&'a str>,
    /// Also export each curve's semilandmarks (named `CURVE_s01`, …).
    pub semilandmarks: bool,
    /// The analysis, for the analysis exports.
    pub analysis: Option<&'a Analysis>,
}

/// Why an export failed.
#[derive(Debug, thiserror::Error)]
pub enum ExportKindError {
    #[error("{0}: run the analysis first")]
    NoAnalysis(&'static str),
    #[error(transparent)]
    Write(#[from] ExportError),
    #[error(transparent)]
    Analysis(#[from] AnalysisError),
}

/// What an export wrote.
#[derive(Clone, Debug, PartialEq)]
pub struct Exported {
    pub files: Vec<PathBuf>,
    /// Landmarks not digitised yet, written as missing (landmark exports only).
    pub not_digitised: usize,
}

impl Exported {
    /// One line for a status bar or a log: `wrote 3 files into out/: a.csv, b.csv, c.json`.
    #[must_use]
    pub fn describe(&self) -> String {
        match self.files.as_slice() {
            [one] => format!("wrote {}", one.display()),
            files => {
                let names: Vec<String> = files
                    .iter()
                    .filter_map(|p| p.file_name().map(|n| n.to_string_lossy().into_owned()))
                    .collect();
                let folder = files
                    .first()
                    .and_then(|p| p.parent())
                    .filter(|d| !d.as_os_str().is_empty())
                    .map_or_else(String::new, |d| format!(" into {}", d.display()));
                format!("wrote {} files{folder}: {}", names.len(), names.join(", "))
            }
        }
    }
}

/// Writes one export to `output`: a file for the single-file kinds, a folder (created if
/// needed) for PLY sets and the analysis outputs.
pub fn write_export(
    kind: ExportKind,
    output: &Path,
    src: &ExportSource<'_>,
) -> Result<Exported, ExportKindError> {
    let points = || flatten(src.project, src.group_by, src.semilandmarks);
    let one = |p: &Path| vec![p.to_path_buf()];
    let need = || {
        src.analysis
            .ok_or(ExportKindError::NoAnalysis(kind.title()))
    };
    let (files, not_digitised) = match kind {
        ExportKind::LongCsv => {
            let e = points();
            e.table.write_long_csv(output)?;
            (one(output), e.not_digitised)
        }
        ExportKind::WideCsv => {
            let e = points();
            e.table.write_wide_csv(output)?;
            (one(output), e.not_digitised)
        }
        ExportKind::Json => {
            let e = points();
            e.write_json(output, &src.project.scheme().id)?;
            (one(output), e.not_digitised)
        }
        ExportKind::Npy => {
            let e = points();
            let index = e.write_npy(output)?;
            (vec![output.to_path_buf(), index], e.not_digitised)
        }
        ExportKind::Ply => {
            let e = points();
            (e.write_ply_sets(output)?, e.not_digitised)
        }
        ExportKind::Measurements => {
            let rows = measure_project(src.project);
            write_csv_file(output, src.project, &rows)?;
            (one(output), 0)
        }
        ExportKind::AnalysisTables => (
            need()?.write_tables(output, &src.project_file.display().to_string())?,
            0,
        ),
        ExportKind::AnalysisFigures => (need()?.write_figures(output)?, 0),
    };
    Ok(Exported {
        files,
        not_digitised,
    })
}

/// Writes one export into `folder` under its [`ExportKind::default_name`].
pub fn write_export_into(
    kind: ExportKind,
    folder: &Path,
    src: &ExportSource<'_>,
) -> Result<Exported, ExportKindError> {
    std::fs::create_dir_all(folder).map_err(|e| ExportError::os(folder, e))?;
    let name = kind.default_name();
    let target = if name.is_empty() {
        folder.to_path_buf()
    } else {
        folder.join(name)
    };
    write_export(kind, &target, src)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_kind_writes_into_a_folder_and_names_what_it_wrote() {
        let pf =
            Path::new(env!("CARGO_MANIFEST_DIR")).join("../../sample_volumes/sample_project.json");
        let project = Project::load(&pf).unwrap();
        let opts = super::super::project::ProjectAnalysisOptions::for_project(&project);
        let (analysis, _) = super::super::project::analyse_project(&project, &opts).unwrap();
        let d = tempfile::tempdir().unwrap();
        for kind in ExportKind::ALL {
            let without = ExportSource {
                project: &project,
                project_file: &pf,
                group_by: opts.group_by.as_deref(),
                semilandmarks: false,
                analysis: None,
            };
            if kind.needs_analysis() {
                assert!(matches!(
                    write_export_into(kind, d.path(), &without),
                    Err(ExportKindError::NoAnalysis(_))
                ));
            }
            let src = ExportSource {
                analysis: Some(&analysis),
                ..without
            };
            let out = write_export_into(kind, d.path(), &src).unwrap();
            assert!(!out.files.is_empty(), "{kind:?}");
            for f in &out.files {
                assert!(f.exists(), "{kind:?}: {}", f.display());
            }
            assert!(out.describe().starts_with("wrote "), "{}", out.describe());
        }
    }

    #[test]
    fn a_description_names_the_folder_only_when_there_is_one() {
        let e = |files: &[&str]| Exported {
            files: files.iter().map(PathBuf::from).collect(),
            not_digitised: 0,
        };
        assert_eq!(
            e(&["x.npy", "x.index.json"]).describe(),
            "wrote 2 files: x.npy, x.index.json"
        );
        assert_eq!(
            e(&["out/x.npy", "out/x.index.json"]).describe(),
            "wrote 2 files into out: x.npy, x.index.json"
        );
        assert_eq!(e(&["out/a.csv"]).describe(), "wrote out/a.csv");
    }
}
