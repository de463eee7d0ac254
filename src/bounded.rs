//! Runs in bounded memory: `baroc run --memory-limit 4GiB`.
//!
//! Fields are held in memory whole (`[time, level, lat, lon]`), so a run
//! over many time steps holds them all at once. Here the time steps are cut
//! into blocks small enough for the limit; the blocks are evaluated one
//! after another, each written to a temporary file beside the output, and
//! the pieces are joined by `merge`, which copies one time step of one
//! variable at a time. Peak memory is then that of one block's run, whatever
//! the number of time steps. The result is the file one whole run writes
//! (the sharded-run tests check the same join byte for byte).
//!
//! The block size: the limit divided by an estimate of one time step's
//! working set, taken as `WORKING_SET_FACTOR` times the bytes of one time
//! step of every data variable held as float32. The factor allows for the
//! inputs, the intermediate fields an operator makes and the results; it is
//! a rule of thumb measured on the thermal-wind budget (see
//! `benches/bounded_memory.py`), not a guarantee.

use std::path::{Path, PathBuf};

use crate::io::Dataset;
use crate::runner::{RunError, RunRequest};
use crate::shard::{Shard, ShardPlan};

/// Memory held per byte of one time step's input while a block runs
/// (inputs, intermediates, results); rule of thumb, see the module comment.
pub const WORKING_SET_FACTOR: f64 = 6.0;

/// Parses a size such as `4GiB`, `512 MiB`, `2GB`, `1.5G` or `1000000`.
/// Binary prefixes (KiB, MiB, GiB, TiB; K, M, G, T alone) count in 1024s,
/// decimal ones (kB, MB, GB, TB) in 1000s (IEC 80000-13).
pub fn parse_size(text: &str) -> Result<u64, String> {
    let t = text.trim();
    let split = t.find(|c: char| !(c.is_ascii_digit() || c == '.')).unwrap_or(t.len());
    let (number, unit) = (t[..split].trim(), t[split..].trim());
    let value: f64 = number.parse().map_err(|_| format!("error: --memory-limit `{text}` is not a size; write it as `4GiB`, `512MiB` or `2GB`"))?;
    let scale: f64 = match unit.to_ascii_lowercase().as_str() {
        "" | "b" => 1.0,
        "k" | "kib" => 1024.0,
        "m" | "mib" => 1024.0 * 1024.0,
        "g" | "gib" => 1024.0 * 1024.0 * 1024.0,
        "t" | "tib" => 1024.0f64.powi(4),
        "kb" => 1e3,
        "mb" => 1e6,
        "gb" => 1e9,
        "tb" => 1e12,
        other => return Err(format!("error: --memory-limit `{text}`: `{other}` is not a unit of size; use KiB, MiB, GiB or TiB (or kB, MB, GB, TB)")),
    };
    let bytes = value * scale;
    if !bytes.is_finite() || bytes < 1.0 {
        return Err(format!("error: --memory-limit `{text}` must be a positive size, such as `4GiB`"));
    }
    Ok(bytes as u64)
}

/// Bytes of one time step of every data variable, as float32.
pub fn time_step_bytes(dataset: &Dataset) -> u64 {
    dataset
        .variables()
        .map(|v| {
            let levels = v.levels.as_ref().map(|l| l.len()).unwrap_or(1) as u64;
            levels * v.grid.latitudes.len() as u64 * v.grid.longitudes.len() as u64 * 4
        })
        .sum()
}

/// How many time steps fit in `limit` bytes (at least one).
pub fn steps_per_block(limit: u64, step_bytes: u64) -> usize {
    let per_step = (step_bytes as f64 * WORKING_SET_FACTOR).max(1.0);
    ((limit as f64 / per_step).floor() as usize).max(1)
}

/// What a bounded run did.
#[derive(Debug, Clone, PartialEq)]
pub struct BoundedSummary {
    pub names: Vec<String>,
    pub blocks: usize,
    pub steps_per_block: usize,
    pub time_steps: usize,
    pub time_step_bytes: u64,
}

/// Runs `request` block by block within `limit` bytes and writes the
/// results to `output` (atomically). `attributes` go on the output (a
/// shard's record when the run is itself one shard).
pub fn run_to_file(request: &RunRequest, output: &Path, limit: u64, attributes: Vec<(String, String)>) -> Result<BoundedSummary, RunError> {
    if request.data_files.is_empty() {
        return Err(RunError("error: --memory-limit splits the data's time steps, but no data file was given".into()));
    }
    let dataset = Dataset::open(&request.data_files).map_err(|e| RunError(format!("error: {e}")))?;
    let step_bytes = time_step_bytes(&dataset);
    let times = dataset.variables().find_map(|v| v.times.clone());
    let total = times.as_ref().map(|t| t.values.len()).unwrap_or(1);
    let steps: Vec<usize> = request.time_steps.clone().unwrap_or_else(|| (0..total).collect());
    let per_block = steps_per_block(limit, step_bytes);
    let blocks = steps.len().div_ceil(per_block).max(1);
    drop(dataset);
    if blocks == 1 {
        let outcome = crate::runner::run(request)?;
        let names = crate::runner::write_results_with(output, &outcome, request, attributes)?;
        return Ok(BoundedSummary { names, blocks, steps_per_block: per_block, time_steps: steps.len(), time_step_bytes: step_bytes });
    }
    let labels = times.map(|t| t.labels()).unwrap_or_default();
    let label = |i: usize| labels.get(steps[i]).cloned().unwrap_or_else(|| format!("time step {}", steps[i]));
    let mut pieces = Vec::with_capacity(blocks);
    let mut names = Vec::new();
    for index in 0..blocks {
        let shard = Shard { index, count: blocks };
        let block = shard.block(steps.len()).map_err(RunError)?;
        let plan = ShardPlan {
            shard,
            block: block.clone(),
            total_steps: steps.len(),
            full_range: (label(0), label(steps.len() - 1)),
            block_range: (label(block.start), label(block.end - 1)),
        };
        let mut part = request.clone();
        part.time_steps = Some(steps[block].to_vec());
        let outcome = crate::runner::run(&part)?;
        let temporary = crate::atomic::temporary_beside(output).map_err(|e| RunError(format!("error: cannot write {}: {e}", output.display())))?;
        // Written under the request's own text, so every piece says the same
        // recipe, as merge checks.
        names = crate::runner::write_results_with(&temporary, &outcome, request, plan.attributes())?;
        drop(outcome);
        pieces.push(temporary);
    }
    let paths: Vec<PathBuf> = pieces.iter().map(|p| p.to_path_buf()).collect();
    let merge = crate::merge::MergeRequest { record_shards: false, attributes, ..crate::merge::MergeRequest::new(output.to_path_buf(), paths) };
    crate::merge::merge(&merge).map_err(RunError)?;
    drop(pieces);
    Ok(BoundedSummary { names, blocks, steps_per_block: per_block, time_steps: steps.len(), time_step_bytes: step_bytes })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sizes_follow_the_iec_prefixes() {
        // IEC 80000-13: Ki = 2^10, Mi = 2^20, Gi = 2^30; k, M, G = 10^3, 10^6, 10^9.
        assert_eq!(parse_size("4GiB").unwrap(), 4 << 30);
        assert_eq!(parse_size("512 MiB").unwrap(), 512 << 20);
        assert_eq!(parse_size("2GB").unwrap(), 2_000_000_000);
        assert_eq!(parse_size("1.5G").unwrap(), 3 << 29);
        assert_eq!(parse_size("1000").unwrap(), 1000);
        for bad in ["", "GiB", "4 parsecs", "0", "-1GiB"] {
            assert!(parse_size(bad).unwrap_err().starts_with("error: --memory-limit"), "{bad}");
        }
    }

    #[test]
    fn blocks_hold_as_many_steps_as_fit_and_never_none() {
        assert_eq!(steps_per_block(60, 10), 1);
        assert_eq!(steps_per_block(600, 10), 10);
        assert_eq!(steps_per_block(1, 1 << 30), 1);
    }
}
