//! `sutura sample`: write the synthetic sample specimens, their true landmarks and the scheme.

use anyhow::{Context, Result};
use clap::Args;
use rayon::prelude::*;
use std::path::{Path, PathBuf};

use sutura_core::export::table::{LandmarkTable, Observation, State};
use sutura_core::synth;

#[derive(Debug, Args)]
pub struct SampleArgs {
    /// Output folder (created if missing).
    #[arg(short, long)]
    output: PathBuf,

    /// How many of the series' specimens to write (default: all).
    #[arg(long, conflicts_with = "comparative")]
    count: Option<usize>,

    /// Write the synthetic comparative sample instead (a tree of fossil taxa with ages and
    /// landmark configurations evolved by early burst; `sample_volumes/comparative`).
    #[arg(long)]
    comparative: bool,

    /// Write the rock-matrix sample for virtual preparation instead (RM-001.nii.gz and its
    /// true skull mask RM-001_skull_truth.nii.gz).
    #[arg(long, conflicts_with = "count")]
    rock: bool,
}

/// The file a specimen's scan is written to: the first as a folder of TIFF slices, the rest
/// as `.nii.gz`.
fn scan_name(index: usize, id: &str) -> String {
    if index == 0 {
        format!("{id}_slices")
    } else {
        format!("{id}.nii.gz")
    }
}

/// One generated specimen: id, group, true landmarks (world mm).
type Written = (
    String,
    String,
    Vec<(String, sutura_core::geometry::WorldPoint)>,
);

pub fn run(a: &SampleArgs) -> Result<()> {
    std::fs::create_dir_all(&a.output).with_context(|| a.output.display().to_string())?;
    if a.comparative {
        let s = synth::comparative::generate_comparative(
            &synth::comparative::ComparativeSpec::bundled(),
        );
        let paths = s.write(&a.output)?;
        eprintln!(
            "wrote {} taxa, {} specimens ({} files) in {}",
            s.tree.n_tips(),
            s.specimens.len(),
            paths.len(),
            a.output.display()
        );
        return Ok(());
    }
    if a.rock {
        return write_rock(&a.output);
    }
    let mut specs = synth::default_series();
    if let Some(n) = a.count {
        specs.truncate(n.max(1));
    }
    let written: Vec<Written> = specs
        .par_iter()
        .enumerate()
        .map(|(i, spec)| -> Result<_> {
            let s = synth::generate(spec).with_context(|| format!("specimen {}", spec.id))?;
            let path = a.output.join(scan_name(i, &s.id));
            write_scan(&s.volume, &path)?;
            sutura_core::export::write_json(
                &a.output.join(format!("{}.landmarks.json", s.id)),
                &synth::landmarks_json(&s),
            )?;
            eprintln!("wrote {}", path.display());
            Ok((s.id.clone(), s.group.clone(), s.landmarks.clone()))
        })
        .collect::<Result<_>>()?;
    let scheme = synth::scheme::scheme();
    let table = LandmarkTable {
        dim: 3,
        landmarks: scheme.iter().map(|l| l.id.to_owned()).collect(),
        observations: written
            .iter()
            .map(|(id, group, lms)| Observation {
                specimen: id.clone(),
                trial: "truth".into(),
                group: Some(group.clone()),
                coords: scheme
                    .iter()
                    .map(|d| {
                        lms.iter()
                            .find(|(n, _)| n == d.id)
                            .map(|(_, p)| [p.0.x, p.0.y, p.0.z])
                    })
                    .collect(),
                states: scheme
                    .iter()
                    .map(|d| {
                        if lms.iter().any(|(n, _)| n == d.id) {
                            State::Placed
                        } else {
                            State::Missing
                        }
                    })
                    .collect(),
            })
            .collect(),
    };
    table.write_long_csv(&a.output.join("true_landmarks.csv"))?;
    let text = synth::scheme::scheme_toml();
    sutura_core::export::write_atomic(&a.output.join("scheme.toml"), |w| {
        w.write_all(text.as_bytes())
    })?;
    eprintln!(
        "wrote {} specimens, true_landmarks.csv and scheme.toml to {}",
        written.len(),
        a.output.display()
    );
    Ok(())
}

fn write_scan(v: &sutura_core::volume::Volume, path: &Path) -> Result<()> {
    if path.exists() && path.is_dir() {
        std::fs::remove_dir_all(path).with_context(|| path.display().to_string())?;
    }
    super::convert::write_volume(v, path)
}

/// The rock-matrix sample: the scan and the true skull mask (u8, 1 = bone) on the same grid.
fn write_rock(dir: &Path) -> Result<()> {
    let spec = synth::rock::rock_spec();
    let s =
        synth::rock::generate_in_rock(&spec).with_context(|| format!("specimen {}", spec.id))?;
    let scan = dir.join(format!("{}.nii.gz", s.id));
    write_scan(&s.volume, &scan)?;
    let truth = sutura_core::volume::Volume::from_vec(
        s.volume.dims(),
        *s.volume.world_from_voxel(),
        s.truth.clone(),
    )?;
    let truth_path = dir.join(format!("{}_skull_truth.nii.gz", s.id));
    write_scan(&truth, &truth_path)?;
    eprintln!(
        "wrote {} ({} grains, {} pores, one vein) and {}",
        scan.display(),
        s.grains,
        s.pores,
        truth_path.display()
    );
    Ok(())
}
