//! Times `sutura_core::io::open` on one scan, in this fresh process, and prints one JSON line:
//! median/min/max seconds over the repeats, GB/s of voxel bytes, peak RSS (`VmHWM`), the CPU
//! seconds used (median) and the 1-minute load average at the end.
//!
//! `cargo run --release --example bench_load -- PATH [REPEATS]`; `scripts/bench_io.sh` runs it
//! for every file of the Python baseline kit and prints the ratios.

use std::time::Instant;

fn peak_rss_mib() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("VmHWM:"))
                .and_then(|l| l.split_whitespace().nth(1))
                .and_then(|v| v.parse::<f64>().ok())
        })
        .map_or(f64::NAN, |kib| kib / 1024.0)
}

/// The 1-minute load average: how busy the (possibly shared) machine was.
fn load1() -> f64 {
    std::fs::read_to_string("/proc/loadavg")
        .ok()
        .and_then(|s| s.split_whitespace().next().and_then(|v| v.parse().ok()))
        .unwrap_or(f64::NAN)
}

/// CPU seconds (user + system) used by this process so far, from `/proc/self/stat` (fields 14
/// and 15, in clock ticks of 1/100 s on Linux): unlike wall time, it does not grow when other
/// programs share the cores.
fn cpu_s() -> f64 {
    std::fs::read_to_string("/proc/self/stat")
        .ok()
        .and_then(|s| {
            // the command name (field 2) may hold spaces; fields after it are plain
            let rest = s.rsplit_once(')')?.1;
            let f: Vec<&str> = rest.split_whitespace().collect();
            let ticks = f.get(11)?.parse::<f64>().ok()? + f.get(12)?.parse::<f64>().ok()?;
            Some(ticks / 100.0)
        })
        .unwrap_or(f64::NAN)
}

fn main() -> anyhow::Result<()> {
    let mut args = std::env::args().skip(1);
    let path = std::path::PathBuf::from(
        args.next()
            .ok_or_else(|| anyhow::anyhow!("usage: bench_load PATH [REPEATS]"))?,
    );
    let reps: usize = args.next().map_or(Ok(3), |s| s.parse())?;
    let opts = sutura_core::io::OpenOptions {
        voxel_size_mm: Some([0.01; 3]),
        ..Default::default()
    };
    let mut times = Vec::new();
    let mut cpu = Vec::new();
    let mut bytes = 0usize;
    let mut checksum = 0.0;
    for _ in 0..reps {
        let (t, c) = (Instant::now(), cpu_s());
        let v = sutura_core::io::open(&path, &opts, &sutura_core::io::Progress::none())?;
        times.push(t.elapsed().as_secs_f64());
        cpu.push(cpu_s() - c);
        bytes = v.voxel_bytes();
        checksum = v
            .value(sutura_core::geometry::VoxelIndex::new(
                v.dims()[0] / 2,
                v.dims()[1] / 2,
                v.dims()[2] / 2,
            ))
            .unwrap_or(f64::NAN);
        drop(v);
    }
    times.sort_by(f64::total_cmp);
    cpu.sort_by(f64::total_cmp);
    let med = times[times.len() / 2];
    println!(
        "{}",
        serde_json::json!({
            "path": path.display().to_string(), "n": reps, "median_s": med,
            "min_s": times[0], "max_s": times[times.len() - 1],
            "gbps": bytes as f64 / med / 1e9, "peak_rss_mib": peak_rss_mib(),
            "voxel_mib": bytes as f64 / 1_048_576.0, "centre_value": checksum, "load1": load1(),
            "cpu_median_s": cpu[cpu.len() / 2],
        })
    );
    Ok(())
}
