//! Writes two small GRIB2 files with Baroc's own writer, with values from
//! formulas, so that tests can read them with an outside decoder and compare
//! (`tests/python/test_grib2_eccodes.py`). Not shipped to users.
//!
//! Usage: baroc-grib2-sample DIRECTORY
//!
//! - `latlon-isobaric.grib2`: temperature on 850 and 500 hPa at forecast
//!   hours 0 and 6 from 2031-04-12 06:00 UTC, a 2.5-degree grid from 60 N to
//!   30 N and 20 W to 20 E (north first), one value missing (NaN) per
//!   message at the first grid point; value =
//!   250 + 0.5 * (60 - lat) + 0.25 * lon + p / 10000 + hour / 4 (K, lon in
//!   -180..180, p in Pa);
//! - `lambert-hybrid.grib2`: temperature on hybrid levels 1 to 3 of a
//!   Lambert conformal grid (template 3.30: 6 x 5 points, first point
//!   35 N 10 W, 12 km spacing, standard parallels 40 and 50 N, orientation
//!   2 E), vertical coordinate values a = 0, 5000, 10000, 0 Pa and
//!   b = 1, 0.7, 0.3, 0; value = 290 - 10 * level + 0.5 * k for the k-th
//!   point in scan order; and surface pressure (type 1) = 100000 + 10 * k Pa.
//! - `lambert-isobaric.grib2`: geopotential height and u, v at 500 hPa on a
//!   Lambert conformal grid (template 3.30: 40 x 30 points, first point
//!   50 N 32 W scanning from the south-west corner, 40 km spacing, standard
//!   parallels 35 and 55 N, orientation 10 W, winds flagged grid-relative);
//!   height = 5570 - 900 sin(lat) + 360 cos(lat) sin(3 lon) m, u = 12 + k /
//!   1000, v = -3 + k / 2000 m/s for the k-th point in scan order.

use baroc::io::grib2::{days_from_civil, Earth, GridDefinition, LambertConformal, LatLonGrid};
use baroc::io::grib2_writer::{write_file, Level, Message};

fn main() {
    let Some(directory) = std::env::args().nth(1) else {
        eprintln!("usage: baroc-grib2-sample DIRECTORY");
        std::process::exit(2);
    };
    let directory = std::path::PathBuf::from(directory);
    let earth = Earth { shape: 6, radius: None, major_axis: None, minor_axis: None };
    let reference_time = days_from_civil(2031, 4, 12) * 86400 + 6 * 3600;

    let latlon = GridDefinition::LatLon(LatLonGrid {
        ni: 17,
        nj: 13,
        first_latitude: 60.0,
        first_longitude: -20.0,
        last_latitude: 30.0,
        last_longitude: 20.0,
        i_increment: Some(2.5),
        j_increment: Some(2.5),
        resolution_flags: 0x30,
        scanning_mode: 0,
        earth: earth.clone(),
    });
    let mut fields = Vec::new();
    for hour in [0u32, 6] {
        for pressure in [85000.0f64, 50000.0] {
            let mut values = Vec::new();
            for j in 0..13 {
                for i in 0..17 {
                    let (lat, lon) = (60.0 - 2.5 * j as f64, -20.0 + 2.5 * i as f64);
                    values.push((250.0 + 0.5 * (60.0 - lat) + 0.25 * lon + pressure / 10000.0 + hour as f64 / 4.0) as f32);
                }
            }
            values[0] = f32::NAN;
            fields.push((hour, pressure, values));
        }
    }
    let messages: Vec<Message> = fields
        .iter()
        .map(|(hour, pressure, values)| Message {
            discipline: 0,
            category: 0,
            number: 0,
            reference_time,
            forecast_hours: *hour,
            level: Level::Isobaric(*pressure),
            grid: &latlon,
            values,
            bits: 16,
        })
        .collect();
    if let Err(e) = write_file(&directory.join("latlon-isobaric.grib2"), &messages) {
        eprintln!("{e}");
        std::process::exit(1);
    }

    let lambert = GridDefinition::LambertConformal(LambertConformal {
        nx: 6,
        ny: 5,
        first_latitude: 35.0,
        first_longitude: -10.0,
        true_scale_latitude: 45.0,
        orientation_longitude: 2.0,
        dx_metres: 12000.0,
        dy_metres: 12000.0,
        projection_centre_flag: 0,
        resolution_flags: 0x08,
        scanning_mode: 0x40,
        first_standard_parallel: 40.0,
        second_standard_parallel: 50.0,
        south_pole_latitude: -90.0,
        south_pole_longitude: 0.0,
        earth,
    });
    let pv = vec![0.0, 5000.0, 10000.0, 0.0, 1.0, 0.7, 0.3, 0.0];
    let levels: Vec<(u32, Vec<f32>)> = (1..=3u32).map(|level| (level, (0..30).map(|k| 290.0 - 10.0 * level as f32 + 0.5 * k as f32).collect())).collect();
    let surface: Vec<f32> = (0..30).map(|k| 100000.0 + 10.0 * k as f32).collect();
    let mut messages: Vec<Message> = levels
        .iter()
        .map(|(level, values)| Message {
            discipline: 0,
            category: 0,
            number: 0,
            reference_time,
            forecast_hours: 0,
            level: Level::Hybrid { number: *level, pv: pv.clone() },
            grid: &lambert,
            values,
            bits: 16,
        })
        .collect();
    messages.push(Message {
        discipline: 0,
        category: 3,
        number: 0,
        reference_time,
        forecast_hours: 0,
        level: Level::Ground,
        grid: &lambert,
        values: &surface,
        bits: 16,
    });
    if let Err(e) = write_file(&directory.join("lambert-hybrid.grib2"), &messages) {
        eprintln!("{e}");
        std::process::exit(1);
    }

    // The point positions come from the reader of the file (the test asks
    // ecCodes for them); only the height needs each point's latitude and
    // longitude, computed here with Baroc's own projection.
    let (nx, ny, spacing) = (40usize, 30usize, 40_000.0);
    let projection = baroc::projection::Projection::LambertConformal(
        baroc::projection::LambertConformal::new((35.0, 55.0), -10.0, 45.0, 0.0, 0.0, 6_371_229.0).expect("valid parallels"),
    );
    let (first_latitude, first_longitude) = (50.0, -32.0);
    let (x0, y0) = projection.forward(first_latitude, first_longitude);
    let lambert = GridDefinition::LambertConformal(LambertConformal {
        nx,
        ny,
        first_latitude,
        first_longitude,
        true_scale_latitude: 45.0,
        orientation_longitude: -10.0,
        dx_metres: spacing,
        dy_metres: spacing,
        projection_centre_flag: 0,
        resolution_flags: 0x08,
        scanning_mode: 0x40,
        first_standard_parallel: 35.0,
        second_standard_parallel: 55.0,
        south_pole_latitude: -90.0,
        south_pole_longitude: 0.0,
        earth: Earth { shape: 6, radius: None, major_axis: None, minor_axis: None },
    });
    let mut height = Vec::new();
    for j in 0..ny {
        for i in 0..nx {
            let (lat, lon) = projection.inverse(x0 + spacing * i as f64, y0 + spacing * j as f64);
            let (phi, lambda) = (lat.to_radians(), lon.to_radians());
            height.push((5570.0 - 900.0 * phi.sin() + 360.0 * phi.cos() * (3.0 * lambda).sin()) as f32);
        }
    }
    let u: Vec<f32> = (0..nx * ny).map(|k| 12.0 + k as f32 / 1000.0).collect();
    let v: Vec<f32> = (0..nx * ny).map(|k| -3.0 + k as f32 / 2000.0).collect();
    let messages: Vec<Message> = [(3u8, 5u8, &height), (2, 2, &u), (2, 3, &v)]
        .into_iter()
        .map(|(category, number, values)| Message {
            discipline: 0,
            category,
            number,
            reference_time,
            forecast_hours: 0,
            level: Level::Isobaric(50_000.0),
            grid: &lambert,
            values,
            bits: 24,
        })
        .collect();
    if let Err(e) = write_file(&directory.join("lambert-isobaric.grib2"), &messages) {
        eprintln!("{e}");
        std::process::exit(1);
    }
}
