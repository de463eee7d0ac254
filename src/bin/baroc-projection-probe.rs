//! A test probe, not a user command: prints Baroc's projection coordinates,
//! map factors and wind rotation angles for points read from standard input,
//! so that `tests/python/test_projection_pyproj.py` can compare them with
//! pyproj (PROJ).
//!
//! Input (JSON): {"grid_mapping": {"grid_mapping_name": "...", <CF attributes
//! as numbers or lists of numbers>}, "points": [[lat, lon], ...],
//! "grid_points": [[x, y], ...]}
//! Output (JSON): {"forward": [[x, y, map_factor, east_angle_radians], ...],
//! "inverse": [[lat, lon], ...]}

use std::io::Read;

use baroc::projection::Projection;

fn main() -> std::process::ExitCode {
    match run() {
        Ok(text) => {
            println!("{text}");
            std::process::ExitCode::SUCCESS
        }
        Err(message) => {
            eprintln!("error: {message}");
            std::process::ExitCode::FAILURE
        }
    }
}

fn run() -> Result<String, String> {
    let mut text = String::new();
    std::io::stdin().read_to_string(&mut text).map_err(|e| e.to_string())?;
    let input: serde_json::Value = serde_json::from_str(&text).map_err(|e| e.to_string())?;
    let mapping = input.get("grid_mapping").and_then(|m| m.as_object()).ok_or("no grid_mapping object")?;
    let name = mapping.get("grid_mapping_name").and_then(|v| v.as_str()).ok_or("no grid_mapping_name")?;
    let number = |key: &str| -> Option<Vec<f64>> {
        match mapping.get(key)? {
            serde_json::Value::Number(n) => Some(vec![n.as_f64()?]),
            serde_json::Value::Array(a) => a.iter().map(|v| v.as_f64()).collect(),
            _ => None,
        }
    };
    let (projection, _notes) = Projection::from_cf(name, &number, baroc::constants::EARTH_RADIUS).map_err(|e| e.to_string())?;
    let pairs = |key: &str| -> Vec<(f64, f64)> {
        input
            .get(key)
            .and_then(|v| v.as_array())
            .map(|a| a.iter().filter_map(|p| Some((p.get(0)?.as_f64()?, p.get(1)?.as_f64()?))).collect())
            .unwrap_or_default()
    };
    let forward: Vec<[f64; 4]> = pairs("points")
        .into_iter()
        .map(|(lat, lon)| {
            let (x, y) = projection.forward(lat, lon);
            [x, y, projection.map_factor(lat, lon), projection.east_angle(lat, lon)]
        })
        .collect();
    let inverse: Vec<[f64; 2]> = pairs("grid_points")
        .into_iter()
        .map(|(x, y)| {
            let (lat, lon) = projection.inverse(x, y);
            [lat, lon]
        })
        .collect();
    Ok(serde_json::json!({ "forward": forward, "inverse": inverse }).to_string())
}
