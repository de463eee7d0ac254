//! Sharded runs: one run split into N jobs, each over a contiguous block of
//! the dataset's time steps, for job arrays on a batch scheduler.
//!
//! The partition depends only on the shard number, the shard count and the
//! number of time steps, so the same inputs always give the same blocks:
//! shard `i` (0-based here) of `n` over `t` steps covers
//! `floor(i*t/n) .. floor((i+1)*t/n)`. Blocks differ in length by at most
//! one step, never overlap and together cover every step once.
//!
//! On the command line shards are numbered from 1 (`--shard 1/4` is the
//! first of four), as people count jobs. With `--shard slurm` the number
//! comes from the scheduler's environment: the position of
//! `SLURM_ARRAY_TASK_ID` among the array's task IDs, that is
//! `(ID - SLURM_ARRAY_TASK_MIN) / SLURM_ARRAY_TASK_STEP`, out of
//! `SLURM_ARRAY_TASK_COUNT`. So `--array=0-3`, `--array=1-4` and
//! `--array=10-16:2` all give shards 1 to 4 of 4; an array written as a
//! list with holes (`--array=1,4,9`) is refused, since its task IDs are not
//! evenly spaced and the shard could not be told from them.
//!
//! Every shard's output records, as global attributes, which shard it is,
//! the block of time steps it covers, and the whole dataset's time range;
//! `merge` reads them back to check coverage.

use std::ops::Range;
use std::path::PathBuf;

use crate::runner::RunRequest;

/// Global attribute names written on every shard (their prefix marks them
/// as provenance: the merged file does not carry them).
pub const ATTRIBUTE_INDEX: &str = "baroc_shard_index";
pub const ATTRIBUTE_COUNT: &str = "baroc_shard_count";
pub const ATTRIBUTE_FIRST_STEP: &str = "baroc_shard_first_time_step";
pub const ATTRIBUTE_STEP_COUNT: &str = "baroc_shard_time_steps";
pub const ATTRIBUTE_TOTAL_STEPS: &str = "baroc_shard_dataset_time_steps";
pub const ATTRIBUTE_FULL_RANGE: &str = "baroc_shard_dataset_time_range";
pub const ATTRIBUTE_BLOCK_RANGE: &str = "baroc_shard_time_range";
/// Written on every run's output: the parameter overrides, so that merge can
/// tell shards of different runs apart.
pub const ATTRIBUTE_PARAMETERS: &str = "baroc_parameters";

/// One shard of a run: `index` counts from 0, `count` >= 1.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Shard {
    pub index: usize,
    pub count: usize,
}

impl std::fmt::Display for Shard {
    /// As the user writes it: `2/4` is the second of four.
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}/{}", self.index + 1, self.count)
    }
}

const SHAPE_HELP: &str = "write it as `--shard 2/4` (the second of four shards, counted from 1) or `--shard slurm` (read from a Slurm job array)";

impl Shard {
    /// Parses `I/N` (1-based `I`), or `slurm` to read the scheduler's
    /// environment through `environment`.
    pub fn parse(text: &str, environment: impl Fn(&str) -> Option<String>) -> Result<Shard, String> {
        let text = text.trim();
        if text.eq_ignore_ascii_case("slurm") {
            return Shard::from_slurm(environment);
        }
        let Some((i, n)) = text.split_once('/') else {
            return Err(format!("error: --shard `{text}` is not a shard: {SHAPE_HELP}"));
        };
        let number = |s: &str, what: &str| s.trim().parse::<usize>().map_err(|_| format!("error: --shard `{text}`: `{}` is not a whole number ({what}); {SHAPE_HELP}", s.trim()));
        let (i, n) = (number(i, "the shard's number")?, number(n, "the number of shards")?);
        if n == 0 {
            return Err(format!("error: --shard `{text}`: the number of shards must be at least 1"));
        }
        if i == 0 || i > n {
            return Err(format!("error: --shard `{text}`: shards are counted from 1 to {n}, so the first is `1/{n}` and the last `{n}/{n}`"));
        }
        Ok(Shard { index: i - 1, count: n })
    }

    /// The shard of this Slurm array task (see the module comment).
    pub fn from_slurm(environment: impl Fn(&str) -> Option<String>) -> Result<Shard, String> {
        let read = |name: &str, default: Option<i64>| -> Result<i64, String> {
            match environment(name) {
                Some(v) => v.trim().parse::<i64>().map_err(|_| format!("error: --shard slurm: {name}=`{v}` is not a whole number")),
                None => default.ok_or_else(|| format!("error: --shard slurm: {name} is not set; this is not a Slurm array task (submit with `sbatch --array=1-4 ...`), or give the shard as `--shard 2/4`")),
            }
        };
        let id = read("SLURM_ARRAY_TASK_ID", None)?;
        let count = read("SLURM_ARRAY_TASK_COUNT", None)?;
        let min = read("SLURM_ARRAY_TASK_MIN", None)?;
        let max = read("SLURM_ARRAY_TASK_MAX", Some(min + count - 1))?;
        let step = read("SLURM_ARRAY_TASK_STEP", Some(1))?.max(1);
        if count < 1 || id < min || id > max || (id - min) % step != 0 {
            return Err(format!("error: --shard slurm: task {id} does not fit the array {min}-{max}:{step} of {count} tasks"));
        }
        if (max - min) / step + 1 != count {
            return Err(format!(
                "error: --shard slurm: the array's task IDs ({min} to {max}, step {step}) are not {count} evenly spaced numbers; submit a range such as `--array=1-{count}` so each task knows its shard"
            ));
        }
        Ok(Shard { index: ((id - min) / step) as usize, count: count as usize })
    }

    /// This shard's block of `total` time steps. Errors when the shard
    /// would be empty (more shards than time steps).
    pub fn block(&self, total: usize) -> Result<Range<usize>, String> {
        let start = self.index * total / self.count;
        let end = (self.index + 1) * total / self.count;
        if start == end {
            return Err(format!(
                "error: shard {self} has no time steps: the data have {total} time step{}, fewer than the {} shards; use at most {total} shards",
                if total == 1 { "" } else { "s" },
                self.count
            ));
        }
        Ok(start..end)
    }
}

/// What a shard covers, ready to be written as attributes.
#[derive(Debug, Clone, PartialEq)]
pub struct ShardPlan {
    pub shard: Shard,
    pub block: Range<usize>,
    pub total_steps: usize,
    /// Labels of the first and last time of the whole dataset and of the block.
    pub full_range: (String, String),
    pub block_range: (String, String),
}

impl ShardPlan {
    pub fn attributes(&self) -> Vec<(String, String)> {
        vec![
            (ATTRIBUTE_INDEX.into(), (self.shard.index + 1).to_string()),
            (ATTRIBUTE_COUNT.into(), self.shard.count.to_string()),
            (ATTRIBUTE_FIRST_STEP.into(), self.block.start.to_string()),
            (ATTRIBUTE_STEP_COUNT.into(), self.block.len().to_string()),
            (ATTRIBUTE_TOTAL_STEPS.into(), self.total_steps.to_string()),
            (ATTRIBUTE_FULL_RANGE.into(), format!("{} to {}", self.full_range.0, self.full_range.1)),
            (ATTRIBUTE_BLOCK_RANGE.into(), format!("{} to {}", self.block_range.0, self.block_range.1)),
        ]
    }
}

/// Opens the request's data (headers only), finds the shard's block of time
/// steps and restricts the request to it.
pub fn plan(request: &mut RunRequest, shard: Shard) -> Result<ShardPlan, String> {
    if request.data_files.is_empty() {
        return Err("error: --shard splits the data's time steps, but no data file was given".into());
    }
    if request.time_steps.is_some() {
        return Err("error: --shard chooses the time steps itself; it does not combine with a time-step selection".into());
    }
    let files: Vec<PathBuf> = request.data_files.clone();
    let dataset = crate::io::Dataset::open(&files).map_err(|e| format!("error: {e}"))?;
    let Some(times) = dataset.variables().find_map(|v| v.times.clone()) else {
        return Err("error: --shard splits the data's time steps, but the data have no time axis".into());
    };
    let total = times.values.len();
    let block = shard.block(total)?;
    let labels = times.labels();
    let label = |i: usize| labels.get(i).cloned().unwrap_or_else(|| format!("time step {i}"));
    let plan = ShardPlan {
        shard,
        block: block.clone(),
        total_steps: total,
        full_range: (label(0), label(total - 1)),
        block_range: (label(block.start), label(block.end - 1)),
    };
    request.time_steps = Some(block.collect());
    Ok(plan)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::HashMap;

    fn env(pairs: &[(&str, &str)]) -> impl Fn(&str) -> Option<String> {
        let map: HashMap<String, String> = pairs.iter().map(|(k, v)| (k.to_string(), v.to_string())).collect();
        move |k: &str| map.get(k).cloned()
    }

    #[test]
    fn blocks_are_contiguous_cover_every_step_once_and_differ_by_at_most_one() {
        // The partition's defining property (common practice for block
        // decompositions, no source): checked exhaustively for small sizes.
        for total in 1..60 {
            for count in 1..=total {
                let blocks: Vec<Range<usize>> = (0..count).map(|i| Shard { index: i, count }.block(total).unwrap()).collect();
                assert_eq!(blocks[0].start, 0);
                assert_eq!(blocks[count - 1].end, total);
                for w in blocks.windows(2) {
                    assert_eq!(w[0].end, w[1].start, "contiguous for {total} steps in {count}");
                }
                let lengths: Vec<usize> = blocks.iter().map(|b| b.len()).collect();
                assert!(lengths.iter().max().unwrap() - lengths.iter().min().unwrap() <= 1);
            }
        }
        assert_eq!(Shard { index: 3, count: 4 }.block(5).unwrap(), 3..5);
    }

    #[test]
    fn more_shards_than_steps_is_refused_with_the_limit() {
        let e = Shard { index: 0, count: 8 }.block(5).unwrap_err();
        assert!(e.contains("1/8") && e.contains("at most 5"), "{e}");
    }

    #[test]
    fn shards_are_written_from_one() {
        let none = |_: &str| None;
        assert_eq!(Shard::parse("1/4", none).unwrap(), Shard { index: 0, count: 4 });
        assert_eq!(Shard::parse(" 4 / 4 ", none).unwrap(), Shard { index: 3, count: 4 });
        assert_eq!(Shard::parse("1/4", none).unwrap().to_string(), "1/4");
        for bad in ["0/4", "5/4", "1/0", "a/4", "2", "-1/4", ""] {
            let e = Shard::parse(bad, none).unwrap_err();
            assert!(e.starts_with("error: --shard"), "{bad}: {e}");
        }
        assert!(Shard::parse("0/4", none).unwrap_err().contains("`1/4`"));
    }

    #[test]
    fn slurm_task_ids_count_from_the_arrays_minimum() {
        // Slurm sets these for every array task (sbatch(1), "OUTPUT
        // ENVIRONMENT VARIABLES"): ID, COUNT, MIN, MAX and STEP.
        let zero_based = env(&[("SLURM_ARRAY_TASK_ID", "0"), ("SLURM_ARRAY_TASK_COUNT", "4"), ("SLURM_ARRAY_TASK_MIN", "0"), ("SLURM_ARRAY_TASK_MAX", "3")]);
        assert_eq!(Shard::parse("slurm", zero_based).unwrap(), Shard { index: 0, count: 4 });
        let one_based = env(&[("SLURM_ARRAY_TASK_ID", "4"), ("SLURM_ARRAY_TASK_COUNT", "4"), ("SLURM_ARRAY_TASK_MIN", "1"), ("SLURM_ARRAY_TASK_MAX", "4")]);
        assert_eq!(Shard::parse("slurm", one_based).unwrap(), Shard { index: 3, count: 4 });
        let stepped = env(&[
            ("SLURM_ARRAY_TASK_ID", "14"),
            ("SLURM_ARRAY_TASK_COUNT", "4"),
            ("SLURM_ARRAY_TASK_MIN", "10"),
            ("SLURM_ARRAY_TASK_MAX", "16"),
            ("SLURM_ARRAY_TASK_STEP", "2"),
        ]);
        assert_eq!(Shard::parse("SLURM", stepped).unwrap(), Shard { index: 2, count: 4 });
    }

    #[test]
    fn slurm_outside_an_array_or_with_holes_is_refused() {
        let e = Shard::parse("slurm", |_: &str| None).unwrap_err();
        assert!(e.contains("SLURM_ARRAY_TASK_ID is not set"), "{e}");
        let holes = env(&[("SLURM_ARRAY_TASK_ID", "4"), ("SLURM_ARRAY_TASK_COUNT", "3"), ("SLURM_ARRAY_TASK_MIN", "1"), ("SLURM_ARRAY_TASK_MAX", "9")]);
        assert!(Shard::parse("slurm", holes).unwrap_err().contains("evenly spaced"));
        let garbage = env(&[("SLURM_ARRAY_TASK_ID", "x"), ("SLURM_ARRAY_TASK_COUNT", "3"), ("SLURM_ARRAY_TASK_MIN", "1")]);
        assert!(Shard::parse("slurm", garbage).unwrap_err().contains("not a whole number"));
    }
}
