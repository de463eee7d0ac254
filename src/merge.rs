//! Joining the shards of a sharded run (`baroc run --shard I/N`) into one
//! file along time.
//!
//! Before anything is written every shard is checked against the first one
//! given: the same recipe text and parameters, the same dataset time range
//! and shard count, the same dimensions, variables, types and attributes
//! (units among them) and the same grid coordinates. The first
//! disagreement is reported with the variable and both files. Then the
//! shards are ordered by their first time step and their coverage of the
//! dataset's steps is checked: a gap (a step no shard covers) or an overlap
//! (a step two shards cover) is refused, unless the caller accepts partial
//! coverage; then gaps are left out and an overlapping step is taken from
//! the shard that starts first, and the merged file says so.
//!
//! The merged file is the file one unsharded run would have written: same
//! variables, values and attributes; only provenance differs (`history`
//! lists every shard's history, `baroc_merged_shards` describes each shard,
//! and the shards' own `baroc_shard_*` attributes are dropped). Data are
//! copied one time step at a time, so memory stays at one step of one
//! variable whatever the number of shards. Written atomically.
//!
//! netCDF-C calls all run on the netCDF thread (see `io::netcdf_thread`).

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use netcdf::types::NcVariableType;
use netcdf::AttributeValue;

use crate::shard;

/// What to merge.
#[derive(Debug, Clone)]
pub struct MergeRequest {
    pub output: PathBuf,
    pub shards: Vec<PathBuf>,
    /// Accept gaps and overlaps in the shards' coverage of the time steps.
    pub accept_partial_coverage: bool,
    /// Describe every shard in `baroc_merged_shards` and keep their
    /// histories (false when the pieces are a bounded run's own blocks).
    pub record_shards: bool,
    /// Further global attributes for the merged file.
    pub attributes: Vec<(String, String)>,
}

impl MergeRequest {
    pub fn new(output: PathBuf, shards: Vec<PathBuf>) -> MergeRequest {
        MergeRequest { output, shards, accept_partial_coverage: false, record_shards: true, attributes: Vec::new() }
    }
}

/// What was merged.
#[derive(Debug, Clone, PartialEq)]
pub struct MergeSummary {
    pub shards: usize,
    pub time_steps: usize,
    pub dataset_time_steps: usize,
    /// Time steps (0-based, of the dataset) no shard covered.
    pub missing_steps: Vec<usize>,
    /// Time steps covered by more than one shard (the first shard's copy kept).
    pub repeated_steps: Vec<usize>,
}

struct VariableDescription {
    name: String,
    vartype: NcVariableType,
    dimensions: Vec<String>,
    attributes: Vec<(String, AttributeValue)>,
}

struct ShardFile {
    path: PathBuf,
    file: netcdf::File,
    globals: BTreeMap<String, AttributeValue>,
    global_order: Vec<String>,
    dimensions: Vec<(String, usize)>,
    variables: Vec<VariableDescription>,
    index: usize,
    count: usize,
    first_step: usize,
    step_count: usize,
    total_steps: usize,
}

/// Attributes that say where a file came from rather than what it holds;
/// they are not compared between shards and not copied.
pub fn is_provenance(name: &str) -> bool {
    name == "history" || name.starts_with("baroc_shard_") || name.starts_with("baroc_merged_")
}

fn text(value: &AttributeValue) -> String {
    match value {
        AttributeValue::Str(s) => s.clone(),
        other => format!("{other:?}"),
    }
}

fn shard_number(path: &Path, globals: &BTreeMap<String, AttributeValue>, name: &str) -> Result<usize, String> {
    let value = globals.get(name).ok_or_else(|| {
        format!("error: {} is not a shard written by `baroc run --shard I/N`: it has no `{name}` attribute", path.display())
    })?;
    let as_number = match value {
        AttributeValue::Str(s) => s.trim().parse::<usize>().ok(),
        AttributeValue::Int(i) => usize::try_from(*i).ok(),
        AttributeValue::Uint(i) => usize::try_from(*i).ok(),
        AttributeValue::Longlong(i) => usize::try_from(*i).ok(),
        _ => None,
    };
    as_number.ok_or_else(|| format!("error: {}: the attribute `{name}` is `{}`, not a whole number", path.display(), text(value)))
}

fn open_shard(path: &Path) -> Result<ShardFile, String> {
    let file = netcdf::open(path).map_err(|e| format!("error: cannot open the shard {}: {e}", path.display()))?;
    let mut globals = BTreeMap::new();
    let mut global_order = Vec::new();
    for a in file.attributes() {
        let value = a.value().map_err(|e| format!("error: {}: cannot read the attribute `{}`: {e}", path.display(), a.name()))?;
        global_order.push(a.name().to_string());
        globals.insert(a.name().to_string(), value);
    }
    let dimensions = file.dimensions().map(|d| (d.name(), d.len())).collect();
    let mut variables = Vec::new();
    for v in file.variables() {
        let mut attributes = Vec::new();
        for a in v.attributes() {
            let value = a.value().map_err(|e| format!("error: {}: cannot read the attribute `{}` of `{}`: {e}", path.display(), a.name(), v.name()))?;
            attributes.push((a.name().to_string(), value));
        }
        variables.push(VariableDescription { name: v.name(), vartype: v.vartype(), dimensions: v.dimensions().iter().map(|d| d.name()).collect(), attributes });
    }
    let index = shard_number(path, &globals, shard::ATTRIBUTE_INDEX)?;
    let count = shard_number(path, &globals, shard::ATTRIBUTE_COUNT)?;
    let first_step = shard_number(path, &globals, shard::ATTRIBUTE_FIRST_STEP)?;
    let step_count = shard_number(path, &globals, shard::ATTRIBUTE_STEP_COUNT)?;
    let total_steps = shard_number(path, &globals, shard::ATTRIBUTE_TOTAL_STEPS)?;
    if index == 0 || index > count || first_step + step_count > total_steps || step_count == 0 {
        return Err(format!(
            "error: {}: its shard attributes do not hold together (shard {index} of {count}, time steps {first_step} + {step_count} of {total_steps})",
            path.display()
        ));
    }
    Ok(ShardFile { path: path.to_path_buf(), file, globals, global_order, dimensions, variables, index, count, first_step, step_count, total_steps })
}

/// Names of the time dimensions: those whose coordinate variable has
/// `axis = "T"` or `standard_name = "time"` (CF conventions, section 4.4).
fn time_dimensions(shard: &ShardFile) -> Vec<String> {
    shard
        .variables
        .iter()
        .filter(|v| v.dimensions.len() == 1 && v.dimensions[0] == v.name)
        .filter(|v| v.attributes.iter().any(|(k, value)| (k == "axis" && text(value) == "T") || (k == "standard_name" && text(value) == "time")))
        .map(|v| v.name.clone())
        .collect()
}

/// Checks `other` against `first`; the first disagreement is the error.
fn compare(first: &ShardFile, other: &ShardFile) -> Result<(), String> {
    let (a, b) = (first.path.display(), other.path.display());
    for name in ["baroc_script", shard::ATTRIBUTE_PARAMETERS] {
        if first.globals.get(name) != other.globals.get(name) {
            let what = if name == "baroc_script" { "recipe or script text" } else { "parameters (--set)" };
            return Err(format!("error: {b} was made with other {what} than {a} (the `{name}` attributes differ): these are shards of different runs"));
        }
    }
    for name in [shard::ATTRIBUTE_COUNT, shard::ATTRIBUTE_TOTAL_STEPS, shard::ATTRIBUTE_FULL_RANGE] {
        if first.globals.get(name) != other.globals.get(name) {
            return Err(format!(
                "error: {b} and {a} split different runs: `{name}` is `{}` in {b} but `{}` in {a}",
                other.globals.get(name).map(text).unwrap_or_default(),
                first.globals.get(name).map(text).unwrap_or_default()
            ));
        }
    }
    let names_a: Vec<&str> = first.variables.iter().map(|v| v.name.as_str()).collect();
    let names_b: Vec<&str> = other.variables.iter().map(|v| v.name.as_str()).collect();
    if let Some(missing) = names_a.iter().find(|n| !names_b.contains(n)) {
        return Err(format!("error: {b} has no variable `{missing}`, which {a} has"));
    }
    if let Some(extra) = names_b.iter().find(|n| !names_a.contains(n)) {
        return Err(format!("error: {b} has a variable `{extra}` that {a} does not have"));
    }
    let times = time_dimensions(first);
    for (name, length) in &first.dimensions {
        let theirs = other.dimensions.iter().find(|(n, _)| n == name).map(|(_, l)| *l);
        match theirs {
            None => return Err(format!("error: {b} has no dimension `{name}`, which {a} has")),
            Some(l) if l != *length && !times.contains(name) => {
                return Err(format!("error: the grids differ: dimension `{name}` has {l} points in {b} but {length} in {a}"));
            }
            _ => {}
        }
    }
    for va in &first.variables {
        let vb = other.variables.iter().find(|v| v.name == va.name).expect("checked above");
        if va.vartype != vb.vartype {
            return Err(format!("error: variable `{}` is stored as {:?} in {b} but as {:?} in {a}", va.name, vb.vartype, va.vartype));
        }
        if va.dimensions != vb.dimensions {
            return Err(format!("error: variable `{}` has dimensions ({}) in {b} but ({}) in {a}", va.name, vb.dimensions.join(", "), va.dimensions.join(", ")));
        }
        for (key, value) in &va.attributes {
            match vb.attributes.iter().find(|(k, _)| k == key) {
                None => return Err(format!("error: variable `{}` has no `{key}` attribute in {b}, but has one in {a}", va.name)),
                Some((_, theirs)) if theirs != value => {
                    return Err(format!("error: variable `{}` has {key} `{}` in {b} but `{}` in {a}", va.name, text(theirs), text(value)));
                }
                _ => {}
            }
        }
        if let Some((key, _)) = vb.attributes.iter().find(|(k, _)| !va.attributes.iter().any(|(ka, _)| ka == k)) {
            return Err(format!("error: variable `{}` has a `{key}` attribute in {b} that it lacks in {a}", va.name));
        }
        // Anything without a time dimension (the grid's coordinates, and
        // results that are not per time step) must agree value for value.
        if !va.dimensions.iter().any(|d| times.contains(d)) {
            let read = |s: &ShardFile| s.file.variable(&va.name).map(|v| v.get_raw_values(..));
            match (read(first), read(other)) {
                (Some(Ok(x)), Some(Ok(y))) if x == y => {}
                (Some(Ok(_)), Some(Ok(_))) => {
                    let coordinate = va.dimensions.len() == 1 && va.dimensions[0] == va.name;
                    return Err(if coordinate {
                        format!("error: the grids differ: the `{}` coordinates of {b} are not those of {a}", va.name)
                    } else {
                        format!(
                            "error: variable `{}` has no time dimension and differs between {b} and {a}: a result that combines time steps cannot be joined from blocks of time steps; run it whole (without --shard or --memory-limit)",
                            va.name
                        )
                    });
                }
                (Some(Err(e)), _) | (_, Some(Err(e))) => return Err(format!("error: cannot read `{}`: {e}", va.name)),
                _ => return Err(format!("error: cannot read `{}`", va.name)),
            }
        }
    }
    Ok(())
}

/// The rows of each shard to copy: `(shard position, first row, rows)`,
/// in time order, with the steps missing and the steps repeated.
type Coverage = (Vec<(usize, usize, usize)>, Vec<usize>, Vec<usize>);

fn coverage(shards: &[ShardFile], accept_partial: bool) -> Result<Coverage, String> {
    let mut order: Vec<usize> = (0..shards.len()).collect();
    order.sort_by_key(|&i| (shards[i].first_step, shards[i].index));
    let total = shards[0].total_steps;
    let mut plan = Vec::new();
    let (mut missing, mut repeated) = (Vec::new(), Vec::new());
    let mut covered = 0usize;
    let mut previous: Option<usize> = None;
    for &i in &order {
        let s = &shards[i];
        let (start, end) = (s.first_step, s.first_step + s.step_count);
        if start > covered {
            if !accept_partial {
                let after = previous.map(|p| format!("after {} (which ends at time step {})", shards[p].path.display(), covered - 1)).unwrap_or_else(|| "at the start".into());
                return Err(format!(
                    "error: gap: {} in no shard ({after}; the next shard, {}, starts at time step {start}); give the missing shard, or accept partial coverage with --accept-gaps-and-overlaps",
                    steps(covered, start - 1),
                    s.path.display()
                ));
            }
            missing.extend(covered..start);
        }
        if start < covered {
            if !accept_partial {
                let p = previous.expect("an overlap follows a shard");
                return Err(format!(
                    "error: overlap: {} in both {} and {} (shards {} and {} of {}); give each shard once, or accept it with --accept-gaps-and-overlaps",
                    steps(start, covered.min(end) - 1),
                    shards[p].path.display(),
                    s.path.display(),
                    shards[p].index,
                    s.index,
                    s.count
                ));
            }
            repeated.extend(start..covered.min(end));
        }
        let skip = covered.saturating_sub(start).min(s.step_count);
        if skip < s.step_count {
            plan.push((i, skip, s.step_count - skip));
        }
        if end > covered {
            covered = end;
            previous = Some(i);
        }
    }
    if covered < total {
        if !accept_partial {
            let last = previous.map(|p| shards[p].path.display().to_string()).unwrap_or_default();
            return Err(format!(
                "error: gap: {} in no shard (the last shard, {last}, ends at time step {}); give the missing shard, or accept partial coverage with --accept-gaps-and-overlaps",
                steps(covered, total - 1),
                covered.saturating_sub(1)
            ));
        }
        missing.extend(covered..total);
    }
    Ok((plan, missing, repeated))
}

/// "time step 3 is" or "time steps 3 to 5 are".
fn steps(first: usize, last: usize) -> String {
    if first == last {
        format!("time step {first} is")
    } else {
        format!("time steps {first} to {last} are")
    }
}

macro_rules! copy_rows {
    ($t:ty, $source:expr, $target:expr, $row:expr, $rows:expr, $at:expr, $shape:expr) => {{
        let mut start = vec![0usize; $shape.len()];
        let mut count = $shape.clone();
        start[0] = $row;
        count[0] = 1;
        for k in 0..$rows {
            start[0] = $row + k;
            let values: Vec<$t> = $source.get_values::<$t, _>((start.as_slice(), count.as_slice())).map_err(|e| e.to_string())?;
            let mut target_start = start.clone();
            target_start[0] = $at + k;
            $target.put_values(&values, (target_start.as_slice(), count.as_slice())).map_err(|e| e.to_string())?;
        }
    }};
}

fn write_merged(target: &Path, shards: &[ShardFile], plan: &[(usize, usize, usize)], provenance: &[(String, String)]) -> Result<(), String> {
    let first = &shards[0];
    let times = time_dimensions(first);
    let merged_steps: usize = plan.iter().map(|p| p.2).sum();
    let mut out = netcdf::create(target).map_err(|e| e.to_string())?;
    for name in &first.global_order {
        if !is_provenance(name) {
            out.add_attribute(name, first.globals[name].clone()).map_err(|e| e.to_string())?;
        }
    }
    for (k, v) in provenance {
        out.add_attribute(k, v.as_str()).map_err(|e| e.to_string())?;
    }
    for (name, length) in &first.dimensions {
        out.add_dimension(name, if times.contains(name) { merged_steps } else { *length }).map_err(|e| e.to_string())?;
    }
    for v in &first.variables {
        let dims: Vec<&str> = v.dimensions.iter().map(String::as_str).collect();
        if dims.iter().skip(1).any(|d| times.iter().any(|t| t == d)) {
            return Err(format!("variable `{}` has its time dimension in a place other than first; only time-first variables can be joined", v.name));
        }
        let mut variable = out.add_variable_with_type(&v.name, &dims, &v.vartype).map_err(|e| e.to_string())?;
        for (k, value) in &v.attributes {
            variable.put_attribute(k, value.clone()).map_err(|e| format!("attribute `{k}` of `{}`: {e}", v.name))?;
        }
    }
    for v in &first.variables {
        let along_time = v.dimensions.first().is_some_and(|d| times.contains(d));
        let mut target_variable = out.variable_mut(&v.name).expect("defined above");
        let pieces: Vec<(usize, usize, usize)> = if along_time { plan.to_vec() } else { vec![(0, 0, 1)] };
        let mut at = 0usize;
        for (s, row, rows) in pieces {
            let source = shards[s].file.variable(&v.name).ok_or_else(|| format!("{} lost `{}`", shards[s].path.display(), v.name))?;
            let mut shape: Vec<usize> = source.dimensions().iter().map(|d| d.len()).collect();
            if shape.is_empty() {
                // A scalar variable: one value.
                shape.push(1);
            }
            let (row, rows) = if along_time { (row, rows) } else { (0, shape[0]) };
            if along_time && row + rows > shape[0] {
                return Err(format!(
                    "{}: `{}` has {} time steps, fewer than the shard's record of {}",
                    shards[s].path.display(),
                    v.name,
                    shape[0],
                    shards[s].step_count
                ));
            }
            match &v.vartype {
                NcVariableType::Float(netcdf::types::FloatType::F32) => copy_rows!(f32, source, target_variable, row, rows, at, shape),
                NcVariableType::Float(netcdf::types::FloatType::F64) => copy_rows!(f64, source, target_variable, row, rows, at, shape),
                NcVariableType::Int(netcdf::types::IntType::I32) => copy_rows!(i32, source, target_variable, row, rows, at, shape),
                NcVariableType::Int(netcdf::types::IntType::I64) => copy_rows!(i64, source, target_variable, row, rows, at, shape),
                NcVariableType::Int(netcdf::types::IntType::I16) => copy_rows!(i16, source, target_variable, row, rows, at, shape),
                NcVariableType::Int(netcdf::types::IntType::I8) => copy_rows!(i8, source, target_variable, row, rows, at, shape),
                NcVariableType::Int(netcdf::types::IntType::U8) => copy_rows!(u8, source, target_variable, row, rows, at, shape),
                other => return Err(format!("variable `{}` is of type {other:?}, which merge does not copy", v.name)),
            }
            at += rows;
        }
    }
    out.close().map_err(|e| e.to_string())?;
    Ok(())
}

fn merge_on_netcdf_thread(request: &MergeRequest, temporary: &Path) -> Result<MergeSummary, String> {
    let shards: Vec<ShardFile> = request.shards.iter().map(|p| open_shard(p)).collect::<Result<_, _>>()?;
    for other in &shards[1..] {
        compare(&shards[0], other)?;
    }
    let times = time_dimensions(&shards[0]);
    for s in &shards {
        for (name, length) in s.dimensions.iter().filter(|(n, _)| times.contains(n)) {
            if *length != s.step_count {
                return Err(format!(
                    "error: {}: the time dimension `{name}` has {length} entries, but the shard records {} time steps",
                    s.path.display(),
                    s.step_count
                ));
            }
        }
    }
    let (plan, missing, repeated) = coverage(&shards, request.accept_partial_coverage)?;
    let now = crate::report::utc_now();
    let mut history = format!(
        "{now}: baroc {} merge {} {}",
        env!("CARGO_PKG_VERSION"),
        request.output.display(),
        request.shards.iter().map(|p| p.display().to_string()).collect::<Vec<_>>().join(" ")
    );
    let mut described = Vec::new();
    let mut ordered: Vec<&ShardFile> = shards.iter().collect();
    ordered.sort_by_key(|s| (s.first_step, s.index));
    for s in ordered {
        let shard_history = s.globals.get("history").map(text).unwrap_or_default();
        history.push('\n');
        history.push_str(&shard_history);
        described.push(format!(
            "shard {}/{}: time steps {} to {} ({}) from {}: {}",
            s.index,
            s.count,
            s.first_step,
            s.first_step + s.step_count - 1,
            s.globals.get(shard::ATTRIBUTE_BLOCK_RANGE).map(text).unwrap_or_default(),
            s.path.display(),
            shard_history
        ));
    }
    let mut provenance = if request.record_shards {
        vec![("history".to_string(), history), ("baroc_merged_shards".to_string(), described.join("\n"))]
    } else {
        vec![("history".to_string(), shards[0].globals.get("history").map(text).unwrap_or_default())]
    };
    provenance.extend(request.attributes.iter().cloned());
    let list = |steps: &[usize]| steps.iter().map(usize::to_string).collect::<Vec<_>>().join(" ");
    if !missing.is_empty() {
        provenance.push(("baroc_merged_missing_time_steps".into(), list(&missing)));
    }
    if !repeated.is_empty() {
        provenance.push(("baroc_merged_repeated_time_steps".into(), list(&repeated)));
    }
    write_merged(temporary, &shards, &plan, &provenance).map_err(|e| format!("error: cannot write {}: {e}", request.output.display()))?;
    Ok(MergeSummary {
        shards: shards.len(),
        time_steps: plan.iter().map(|p| p.2).sum(),
        dataset_time_steps: shards[0].total_steps,
        missing_steps: missing,
        repeated_steps: repeated,
    })
}

/// Checks the shards and writes the merged file atomically: on any error
/// nothing is left at the output path.
pub fn merge(request: &MergeRequest) -> Result<MergeSummary, String> {
    if request.shards.is_empty() {
        return Err("error: give the shard files to merge, for example `baroc merge out.nc out-shard-*.nc`".into());
    }
    if let Some(p) = request.shards.iter().find(|p| same_file(p, &request.output)) {
        return Err(format!("error: the output {} is also given as a shard ({}); write the merged file elsewhere", request.output.display(), p.display()));
    }
    let temporary = crate::atomic::temporary_beside(&request.output).map_err(|e| format!("error: cannot write {}: {e}", request.output.display()))?;
    let path: &Path = &temporary;
    let summary = crate::io::netcdf_thread::call(|| merge_on_netcdf_thread(request, path))?;
    crate::atomic::publish(temporary, &request.output).map_err(|e| format!("error: cannot write {}: {e}", request.output.display()))?;
    Ok(summary)
}

fn same_file(a: &Path, b: &Path) -> bool {
    match (std::fs::canonicalize(a), std::fs::canonicalize(b)) {
        (Ok(x), Ok(y)) => x == y,
        _ => a == b,
    }
}
