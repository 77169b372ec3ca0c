//! `sutura mesh`: the surface of a scan's material, or of a label, as PLY, STL or OBJ, with a
//! report of its area, enclosed volume, pieces and closedness.

use anyhow::{Context, Result, bail};
use clap::Args;
use std::path::PathBuf;

use sutura_core::landmarks::pick::IsoValue;
use sutura_core::mesh::{MaskField, march, smooth, write};

use super::ScanArgs;

#[derive(Debug, Args)]
pub struct MeshArgs {
    #[command(flatten)]
    scan: ScanArgs,

    /// Output mesh: `.ply` (binary), `.stl` (binary) or `.obj`.
    #[arg(short, long, value_name = "OUT")]
    output: PathBuf,

    /// A label image; with --label, the surface is taken inside that label only.
    #[arg(long, value_name = "DIR", requires = "label")]
    labels: Option<PathBuf>,

    /// The label to mesh.
    #[arg(long, value_name = "NAME", requires = "labels")]
    label: Option<String>,

    /// Iso-value in rescaled units (default: the scan's ISO-50).
    #[arg(
        long,
        value_name = "VALUE",
        conflicts_with = "label_surface",
        allow_hyphen_values = true
    )]
    iso: Option<f64>,

    /// Mesh the label's voxels themselves (vertices at edge midpoints) instead of the
    /// intensities inside the label.
    #[arg(long, requires = "label")]
    label_surface: bool,

    /// Taubin smoothing iterations (volume-preserving; 0 = none).
    #[arg(long, value_name = "N", default_value_t = 0)]
    smooth: usize,

    /// Decimate to about this many triangles (quadric error).
    #[arg(long, value_name = "TRIANGLES")]
    decimate: Option<usize>,

    /// Largest error a decimation step may make (e.g. `20um`; default: one voxel).
    #[arg(long, value_name = "LEN", requires = "decimate")]
    max_error: Option<String>,

    /// Also write the report as JSON to this file.
    #[arg(long, value_name = "FILE")]
    report: Option<PathBuf>,
}

#[allow(clippy::too_many_lines)] // reason: one command: read, select, extract, report, write
pub fn run(a: &MeshArgs) -> Result<()> {
    let labels = a.labels.as_deref().map(super::labels::load).transpose()?;
    // through the volume interface: a store is read a few chunk layers at a time
    let source = a.scan.open_source()?;
    let src = source.as_ref();
    if let (Some(lv), Some(p)) = (&labels, &a.labels) {
        super::labels::check_matching(&a.scan, lv, p, src)?;
    }
    let mask = match (&labels, &a.label) {
        (Some(lv), Some(name)) => {
            let m = lv.mask_of(lv.value_of(name)?);
            if m.is_empty() {
                bail!("label {name} holds no voxel");
            }
            Some(m)
        }
        _ => None,
    };
    let started = std::time::Instant::now();
    let (mut mesh, iso_used) = if a.label_surface {
        let mask = mask.as_ref().expect("clap requires --label");
        let mesh = march::extract(&MaskField { mask }, &src.world_from_voxel());
        if mesh.triangles.is_empty() {
            bail!("{}: the label's surface is empty", a.scan.scan.display());
        }
        (mesh, None)
    } else {
        let (mesh, iso) = sutura_core::mesh::iso_surface(src, a.iso, mask.as_ref())
            .map_err(|e| anyhow::anyhow!("{}: {e}", a.scan.scan.display()))?;
        (mesh, Some(iso))
    };
    let extracted = mesh.triangles.len();
    smooth::taubin(&mut mesh, a.smooth);
    let mut decimation_error_mm = None;
    if let Some(target) = a.decimate {
        let max_error = match &a.max_error {
            Some(t) => sutura_core::geometry::parse_length_mm(t)
                .with_context(|| format!("--max-error {t}"))?,
            None => src
                .level(0)
                .spacing_mm()
                .iter()
                .copied()
                .fold(f64::INFINITY, f64::min),
        };
        decimation_error_mm = Some(mesh.decimate(target, max_error));
    }
    let seconds = started.elapsed().as_secs_f64();
    let title = format!(
        "Sutura mesh of {}{}",
        a.scan.scan.display(),
        a.label
            .as_deref()
            .map(|l| format!(", label {l}"))
            .unwrap_or_default()
    );
    write::write(&mesh, &a.output, &title)?;
    let rep = mesh.report();
    let json = serde_json::json!({
        "scan": a.scan.scan,
        "label": a.label,
        "iso": iso_used.as_ref().map(|i| i.value),
        "iso_source": iso_used.as_ref().map(IsoValue::source_name),
        "field": if a.label_surface { "label voxels" } else { "intensity" },
        "smoothing_iterations": a.smooth,
        "extracted_triangles": extracted,
        "decimation_error_mm": decimation_error_mm,
        "report": rep,
        "output": a.output,
    });
    if let Some(p) = &a.report {
        sutura_core::export::write_json(p, &json)?;
    }
    let text = format!(
        "wrote {}\nvertices\t{}\ntriangles\t{}\narea_mm2\t{:.6}\nvolume_mm3\t{:.6}\npieces\t{}\nclosed\t{}\neuler_characteristic\t{}\n{}seconds\t{seconds:.3}\n",
        a.output.display(),
        rep.vertices,
        rep.triangles,
        rep.area_mm2,
        rep.volume_mm3,
        rep.pieces,
        if rep.closed { "yes" } else { "no" },
        rep.euler_characteristic,
        iso_used
            .as_ref()
            .map(|i| format!("iso\t{} ({})\n", i.value, i.source_name()))
            .unwrap_or_default(),
    );
    super::emit(&text)
}
