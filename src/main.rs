//! The `baroc` command: a thin layer over the library's modules.

use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::Arc;

use clap::{Parser, Subcommand};

use baroc::diagnostics::{Case, Layer};
use baroc::io::{Dataset, Selection};

#[derive(Parser)]
#[command(name = "baroc", version, about = "Thermal-wind and balance diagnostics on CF-NetCDF pressure-level grids.", long_about = "Baroc diagnoses how the wind changes with height: geostrophic wind, hydrostatic thickness, layer-mean temperature, thermal wind, temperature advection, ageostrophic shear, stability and baroclinicity, on CF-NetCDF grids.\n\nBaroc is an analysis tool, not a warning service. For forecasts and warnings, defer to your national meteorological service and local practice.")]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Write the built-in demonstration case and print its thermal-wind summary.
    #[command(after_help = "Example:\n  baroc demo --output demo-case\n  baroc inspect demo-case/marrowind-wave-2026-10-14.nc")]
    Demo {
        /// Directory to write the case (and its report) into.
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
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Demo { output, time_step } => demo(&output, time_step),
        Command::Inspect { files } => inspect(&files),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(message) => {
            eprintln!("error: {message}");
            ExitCode::FAILURE
        }
    }
}

fn demo(output: &std::path::Path, time_step: Option<usize>) -> Result<(), String> {
    let path = baroc::demo::write(output).map_err(|e| e.to_string())?;
    println!("wrote the demonstration case to {}", path.display());
    let dataset = Arc::new(Dataset::open(&[&path]).map_err(|e| e.to_string())?);
    let steps = baroc::demo::TIME_STEPS;
    let step = time_step.unwrap_or(steps - 1);
    if step >= steps {
        return Err(format!("time step {step} is out of range: the case has steps 0 to {}", steps - 1));
    }
    let case = Case::new(dataset.clone()).with_selection(Selection { times: Some(vec![step]), ..Selection::default() });
    let label = dataset.variable("t").and_then(|v| v.times.as_ref()).map(|t| t.labels()[step].clone()).unwrap_or_default();
    for (bottom, top) in [(100000.0, 50000.0), (85000.0, 30000.0)] {
        let layer = Layer::new(bottom, top).0;
        let rows = baroc::demo::summarise(&case, layer).map_err(|e| e.to_string())?;
        println!();
        print!("{}", baroc::demo::format_summary(&rows, layer, &label));
    }
    println!("\nBaroc is an analysis tool, not a warning service. For forecasts and warnings, defer to your national meteorological service and local practice.");
    Ok(())
}

fn inspect(files: &[PathBuf]) -> Result<(), String> {
    let dataset = Dataset::open(files).map_err(|e| e.to_string())?;
    println!("{}", baroc::io::describe(&dataset));
    Ok(())
}
