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
use crate::lang::syntax::{Expr, ExprKind, Program, SelectHow, StatementKind};
use crate::runner::{RunError, RunRequest};
use crate::shard::{Shard, ShardPlan};

/// Memory held per byte of one time step's input while a block runs
/// (inputs, intermediates, results); rule of thumb, see the module comment.
pub const WORKING_SET_FACTOR: f64 = 6.0;

/// The largest output a bounded run builds in memory before writing it
/// (`io::writer`): an eighth of the limit, since while the image is taken
/// the results, netCDF's copy and the image are held at once (a quarter of
/// the limit beside the results, which the working-set factor already
/// counts). Larger outputs are written by netCDF-C straight to the file.
fn image_limit(limit: u64) -> usize {
    usize::try_from(limit / 8).unwrap_or(usize::MAX)
}

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
    /// The run's tables (area means, values at points: results the NetCDF
    /// file does not hold), their rows joined across blocks in time order.
    pub tables: Vec<(String, crate::lang::value::Series)>,
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
        let names = crate::runner::write_results_within(output, &outcome, request, attributes, Some(image_limit(limit)))?;
        let mut tables = Vec::new();
        join_tables(&mut tables, &outcome);
        return Ok(BoundedSummary { names, tables, blocks, steps_per_block: per_block, time_steps: steps.len(), time_step_bytes: step_bytes });
    }
    let labels = times.map(|t| t.labels()).unwrap_or_default();
    let label = |i: usize| labels.get(steps[i]).cloned().unwrap_or_else(|| format!("time step {}", steps[i]));
    let mut pieces = Vec::with_capacity(blocks);
    let mut names = Vec::new();
    let mut tables = Vec::new();
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
        names = crate::runner::write_results_within(&temporary, &outcome, request, plan.attributes(), Some(image_limit(limit)))?;
        join_tables(&mut tables, &outcome);
        drop(outcome);
        pieces.push(temporary);
    }
    let paths: Vec<PathBuf> = pieces.iter().map(|p| p.to_path_buf()).collect();
    let merge = crate::merge::MergeRequest { record_shards: false, attributes, ..crate::merge::MergeRequest::new(output.to_path_buf(), paths) };
    crate::merge::merge(&merge).map_err(RunError)?;
    drop(pieces);
    Ok(BoundedSummary { names, tables, blocks, steps_per_block: per_block, time_steps: steps.len(), time_step_bytes: step_bytes })
}

/// Adds a block's tables to those of the blocks before it: a table seen
/// first is taken whole, the same table of a later block adds its rows
/// (blocks come in time order, so the rows stay in time order).
fn join_tables(tables: &mut Vec<(String, crate::lang::value::Series)>, outcome: &crate::runner::RunOutcome) {
    use crate::lang::value::Value;
    for result in &outcome.results {
        let Value::Series(block) = &result.value else { continue };
        match tables.iter_mut().find(|(name, _)| *name == result.name) {
            Some((_, joined)) => {
                joined.labels.extend(block.labels.iter().cloned());
                joined.rows.extend(block.rows.iter().cloned());
            }
            None => tables.push((result.name.clone(), block.clone())),
        }
    }
}

/// Whether a program's results can be computed block by block of time
/// steps and joined (what `baroc run` does by default when the data do not
/// fit in memory). Every operator of the language works on each time step
/// alone; what cannot be split is picking times, since a block may not hold
/// the time picked. So, conservatively: no `during`, no call of `time`, no
/// `at` whose selector is not plainly a level, a layer or a place (a name
/// there could hold a time), no `open` (the program's own data are not the
/// data split), and no call of anything but the built-ins and the
/// program's own functions (a recipe from the library is not seen here).
pub fn streams_by_time(program: &Program) -> bool {
    let functions: Vec<&str> = program
        .statements
        .iter()
        .filter_map(|s| match &s.kind {
            StatementKind::Function { name, .. } => Some(name.name.as_str()),
            _ => None,
        })
        .collect();
    program.statements.iter().all(|s| match &s.kind {
        StatementKind::Open { .. } => false,
        StatementKind::Let { value, .. } | StatementKind::Parameter { default: value, .. } | StatementKind::Output { value, .. } | StatementKind::Function { body: value, .. } => {
            expression_streams(value, &functions)
        }
        StatementKind::Expression(value) => expression_streams(value, &functions),
        StatementKind::Recipe { .. } | StatementKind::About { .. } | StatementKind::Setting { .. } => true,
    })
}

fn expression_streams(expr: &Expr, functions: &[&str]) -> bool {
    let each = |e: &Expr| expression_streams(e, functions);
    match &expr.kind {
        ExprKind::Number { .. } | ExprKind::Angle { .. } | ExprKind::String(_) | ExprKind::Bool(_) | ExprKind::Name(_) => true,
        ExprKind::Block { statements } => statements.iter().all(|s| match &s.kind {
            StatementKind::Let { value, .. } | StatementKind::Expression(value) => each(value),
            _ => false,
        }),
        ExprKind::Unary { operand, .. } => each(operand),
        ExprKind::Binary { left, right, .. } => each(left) && each(right),
        ExprKind::Range { from, to } => each(from) && each(to),
        ExprKind::Convert { value, .. } => each(value),
        ExprKind::If { condition, then_branch, else_branch } => each(condition) && each(then_branch) && each(else_branch),
        ExprKind::Member { base, .. } => each(base),
        ExprKind::Select { base, how, selector } => {
            let plain_selector = match how {
                SelectHow::During => false,
                SelectHow::At => is_level_or_place(selector),
                SelectHow::Over | SelectHow::In => true,
            };
            plain_selector && each(base) && each(selector)
        }
        ExprKind::Call { callee, arguments, options } => {
            let known = match &callee.kind {
                ExprKind::Name(n) => n != "time" && (crate::lang::builtins_lookup(n) || functions.contains(&n.as_str())),
                _ => false,
            };
            known && arguments.iter().all(each) && options.iter().all(|o| each(&o.value))
        }
    }
}

/// A selector after `at` that cannot be a time: a number with a unit (a
/// pressure), a range of them, or a call of `point`.
fn is_level_or_place(selector: &Expr) -> bool {
    match &selector.kind {
        ExprKind::Number { unit: Some(_), .. } => true,
        ExprKind::Range { from, to } => is_level_or_place(from) && is_level_or_place(to),
        ExprKind::Call { callee, .. } => matches!(&callee.kind, ExprKind::Name(n) if n == "point"),
        _ => false,
    }
}

/// The memory a plain `baroc run` stays within when no `--memory-limit`
/// is given: `BAROC_MEMORY_LIMIT` if set (a size as `--memory-limit`
/// takes), else half the memory the system reports available (so that a
/// run on a shared machine leaves room for others), else 4 GiB.
pub fn default_limit() -> Result<u64, String> {
    if let Some(text) = std::env::var_os("BAROC_MEMORY_LIMIT").filter(|t| !t.is_empty()) {
        return parse_size(&text.to_string_lossy()).map_err(|e| e.replace("--memory-limit", "BAROC_MEMORY_LIMIT"));
    }
    let available = std::fs::read_to_string("/proc/meminfo").ok().and_then(|text| {
        let line = text.lines().find(|l| l.starts_with("MemAvailable:"))?;
        line.split_whitespace().nth(1)?.parse::<u64>().ok().map(|kib| kib * 1024)
    });
    Ok(available.map_or(4 << 30, |bytes| (bytes / 2).max(1 << 28)))
}

/// How many blocks a run of `request` within `limit` bytes takes (1: the
/// whole run fits at once).
pub fn blocks_needed(request: &RunRequest, limit: u64) -> Result<usize, RunError> {
    if request.data_files.is_empty() {
        return Ok(1);
    }
    let dataset = Dataset::open(&request.data_files).map_err(|e| RunError(format!("error: {e}")))?;
    Ok(blocks_needed_for(&dataset, request, limit))
}

/// `blocks_needed` for the request's data already opened (`runner::open_data`).
pub fn blocks_needed_for(dataset: &Dataset, request: &RunRequest, limit: u64) -> usize {
    let total = dataset.variables().find_map(|v| v.times.as_ref().map(|t| t.values.len())).unwrap_or(1);
    let steps = request.time_steps.as_ref().map_or(total, |s| s.len());
    steps.div_ceil(steps_per_block(limit, time_step_bytes(dataset))).max(1)
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
    fn only_programs_that_pick_no_time_stream() {
        let streams = |text: &str| streams_by_time(&crate::lang::parse(text).expect("parses"));
        // The recipe shipped with Baroc streams.
        assert!(streams(include_str!("../recipes/thermal-wind-budget.baroc")));
        assert!(streams("let a = temperature at 500 hPa in box(40 north to 60 north, 20 west to 10 east)\nlet b = thickness(1000 hPa to 500 hPa) with route geopotential"));
        assert!(streams("function warm(x) = x + 1 K\noutput w = warm(temperature at 850 hPa)"));
        // Picking a time, or what might be one, does not.
        assert!(!streams("let a = temperature at 500 hPa at \"2026-10-14 06:00\""));
        assert!(!streams("let when = 2\nlet a = temperature at 500 hPa at when"));
        assert!(!streams("let a = temperature at 500 hPa at time(1)"));
        assert!(!streams("open \"other.nc\"\nlet a = temperature at 500 hPa"));
        assert!(!streams("let a = some_library_recipe()"));
    }

    #[test]
    fn blocks_hold_as_many_steps_as_fit_and_never_none() {
        assert_eq!(steps_per_block(60, 10), 1);
        assert_eq!(steps_per_block(600, 10), 10);
        assert_eq!(steps_per_block(1, 1 << 30), 1);
    }
}
