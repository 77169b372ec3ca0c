//! A project's analysis, with the options both front ends offer: the Procrustes fit, how
//! missing landmarks are estimated, curve sliding, the grouping the disparity compares, the
//! resamples, and which trial of each specimen is analysed. `sutura superimpose PROJECT` and
//! the workstation's analysis view both call [`analyse_project`], so the same options give the
//! same numbers.

use crate::export::table::LandmarkTable;
use crate::landmarks::Project;
use crate::landmarks::project::points::{flatten, sliding_curves};
use crate::shape::sliding::{Curve, SlideCriterion};

use super::{Analysis, AnalysisError, AnalysisOptions, Sliding, analyse_sliding};

/// Which trial of each specimen is analysed (measurement error always uses every trial).
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub enum TrialChoice {
    /// The first trial in the project (the usual choice: the first digitisation).
    #[default]
    First,
    /// The most recent trial.
    Latest,
    /// The trial with this id; a specimen without it falls back to its first trial.
    Named(String),
}

impl TrialChoice {
    /// How the choice reads in a summary: `first trial`, `latest trial`, `trial 2`.
    #[must_use]
    pub fn describe(&self) -> String {
        match self {
            Self::First => "first trial".into(),
            Self::Latest => "latest trial".into(),
            Self::Named(id) => format!("trial {id} (else the first)"),
        }
    }
}

/// Everything that decides a project's analysis.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct ProjectAnalysisOptions {
    pub analysis: AnalysisOptions,
    /// The group key whose values are the groups compared (`None`: one group, `all`).
    pub group_by: Option<String>,
    /// Include the curves' semilandmarks and slide them by this criterion.
    pub slide: Option<SlideCriterion>,
    pub trial: TrialChoice,
}

impl ProjectAnalysisOptions {
    /// The defaults for a project: [`AnalysisOptions::default`], grouped by the project's first
    /// group key (if any), no sliding, the first trial.
    #[must_use]
    pub fn for_project(project: &Project) -> Self {
        Self {
            group_by: crate::measure::table::group_keys(project)
                .into_iter()
                .next(),
            ..Self::default()
        }
    }
}

/// Why a project cannot be analysed.
#[derive(Debug, thiserror::Error)]
pub enum ProjectAnalysisError {
    #[error("no trial has any landmark yet: nothing to superimpose")]
    NothingDigitised,
    #[error("curve sliding asked for, but the scheme has no curve with semilandmarks")]
    NoCurves,
    #[error("no specimen has a group '{0}' (the project's group keys: {1})")]
    UnknownGroupKey(String, String),
    #[error(transparent)]
    Analysis(#[from] AnalysisError),
}

/// The landmark table a project's analysis reads, with its curves and what was left out.
#[derive(Clone, Debug)]
pub struct ProjectInput {
    /// Every trial of every specimen; the chosen trial of each specimen first.
    pub table: LandmarkTable,
    /// The sliding curves (empty without sliding).
    pub curves: Vec<Curve>,
    /// Landmarks absent from their trial, treated as missing.
    pub not_digitised: usize,
}

/// Flattens a project for analysis as `opts` says.
pub fn project_input(
    project: &Project,
    opts: &ProjectAnalysisOptions,
) -> Result<ProjectInput, ProjectAnalysisError> {
    if let Some(k) = &opts.group_by {
        let keys = crate::measure::table::group_keys(project);
        if !keys.contains(k) {
            let known = if keys.is_empty() {
                "none".to_owned()
            } else {
                keys.join(", ")
            };
            return Err(ProjectAnalysisError::UnknownGroupKey(k.clone(), known));
        }
    }
    let slide = opts.slide.is_some();
    let e = flatten(project, opts.group_by.as_deref(), slide);
    if e.table.observations.is_empty() {
        return Err(ProjectAnalysisError::NothingDigitised);
    }
    let curves = if slide {
        sliding_curves(project.scheme())
    } else {
        Vec::new()
    };
    if slide && curves.is_empty() {
        return Err(ProjectAnalysisError::NoCurves);
    }
    let mut table = e.table;
    order_trials(project, &mut table, &opts.trial);
    Ok(ProjectInput {
        table,
        curves,
        not_digitised: e.not_digitised,
    })
}

/// Puts each specimen's chosen trial first among its observations (the analysis takes the
/// first observation of each specimen), keeping the specimens' order.
fn order_trials(project: &Project, table: &mut LandmarkTable, choice: &TrialChoice) {
    let chosen = |specimen: &str| -> Option<String> {
        let s = project.specimen(specimen)?;
        match choice {
            TrialChoice::First => s.trials.first(),
            TrialChoice::Latest => s.trials.last(),
            TrialChoice::Named(id) => s.trial(id).or_else(|| s.trials.first()),
        }
        .map(|t| t.id.clone())
    };
    let mut order: Vec<usize> = (0..table.observations.len()).collect();
    let first_seen = |i: usize| {
        let sp = &table.observations[i].specimen;
        table
            .observations
            .iter()
            .position(|o| &o.specimen == sp)
            .unwrap_or(i)
    };
    let rank: Vec<(usize, bool, usize)> = order
        .iter()
        .map(|&i| {
            let o = &table.observations[i];
            let is_chosen = chosen(&o.specimen).as_deref() == Some(o.trial.as_str());
            (first_seen(i), !is_chosen, i)
        })
        .collect();
    order.sort_by_key(|&i| rank[i]);
    let obs = std::mem::take(&mut table.observations);
    let mut slots: Vec<Option<_>> = obs.into_iter().map(Some).collect();
    table.observations = order
        .into_iter()
        .map(|i| slots[i].take().expect("each index once"))
        .collect();
}

/// Runs the analysis of a project as `opts` says; `not_digitised` landmarks count as missing.
pub fn analyse_project(
    project: &Project,
    opts: &ProjectAnalysisOptions,
) -> Result<(Analysis, ProjectInput), ProjectAnalysisError> {
    let input = project_input(project, opts)?;
    let sliding = opts.slide.map(|criterion| Sliding {
        curves: &input.curves,
        criterion,
    });
    let analysis = analyse_sliding(&input.table, &opts.analysis, sliding)?;
    Ok((analysis, input))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> Project {
        let p = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("../../sample_volumes/sample_project.json");
        Project::load(&p).unwrap()
    }

    #[test]
    fn the_chosen_trial_is_the_one_analysed() {
        let project = sample();
        let twice: Vec<&str> = project
            .specimens()
            .iter()
            .filter(|s| s.trials.len() > 1)
            .map(|s| s.id.as_str())
            .collect();
        assert!(
            !twice.is_empty(),
            "the sample has specimens digitised twice"
        );
        for (choice, want_last) in [(TrialChoice::First, false), (TrialChoice::Latest, true)] {
            let opts = ProjectAnalysisOptions {
                trial: choice,
                ..ProjectAnalysisOptions::for_project(&project)
            };
            let (a, _) = analyse_project(&project, &opts).unwrap();
            for o in &a.observations {
                let s = project.specimen(&o.specimen).unwrap();
                let want = if want_last {
                    s.trials.last()
                } else {
                    s.trials.first()
                };
                assert_eq!(Some(o.trial.as_str()), want.map(|t| t.id.as_str()));
            }
        }
    }

    #[test]
    fn an_unknown_group_key_is_named() {
        let project = sample();
        let opts = ProjectAnalysisOptions {
            group_by: Some("colour".into()),
            ..ProjectAnalysisOptions::default()
        };
        let e = analyse_project(&project, &opts).unwrap_err().to_string();
        assert!(e.contains("'colour'") && e.contains("group"), "{e}");
    }
}
