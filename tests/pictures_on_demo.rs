//! Pictures of the demo case against reference images kept in
//! tests/reference/, compared by pixel statistics with a tolerance (a
//! regression is caught without freezing every pixel: fonts' anti-aliasing
//! or a contour label moving by a pixel must not fail the test, a missing
//! layer, a wrong palette or an empty map must). Regenerate deliberately
//! with BLESS=1 and look at the new images before committing them.

use std::path::PathBuf;
use std::sync::Arc;

use baroc::diagnostics::{Case, Layer, ThicknessRoute};
use baroc::io::{Dataset, Selection};
use baroc::render::FigureSize;

/// Luminance of 16 x 16 blocks of an RGB(A) PNG, 0..255, and the image size.
fn blocks(png_bytes: &[u8]) -> (u32, u32, Vec<f64>) {
    let decoder = png::Decoder::new(std::io::Cursor::new(png_bytes));
    let mut reader = decoder.read_info().expect("a PNG");
    let mut buffer = vec![0; reader.output_buffer_size().expect("size")];
    let info = reader.next_frame(&mut buffer).expect("a frame");
    let channels = info.color_type.samples();
    let (w, h) = (info.width as usize, info.height as usize);
    let mut sums = vec![0.0f64; 256];
    let mut counts = vec![0usize; 256];
    for y in 0..h {
        for x in 0..w {
            let p = &buffer[(y * w + x) * channels..];
            // Rec. 601 luma weights (ITU-R BT.601).
            let luma = 0.299 * p[0] as f64 + 0.587 * p[1.min(channels - 1)] as f64 + 0.114 * p[2.min(channels - 1)] as f64;
            let k = (y * 16 / h) * 16 + x * 16 / w;
            sums[k] += luma;
            counts[k] += 1;
        }
    }
    (info.width, info.height, sums.iter().zip(&counts).map(|(s, c)| s / (*c).max(1) as f64).collect())
}

/// Whether two renders agree within the tolerance. Tolerances (common
/// practice for rendering regressions, no source): block means move by well
/// under a grey level when only anti-aliasing changes; a lost layer or
/// another palette moves many blocks by tens of levels.
fn similar(new_png: &[u8], reference_png: &[u8]) -> Result<(), String> {
    let (w, h, new) = blocks(new_png);
    let (rw, rh, old) = blocks(reference_png);
    if (w, h) != (rw, rh) {
        return Err(format!("size changed from {rw} x {rh} to {w} x {h}"));
    }
    let differences: Vec<f64> = new.iter().zip(&old).map(|(a, b)| (a - b).abs()).collect();
    let mean = differences.iter().sum::<f64>() / differences.len() as f64;
    let worst = differences.iter().cloned().fold(0.0, f64::max);
    if mean < 2.0 && worst < 25.0 {
        Ok(())
    } else {
        Err(format!("differs from its reference (mean {mean:.2}, worst block {worst:.1} grey levels)"))
    }
}

fn compare(name: &str, png_bytes: &[u8]) {
    let reference = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/reference").join(format!("{name}.png"));
    if std::env::var_os("BLESS").is_some() || !reference.exists() {
        std::fs::write(&reference, png_bytes).unwrap();
        if std::env::var_os("BLESS").is_none() {
            panic!("no reference image for {name}: wrote {}; look at it, then commit it", reference.display());
        }
        return;
    }
    if let Err(message) = similar(png_bytes, &std::fs::read(&reference).unwrap()) {
        panic!("{name}: {message}");
    }
    let (_, _, new) = blocks(png_bytes);
    // And the picture is not blank: even a line drawing (hodograph,
    // profile) darkens some blocks by tens of grey levels.
    let spread = new.iter().cloned().fold(f64::NEG_INFINITY, f64::max) - new.iter().cloned().fold(f64::INFINITY, f64::min);
    assert!(spread > 15.0, "{name}: almost uniform ({spread:.1})");
}

fn case() -> Case {
    let dir = std::env::temp_dir().join(format!("baroc-pictures-{}", std::process::id()));
    let path = baroc::demo::write(&dir).unwrap();
    Case::new(Arc::new(Dataset::open(&[path]).unwrap())).with_selection(Selection { times: Some(vec![4]), ..Default::default() })
}

#[test]
fn maps_hodograph_profile_and_section_match_their_references() {
    let case = case();
    let layer = Layer::new(100000.0, 50000.0).0;
    let size = FigureSize::new(800, 560);
    let thickness = case.thickness(layer, ThicknessRoute::Temperature).unwrap();
    let thermal = case.thermal_wind(layer, ThicknessRoute::Temperature).unwrap();
    let map = baroc::figures::field_map_on(&thickness, Some(&thermal), &size, Some(&case.dataset), &Default::default()).unwrap();
    compare("thickness-and-thermal-wind", map.binary("image/png").unwrap());
    let winds = baroc::figures::vector_map_on(&case.geostrophic_wind(50000.0).unwrap(), &size, Some(&case.dataset), &Default::default()).unwrap();
    compare("geostrophic-wind-500", winds.binary("image/png").unwrap());
    let hodograph = baroc::figures::hodograph(&case, 51.5, -31.0, &FigureSize::new(560, 560)).unwrap();
    compare("hodograph-port-tallowmere", hodograph.binary("image/png").unwrap());
    let t = case.field("temperature").unwrap();
    let profile = baroc::figures::profile(&[&t], 51.5, -31.0, &FigureSize::new(480, 560)).unwrap();
    compare("profile-port-tallowmere", profile.binary("image/png").unwrap());
    let u = case.field("eastward_wind").unwrap();
    let v = case.field("northward_wind").unwrap();
    let wind = baroc::grid::VectorField::new(u, v).unwrap();
    let section = baroc::figures::section(&t, Some(&wind), (40.0, -40.0), (64.0, -22.0), &FigureSize::new(800, 480)).unwrap();
    compare("section-across-the-front", section.binary("image/png").unwrap());
    // Turning on the cyclic scale with weak-wind areas hatched, and a signed
    // field (advection) with its neutral band.
    let turning = case.turning(layer).unwrap();
    let turning_map = baroc::figures::field_map_with(&turning, None, &size).unwrap();
    compare("turning-1000-500", turning_map.binary("image/png").unwrap());
    let advection = case.layer_temperature_advection(layer).unwrap();
    let advection_map = baroc::figures::field_map_with(&advection, None, &size).unwrap();
    compare("advection-1000-500", advection_map.binary("image/png").unwrap());
    // Winds shaded in knots: the barb key and the colour bar share the unit.
    let options = baroc::figures::MapOptions { speed_unit: Some("kt".into()), ..Default::default() };
    let knots = baroc::figures::vector_map_on(&case.geostrophic_wind(50000.0).unwrap(), &size, Some(&case.dataset), &options).unwrap();
    compare("geostrophic-wind-500-knots", knots.binary("image/png").unwrap());
    // The SVG of the map is valid XML and small (contour polygons, not pixels).
    let svg = map.text("image/svg+xml").unwrap();
    assert!(roxmltree::Document::parse(svg).is_ok());
    assert!(svg.len() < 2_000_000, "{} bytes", svg.len());
}

#[test]
fn the_comparison_catches_a_changed_picture() {
    // The tolerance must not be so loose that another picture of the same
    // size passes: the geostrophic-wind map is not the thickness map.
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/reference");
    let thickness = std::fs::read(dir.join("thickness-and-thermal-wind.png")).unwrap();
    let winds = std::fs::read(dir.join("geostrophic-wind-500.png")).unwrap();
    assert!(similar(&thickness, &thickness).is_ok());
    assert!(similar(&winds, &thickness).is_err());
}
