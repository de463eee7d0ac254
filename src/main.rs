//! The `baroc` command: a thin layer over the library's modules.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::sync::Arc;

use clap::{Parser, Subcommand, ValueEnum};

use baroc::diagnostics::{Case, Layer};
use baroc::io::{Dataset, Selection};
use baroc::runner::{RunRequest, TableFormat};

// Large arrays on huge pages and recycled within the process (src/memory.rs):
// page faults on fresh memory were most of a run's time.
#[global_allocator]
static ALLOCATOR: baroc::memory::Recycling = baroc::memory::Recycling::new();

const CAUTION: &str = "Baroc is an analysis tool, not a warning service. For forecasts and warnings, defer to your national meteorological service and local practice.";

#[derive(Parser)]
#[command(
    name = "baroc",
    version,
    about = "Thermal-wind and balance diagnostics on CF-NetCDF pressure-level grids.",
    long_about = "Baroc diagnoses how the wind changes with height: geostrophic wind, hydrostatic thickness, layer-mean temperature, thermal wind, temperature advection, ageostrophic shear, stability and baroclinicity, on CF-NetCDF and GRIB2 grids.\n\nBaroc is an analysis tool, not a warning service. For forecasts and warnings, defer to your national meteorological service and local practice."
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Clone, Copy, ValueEnum)]
enum Format {
    Text,
    Csv,
    Json,
}

#[derive(Clone, Copy, ValueEnum)]
enum Integration {
    Quadratic,
    Trapezoid,
}

#[derive(Subcommand)]
enum Command {
    /// Write the built-in demonstration case, print its thermal-wind summary and write its report.
    #[command(after_help = "Example:\n  baroc demo --output baroc-demo\n  baroc inspect baroc-demo/marrowind-wave-2026-10-14.nc")]
    Demo {
        /// Directory to write the case and its report into.
        #[arg(long, short, default_value = "baroc-demo")]
        output: PathBuf,
        /// Time step to summarise (0-based; the default is the last).
        #[arg(long)]
        time_step: Option<usize>,
    },
    /// Describe data files: variables, roles, grid, levels and times.
    #[command(after_help = "Example:\n  baroc inspect baroc-demo/marrowind-wave-2026-10-14.nc")]
    Inspect {
        /// One or more NetCDF files, combined into one dataset.
        #[arg(required = true)]
        files: Vec<PathBuf>,
    },
    /// Evaluate a script, recipe or expression on data files and write every named result to CF NetCDF.
    #[command(after_help = "Examples (on the demo case):\n  baroc run -e 'thermal_wind(1000 hPa to 500 hPa)' -o shear.nc baroc-demo/marrowind-wave-2026-10-14.nc\n  baroc run recipes/thermal-wind-budget.baroc --set 'layer=850 hPa to 300 hPa' -o out.nc --report out.html baroc-demo/marrowind-wave-2026-10-14.nc")]
    Run {
        #[command(flatten)]
        program: ProgramArgs,
        /// NetCDF file to write the named results to (written atomically).
        #[arg(long, short)]
        output: Option<PathBuf>,
        /// Also write a self-contained HTML report of the run.
        #[arg(long)]
        report: Option<PathBuf>,
        /// Evaluate each time step separately, in parallel, with a progress bar.
        #[arg(long)]
        each_time: bool,
        /// Run one shard: I/N is the I-th (from 1) of N contiguous blocks of the data's
        /// time steps; `slurm` takes it from the job array's SLURM_ARRAY_TASK_* variables.
        #[arg(long, value_name = "I/N|slurm")]
        shard: Option<String>,
        /// Keep memory within this size (e.g. 4GiB) by running blocks of time steps one
        /// after another and joining them in the output file. Without it, a run writing a
        /// file does so by itself when its data would not fit in half the available memory
        /// (or in BAROC_MEMORY_LIMIT) and its program picks no particular time.
        #[arg(long, value_name = "SIZE")]
        memory_limit: Option<String>,
    },
    /// Join the NetCDF files of a sharded run (`baroc run --shard`) along time into one.
    #[command(after_help = "Example:\n  for i in 1 2 3 4; do baroc run recipes/thermal-wind-budget.baroc --shard $i/4 -o part-$i.nc case.nc; done\n  baroc merge budget.nc part-*.nc")]
    Merge {
        /// The merged file to write (atomically).
        output: PathBuf,
        /// The shard files, in any order.
        #[arg(required = true)]
        shards: Vec<PathBuf>,
        /// Write the merged file even when shards leave time steps out (gaps) or cover a
        /// step twice (overlaps: the copy of the shard that starts first is kept).
        #[arg(long)]
        accept_gaps_and_overlaps: bool,
    },
    /// Print named results at points or as area statistics.
    #[command(after_help = "Examples (on the demo case):\n  baroc table -e 'thickness(1000 hPa to 500 hPa)' --at '51.5 north, 31 west' baroc-demo/marrowind-wave-2026-10-14.nc\n  baroc table -e 'turning(1000 hPa to 500 hPa)' --region '45 north to 60 north, 40 west to 10 west' --format csv baroc-demo/marrowind-wave-2026-10-14.nc")]
    Table {
        #[command(flatten)]
        program: ProgramArgs,
        /// A point, written as in the language: '52.5 north, 20 west'. Repeatable.
        #[arg(long = "at")]
        points: Vec<String>,
        /// A box: '40 north to 65 north, 50 west to 5 east'. Repeatable.
        #[arg(long = "region")]
        regions: Vec<String>,
        #[arg(long, value_enum, default_value = "text")]
        format: Format,
    },
    /// Audit a dataset's balance: hydrostatic residual per layer, thermal-wind residual by latitude band, geostrophic departure per level, plausibility, and a verdict naming likely causes.
    #[command(after_help = "Examples (on the demo case):\n  baroc audit baroc-demo/marrowind-wave-2026-10-14.nc\n  baroc audit --strict --max-hydrostatic-rms 2 --report audit.html baroc-demo/marrowind-wave-2026-10-14.nc\n\nWith --strict the exit status is 1 when any check passes its limit.")]
    Audit {
        /// One or more NetCDF files, combined into one dataset.
        #[arg(required = true)]
        files: Vec<PathBuf>,
        #[arg(long, value_enum, default_value = "text")]
        format: Format,
        /// Exit with status 1 when any check passes its limit.
        #[arg(long)]
        strict: bool,
        /// Limit of the RMS hydrostatic residual of any layer (m).
        #[arg(long, value_name = "METRES", default_value_t = baroc::audit::Thresholds::default().hydrostatic_rms_metres)]
        max_hydrostatic_rms: f64,
        /// Limit of the RMS thermal-wind residual of any layer and latitude band (m/s).
        #[arg(long, value_name = "M/S", default_value_t = baroc::audit::Thresholds::default().thermal_wind_rms)]
        max_thermal_wind_rms: f64,
        /// Limit of the RMS geostrophic departure at any level (m/s).
        #[arg(long, value_name = "M/S", default_value_t = baroc::audit::Thresholds::default().geostrophic_rms)]
        max_geostrophic_rms: f64,
        /// Integrate temperature over ln p by the trapezoid (default: each layer's residual depends on its two levels only) or the piecewise quadratic.
        #[arg(long, value_enum, default_value = "trapezoid")]
        integration: Integration,
        /// Also write a self-contained HTML audit report.
        #[arg(long, value_name = "FILE.html")]
        report: Option<PathBuf>,
    },
    /// The Jupyter kernel: run it (Jupyter does, from kernel.json), install or uninstall its kernelspec.
    #[command(after_help = "Examples:\n  baroc kernel install --user\n  jupyter lab   # then pick the Baroc kernel\n  baroc kernel uninstall --user")]
    Kernel {
        /// The connection file Jupyter passes when it starts the kernel.
        #[arg(long)]
        connection_file: Option<PathBuf>,
        #[command(subcommand)]
        action: Option<KernelAction>,
    },
}

#[derive(Subcommand)]
enum KernelAction {
    /// Install the kernelspec (display name, language, logos, interrupt by message).
    Install {
        #[command(flatten)]
        location: KernelLocation,
        /// The name Jupyter shows for the kernel.
        #[arg(long, default_value = baroc::kernel::kernelspec::DEFAULT_DISPLAY_NAME)]
        display_name: String,
    },
    /// Remove the kernelspec.
    Uninstall {
        #[command(flatten)]
        location: KernelLocation,
    },
}

#[derive(clap::Args)]
#[group(multiple = false)]
struct KernelLocation {
    /// The user's Jupyter data directory (the default).
    #[arg(long)]
    user: bool,
    /// DIR/share/jupyter/kernels.
    #[arg(long, value_name = "DIR")]
    prefix: Option<PathBuf>,
    /// The active Python environment's prefix (sys.prefix).
    #[arg(long)]
    sys_prefix: bool,
}

impl KernelLocation {
    fn location(&self) -> baroc::kernel::kernelspec::KernelspecLocation {
        use baroc::kernel::kernelspec::KernelspecLocation;
        match (&self.prefix, self.sys_prefix) {
            (Some(prefix), _) => KernelspecLocation::Prefix(prefix.clone()),
            (None, true) => KernelspecLocation::SysPrefix,
            _ => KernelspecLocation::User,
        }
    }
}

fn kernel(connection_file: Option<PathBuf>, action: Option<KernelAction>) -> Result<(), String> {
    use baroc::kernel::kernelspec::{install_kernelspec, uninstall_kernelspec};
    match (connection_file, action) {
        (Some(file), None) => baroc::kernel::run_kernel(&file, || Box::new(baroc::kernel::baroc_session::BarocKernelSession::new())).map_err(|e| format!("error: {e}")),
        (None, Some(KernelAction::Install { location, display_name })) => {
            let dir = install_kernelspec(&location.location(), &display_name).map_err(|e| format!("error: {e}"))?;
            out(&format!("installed the Baroc kernelspec in {}\n", dir.display()));
            Ok(())
        }
        (None, Some(KernelAction::Uninstall { location })) => match uninstall_kernelspec(&location.location()).map_err(|e| format!("error: {e}"))? {
            Some(dir) => {
                out(&format!("removed the Baroc kernelspec from {}\n", dir.display()));
                Ok(())
            }
            None => {
                out("no Baroc kernelspec was installed there\n");
                Ok(())
            }
        },
        (Some(_), Some(_)) => Err("error: --connection-file runs the kernel; it does not go with install or uninstall".into()),
        (None, None) => Err("error: say what to do: `baroc kernel install --user`, `baroc kernel uninstall --user`, or (as Jupyter does) `baroc kernel --connection-file FILE`".into()),
    }
}

#[derive(clap::Args)]
struct ProgramArgs {
    /// A Baroc script or recipe file (.baroc); the data files follow it.
    #[arg(long, short)]
    script: Option<PathBuf>,
    /// An inline expression or program instead of a script.
    #[arg(long, short, conflicts_with = "script")]
    expression: Option<String>,
    /// Override a recipe parameter: NAME=VALUE, the value in Baroc syntax.
    #[arg(long = "set", value_name = "NAME=VALUE")]
    overrides: Vec<String>,
    /// The data files (NetCDF), combined into one dataset. A first argument
    /// ending in .baroc is taken as the script.
    files: Vec<PathBuf>,
    /// Model-level data: what pressures below the lowest model level (below
    /// ground) give: `missing` (NaN, the default) or `standard-lapse-rate`
    /// (extrapolated at 6.5 K/km, recorded in the results' metadata). A
    /// program may choose with `setting below_ground ...`; given both, they
    /// must agree.
    #[arg(long = "below-ground", value_enum)]
    below_ground: Option<BelowGround>,
}

#[derive(Clone, Copy, ValueEnum)]
enum BelowGround {
    Missing,
    StandardLapseRate,
}

impl BelowGround {
    /// Sets the choice for every dataset this run opens.
    fn apply(self) {
        use baroc::physics::model_levels::BelowLowestLevel;
        baroc::io::model_level_source::set_below_lowest_level(match self {
            BelowGround::Missing => BelowLowestLevel::Missing,
            BelowGround::StandardLapseRate => BelowLowestLevel::StandardLapseRate,
        });
    }
}

/// Writes to stdout; a closed pipe (`baroc ... | head`) ends quietly.
fn out(text: &str) {
    let mut stdout = std::io::stdout().lock();
    if let Err(e) = stdout.write_all(text.as_bytes()).and_then(|_| stdout.flush()) {
        if e.kind() == std::io::ErrorKind::BrokenPipe {
            std::process::exit(0);
        }
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Demo { output, time_step } => demo(&output, time_step),
        Command::Inspect { files } => Dataset::open(&files).map(|d| out(&format!("{}\n", baroc::io::describe(&d)))).map_err(|e| format!("error: {e}")),
        Command::Run { program, output, report, each_time, shard, memory_limit } => {
            program.below_ground.map(BelowGround::apply);
            run(program, output, report, each_time, shard, memory_limit)
        }
        Command::Merge { output, shards, accept_gaps_and_overlaps } => merge(output, shards, accept_gaps_and_overlaps),
        Command::Table { program, points, regions, format } => {
            program.below_ground.map(BelowGround::apply);
            table(program, points, regions, format)
        }
        Command::Kernel { connection_file, action } => kernel(connection_file, action),
        Command::Audit { files, format, strict, max_hydrostatic_rms, max_thermal_wind_rms, max_geostrophic_rms, integration, report } => {
            let thresholds = baroc::audit::Thresholds { hydrostatic_rms_metres: max_hydrostatic_rms, thermal_wind_rms: max_thermal_wind_rms, geostrophic_rms: max_geostrophic_rms };
            match audit(&files, format, thresholds, integration, report.as_deref()) {
                Ok(passed) if strict && !passed => {
                    eprintln!("the audit failed (--strict): see the verdict");
                    return ExitCode::FAILURE;
                }
                other => other.map(|_| ()),
            }
        }
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(message) => {
            eprintln!("{}", message.trim_end());
            ExitCode::FAILURE
        }
    }
}

fn request(program: ProgramArgs, each_time: bool) -> Result<RunRequest, String> {
    let mut files = program.files;
    let mut script = program.script;
    if script.is_none() && program.expression.is_none() && files.first().is_some_and(|f| f.extension().is_some_and(|e| e == "baroc")) {
        script = Some(files.remove(0));
    }
    let (source, origin) = match (&script, &program.expression) {
        (Some(path), _) => (std::fs::read_to_string(path).map_err(|e| format!("error: cannot read the script {}: {e}", path.display()))?, path.display().to_string()),
        (None, Some(e)) => (e.clone(), format!("--expression {e:?}")),
        (None, None) => return Err("error: give a script (a .baroc file or --script FILE) or --expression TEXT\n  for example: baroc run -e 'thickness(1000 hPa to 500 hPa)' -o thickness.nc baroc-demo/marrowind-wave-2026-10-14.nc".into()),
    };
    let mut overrides = Vec::new();
    for o in program.overrides {
        let (k, v) = o.split_once('=').ok_or_else(|| format!("error: --set takes NAME=VALUE, for example --set 'layer=850 hPa to 500 hPa'; got `{o}`"))?;
        overrides.push((k.trim().to_string(), v.trim().to_string()));
    }
    let project = script.as_ref().and_then(|s| s.parent().map(Path::to_path_buf)).unwrap_or_else(|| PathBuf::from("recipes"));
    Ok(RunRequest {
        source,
        origin,
        data_files: files,
        overrides,
        each_time,
        time_steps: None,
        progress: each_time && std::io::IsTerminal::is_terminal(&std::io::stderr()),
        recipe_folders: baroc::lang::recipe::default_folders(Some(&project)),
    })
}

fn run(program: ProgramArgs, output: Option<PathBuf>, report: Option<PathBuf>, each_time: bool, shard: Option<String>, memory_limit: Option<String>) -> Result<(), String> {
    let run_started = std::time::Instant::now();
    // Every output is checked before anything is computed, and written
    // only when all of them were made: a run that fails leaves none.
    let targets: Vec<(&str, &Path)> = [("the NetCDF output", output.as_deref()), ("the report", report.as_deref())].into_iter().filter_map(|(what, p)| Some((what, p?))).collect();
    baroc::atomic::Outputs::check(&targets).map_err(|e| format!("error: {e}"))?;
    let mut request = request(program, each_time)?;
    let shard_plan = match &shard {
        Some(text) => {
            let shard = baroc::shard::Shard::parse(text, |name| std::env::var(name).ok())?;
            if output.is_none() {
                return Err(format!("error: --shard {text} writes its block of time steps to a file: add --output, for example -o part-{}.nc", shard.index + 1));
            }
            Some(baroc::shard::plan(&mut request, shard)?)
        }
        None => None,
    };
    // Without --memory-limit, a run writing a file streams by blocks of
    // time steps when its data would not fit in memory at once and its
    // program picks no time (src/bounded.rs); otherwise it runs whole.
    // The data opened to size the blocks serve the run itself when it runs whole.
    let mut opened = None;
    let memory_limit = match memory_limit {
        Some(text) => Some(baroc::bounded::parse_size(&text)?),
        None if output.is_some() && report.is_none() && !request.each_time && baroc::lang::parse(&request.source).is_ok_and(|p| baroc::bounded::streams_by_time(&p)) => {
            let limit = baroc::bounded::default_limit()?;
            let dataset = baroc::runner::open_data(&request).map_err(|e| e.0)?;
            let blocks = dataset.as_deref().map_or(1, |d| baroc::bounded::blocks_needed_for(d, &request, limit));
            opened = Some(dataset);
            (blocks > 1).then_some(limit)
        }
        None => None,
    };
    if let Some(limit) = memory_limit {
        drop(opened.take());
        let Some(path) = &output else {
            return Err("error: --memory-limit writes the results block by block to a file: add --output, for example -o results.nc".into());
        };
        if report.is_some() {
            return Err("error: --report needs every result in memory at once; drop --memory-limit, or make the report from a run over fewer time steps".into());
        }
        let attributes = shard_plan.as_ref().map(|p| p.attributes()).unwrap_or_default();
        let summary = baroc::bounded::run_to_file(&request, path, limit, attributes).map_err(|e| e.0)?;
        if std::env::var_os("BAROC_TIMINGS").is_some_and(|v| !v.is_empty() && v != "0") {
            eprintln!("timings: path: streaming, {} blocks of at most {} time steps; run command total {:.3} s", summary.blocks, summary.steps_per_block, run_started.elapsed().as_secs_f64());
            eprintln!("timings: {}", baroc::io::timings::layer_paths());
        }
        out(&format!(
            "wrote {} to {} ({} time steps in {} block{} of at most {})\n",
            summary.names.join(", "),
            path.display(),
            summary.time_steps,
            summary.blocks,
            if summary.blocks == 1 { "" } else { "s" },
            summary.steps_per_block
        ));
        for (name, table) in &summary.tables {
            out(&format!("{name} (a table, not written to the NetCDF file): {}\n", baroc::display::plain(&baroc::lang::value::Value::Series(table.clone()))));
        }
        return Ok(());
    }
    // BAROC_TIMINGS=1 prints the split of the run on stderr, for
    // benches/end_to_end.py (reading is lazy, so it falls inside evaluate).
    let timings = std::env::var_os("BAROC_TIMINGS").is_some_and(|v| !v.is_empty() && v != "0");
    let started = std::time::Instant::now();
    if timings {
        eprintln!("timings: path: whole run in memory (no streaming blocks)");
        eprintln!("timings: before evaluating (arguments, sizing) {:.3} s", run_started.elapsed().as_secs_f64());
    }
    let outcome = match opened {
        Some(dataset) => baroc::runner::run_opened(&request, dataset),
        None => baroc::runner::run(&request),
    }
    .map_err(|e| e.0)?;
    if timings {
        let evaluate = started.elapsed().as_secs_f64();
        let read = baroc::io::timings::totals();
        eprintln!("timings: evaluate (read + compute) {evaluate:.3} s");
        eprintln!(
            "timings: read/unpack {:.3} s ({} reads, {:.1} MB, {} in parallel without netCDF-C, {} from the read cache), compute {:.3} s",
            read.seconds,
            read.reads,
            read.bytes as f64 / 1e6,
            read.direct,
            read.cached,
            (evaluate - read.seconds).max(0.0)
        );
        eprintln!("timings: {}", baroc::io::timings::layer_paths());
    }
    let mut outputs = baroc::atomic::Outputs::new();
    let mut written = Vec::new();
    if let Some(path) = &output {
        let attributes = shard_plan.as_ref().map(|p| p.attributes()).unwrap_or_default();
        let started = std::time::Instant::now();
        let staged = outputs.stage(path).map_err(|e| format!("error: cannot write {}: {e}", path.display()))?;
        let names = baroc::runner::write_results_with(&staged, &outcome, &request, attributes).map_err(|e| e.0.replace(&staged.display().to_string(), &path.display().to_string()))?;
        if timings {
            let (build, file, bytes) = baroc::io::timings::write_totals();
            let route = match baroc::io::timings::write_routes() {
                (0, 0) => "none: written by netCDF-C to the file",
                (_, 0) => "from HDF5's memory",
                (0, _) => "copied out of HDF5 first",
                _ => "some copied out of HDF5 first",
            };
            eprintln!(
                "timings: write {:.3} s (file image built in memory {build:.3} s, {:.1} MB put in the file {file:.3} s, {route})",
                started.elapsed().as_secs_f64(),
                bytes as f64 / 1e6
            );
            eprintln!("timings: run command total {:.3} s", run_started.elapsed().as_secs_f64());
            let (fresh, reused) = baroc::memory::large_block_bytes();
            eprintln!("timings: large blocks {:.0} MB mapped fresh, {:.0} MB reused (src/memory.rs)", fresh as f64 / 1e6, reused as f64 / 1e6);
        }
        written.push(format!("wrote {} to {}\n", names.join(", "), path.display()));
    }
    if let Some(path) = &report {
        let staged = outputs.stage(path).map_err(|e| format!("error: cannot write the report {}: {e}", path.display()))?;
        baroc::report::build(&outcome, &request, Vec::new())
            .write(&staged)
            .map_err(|e| format!("error: cannot write the report {}: {}", path.display(), e.to_string().replace(&staged.display().to_string(), &path.display().to_string())))?;
        written.push(format!("wrote the report to {}\n", path.display()));
    }
    outputs.publish().map_err(|e| format!("error: {e}"))?;
    for line in written {
        out(&line);
    }
    if output.is_none() && report.is_none() {
        for r in &outcome.results {
            out(&format!("{}: {}\n", r.name, baroc::display::plain(&r.value)));
        }
    } else if output.is_some() {
        // The NetCDF file holds fields; tables (area means, values at a
        // point) are printed rather than dropped.
        for r in outcome.results.iter().filter(|r| !matches!(r.value, baroc::lang::value::Value::Scalar(_) | baroc::lang::value::Value::Vector(_))) {
            out(&format!("{} (a table, not written to the NetCDF file): {}\n", r.name, baroc::display::plain(&r.value)));
        }
    }
    Ok(())
}

fn merge(output: PathBuf, shards: Vec<PathBuf>, accept_gaps_and_overlaps: bool) -> Result<(), String> {
    baroc::atomic::Outputs::check(&[("the merged file", &output)]).map_err(|e| format!("error: {e}"))?;
    let request = baroc::merge::MergeRequest { accept_partial_coverage: accept_gaps_and_overlaps, ..baroc::merge::MergeRequest::new(output.clone(), shards) };
    let summary = baroc::merge::merge(&request)?;
    out(&format!("merged {} shards ({} of {} time steps) into {}\n", summary.shards, summary.time_steps, summary.dataset_time_steps, output.display()));
    if !summary.missing_steps.is_empty() {
        out(&format!("time steps left out (no shard had them): {:?}\n", summary.missing_steps));
    }
    if !summary.repeated_steps.is_empty() {
        out(&format!("time steps in two shards (the first kept): {:?}\n", summary.repeated_steps));
    }
    Ok(())
}

fn parse_place(text: &str, what: &str) -> Result<baroc::lang::value::Value, String> {
    let source = format!("{what}({text})");
    let mut evaluator = baroc::lang::eval::Evaluator::new();
    let program = baroc::lang::parse(&source).map_err(|d| format!("error: `{text}` is not a {what}: {}", d[0].message))?;
    let mut values = evaluator.run(&program, &source).map_err(|d| format!("error: `{text}` is not a {what}: {}", d.message))?;
    values.pop().map(|(_, v)| v).ok_or_else(|| format!("error: `{text}` is not a {what}"))
}

fn table(program: ProgramArgs, points: Vec<String>, regions: Vec<String>, format: Format) -> Result<(), String> {
    use baroc::lang::value::Value;
    let request = request(program, false)?;
    let mut pts = Vec::new();
    for p in &points {
        match parse_place(p, "point")? {
            Value::Point { latitude, longitude } => pts.push((latitude, longitude)),
            _ => return Err(format!("error: `{p}` is not a point; write it as '52.5 north, 20 west'")),
        }
    }
    let mut boxes = Vec::new();
    for r in &regions {
        match parse_place(r, "box")? {
            Value::Region(region) => boxes.push(region),
            _ => return Err(format!("error: `{r}` is not a region; write it as '40 north to 65 north, 50 west to 5 east'")),
        }
    }
    if pts.is_empty() && boxes.is_empty() {
        return Err("error: say where: --at '52.5 north, 20 west' or --region '40 north to 65 north, 50 west to 5 east'".into());
    }
    let outcome = baroc::runner::run(&request).map_err(|e| e.0)?;
    let rows = baroc::runner::tabulate(&outcome, &pts, &boxes).map_err(|e| e.0)?;
    let format = match format {
        Format::Text => TableFormat::Text,
        Format::Csv => TableFormat::Csv,
        Format::Json => TableFormat::Json,
    };
    out(&baroc::runner::format_table(&rows, format));
    Ok(())
}

fn demo(output: &Path, time_step: Option<usize>) -> Result<(), String> {
    if time_step.is_some_and(|step| step >= baroc::demo::TIME_STEPS) {
        return Err(format!("error: time step {} is out of range: the case has steps 0 to {}", time_step.unwrap_or_default(), baroc::demo::TIME_STEPS - 1));
    }
    let path = baroc::demo::write(output).map_err(|e| format!("error: {e}"))?;
    // The case and its report are one output: should the rest fail, the
    // case file goes too.
    let result = demo_summary_and_report(output, &path, time_step);
    if result.is_err() {
        let _ = std::fs::remove_file(&path);
    }
    result
}

fn demo_summary_and_report(output: &Path, path: &Path, time_step: Option<usize>) -> Result<(), String> {
    out(&format!("wrote the demonstration case to {}\n", path.display()));
    let dataset = Arc::new(Dataset::open(&[path]).map_err(|e| format!("error: {e}"))?);
    let steps = baroc::demo::TIME_STEPS;
    let step = time_step.unwrap_or(steps - 1);
    if step >= steps {
        return Err(format!("error: time step {step} is out of range: the case has steps 0 to {}", steps - 1));
    }
    let case = Case::new(dataset.clone()).with_selection(Selection { times: Some(vec![step]), ..Selection::default() });
    let label = dataset.variable("temperature").and_then(|v| v.times.as_ref()).map(|t| t.labels()[step].clone()).unwrap_or_default();
    for (bottom, top) in [(100000.0, 50000.0), (85000.0, 30000.0)] {
        let layer = Layer::new(bottom, top).0;
        let rows = baroc::demo::summarise(&case, layer).map_err(|e| format!("error: {e}"))?;
        out(&format!("\n{}", baroc::demo::format_summary(&rows, layer, &label)));
    }
    match baroc::demo::write_report(output, path, step) {
        Ok(report) => out(&format!("\nwrote the case-study report to {}\n", report.display())),
        Err(e) => return Err(format!("error: the report could not be written: {e}")),
    }
    let regional = baroc::demo::regional::write(output).map_err(|e| format!("error: {e}"))?;
    out(&format!(
        "\nwrote the regional case (GRIB2, Lambert conformal grid, hybrid model levels, grid-relative winds; the invented Saltmere Coast) to {}\n",
        regional.display()
    ));
    out(&format!("\n{CAUTION}\n"));
    Ok(())
}

/// `baroc audit`: reads, audits, prints, optionally writes the HTML report;
/// returns whether every check passed.
fn audit(files: &[PathBuf], format: Format, thresholds: baroc::audit::Thresholds, integration: Integration, report: Option<&Path>) -> Result<bool, String> {
    use baroc::audit::present::{self, AuditFormat};
    for limit in [thresholds.hydrostatic_rms_metres, thresholds.thermal_wind_rms, thresholds.geostrophic_rms] {
        if !(limit.is_finite() && limit > 0.0) {
            return Err(format!("error: a limit must be a positive number, got {limit}"));
        }
    }
    if let Some(path) = report {
        baroc::atomic::Outputs::check(&[("the audit report", path)]).map_err(|e| format!("error: {e}"))?;
    }
    let dataset = Arc::new(Dataset::open(files).map_err(|e| format!("error: {e}"))?);
    let settings = baroc::audit::AuditSettings {
        thresholds,
        integration: match integration {
            Integration::Quadratic => baroc::physics::vertical::IntegrationRule::Quadratic,
            Integration::Trapezoid => baroc::physics::vertical::IntegrationRule::Trapezoid,
        },
        ..baroc::audit::AuditSettings::default()
    };
    let result = present::audit_case(&Case::new(dataset), &settings).map_err(|e| format!("error: {e}"))?;
    let format = match format {
        Format::Text => AuditFormat::Text,
        Format::Csv => AuditFormat::Csv,
        Format::Json => AuditFormat::Json,
    };
    out(&present::format(&result, format));
    if let Some(path) = report {
        let names: Vec<String> = files.iter().map(|f| f.display().to_string()).collect();
        present::write_html_report(&result, &names, &settings, path).map_err(|e| format!("error: {e}"))?;
        eprintln!("wrote the audit report to {}", path.display());
    }
    Ok(result.passed())
}
