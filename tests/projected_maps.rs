//! Maps of fields on a Lambert conformal grid, drawn in the grid's own
//! projection: the picture is produced, its graticule is labelled where the
//! meridians and parallels meet the frame (positions from the projection's
//! inverse, Snyder 1987), and wind barbs lie along the grid's directions.

use std::sync::Arc;

use baroc::figures;
use baroc::grid::{Field, Grid, VectorField};
use baroc::projection::{LambertConformal, ProjectedGrid, Projection};
use baroc::render::map::{render_map, MapSpec, VectorLayer};
use baroc::render::FigureSize;

const RADIUS: f64 = 6_371_229.0;
const G: f64 = 9.80665; // standard gravity (CGPM 1901)
const OMEGA: f64 = 7.292115e-5; // earth's rotation rate (IERS)
const CENTRAL_MERIDIAN: f64 = -10.0;

/// Standard parallels 35 and 55 N, central meridian 10 W, origin 45 N.
fn lambert() -> LambertConformal {
    LambertConformal::new((35.0, 55.0), CENTRAL_MERIDIAN, 45.0, 0.0, 0.0, RADIUS).unwrap()
}

fn grid(nx: usize, ny: usize, spacing: f64) -> Arc<Grid> {
    let x = (0..nx).map(|i| (i as f64 - (nx - 1) as f64 / 2.0) * spacing).collect();
    let y = (0..ny).map(|j| (j as f64 - (ny - 1) as f64 / 2.0) * spacing).collect();
    Arc::new(Grid::projected(ProjectedGrid::new(Projection::LambertConformal(lambert()), x, y)))
}

/// Analytic 500 hPa height (m): a jet with a wave (invented for the test).
fn height(lat: f64, lon: f64) -> f64 {
    let (phi, lambda) = (lat.to_radians(), lon.to_radians());
    5570.0 - 900.0 * phi.sin() + 360.0 * phi.cos() * (3.0 * lambda).sin()
}

/// Its geostrophic wind by hand: u_g = -(g / f a) dZ/dphi,
/// v_g = (g / f a cos phi) dZ/dlambda, f = 2 Omega sin phi (field guide).
fn geostrophic(lat: f64, lon: f64) -> (f64, f64) {
    let (phi, lambda) = (lat.to_radians(), lon.to_radians());
    let dz_dphi = -900.0 * phi.cos() - 360.0 * phi.sin() * (3.0 * lambda).sin();
    let dz_dlambda = 360.0 * phi.cos() * 3.0 * (3.0 * lambda).cos();
    let f = 2.0 * OMEGA * phi.sin();
    (-G / (f * RADIUS) * dz_dphi, G / (f * RADIUS * phi.cos()) * dz_dlambda)
}

fn field_of(grid: &Arc<Grid>, name: &str, units: &str, value: impl Fn(f64, f64) -> f64) -> Field {
    let p = grid.projection.clone().unwrap();
    let (ny, nx) = p.shape();
    let data = ndarray::Array4::from_shape_fn((1, 1, ny, nx), |(_, _, j, i)| value(p.latitude[j * nx + i], p.longitude[j * nx + i]) as f32);
    Field::new(name, units, data, None, Some(vec![50_000.0]), grid.clone()).unwrap()
}

fn check_dir() -> std::path::PathBuf {
    let dir = std::env::temp_dir().join("render-check");
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// The texts of an SVG's <text> elements.
fn texts(svg: &str) -> Vec<String> {
    let doc = roxmltree::Document::parse(svg).expect("well-formed SVG");
    // A text node may hold its string more than once (one per line of the
    // writer's output): keep each distinct trimmed line.
    let mut out: Vec<String> = Vec::new();
    for n in doc.descendants().filter(|n| n.has_tag_name("text")) {
        for t in n.descendants().filter_map(|t| t.text()) {
            for line in t.lines().map(str::trim).filter(|l| !l.is_empty()) {
                if !out.iter().any(|o| o == line) {
                    out.push(line.to_string());
                }
            }
        }
    }
    out
}

/// Two-point strokes in the map ink (#141414) of an SVG (barb staffs and feathers) as
/// ((x0, y0), (x1, y1)) in drawing order.
fn black_segments(svg: &str) -> Vec<((f64, f64), (f64, f64))> {
    let doc = roxmltree::Document::parse(svg).unwrap();
    let mut out = Vec::new();
    for n in doc.descendants().filter(|n| n.has_tag_name("polyline")) {
        if n.attribute("stroke") != Some("#141414") {
            continue;
        }
        let points: Vec<(f64, f64)> = n
            .attribute("points")
            .unwrap_or("")
            .split_whitespace()
            .filter_map(|p| p.split_once(',').and_then(|(x, y)| Some((x.parse().ok()?, y.parse().ok()?))))
            .collect();
        if points.len() == 2 {
            out.push((points[0], points[1]));
        }
    }
    out
}

#[test]
fn a_map_of_a_lambert_field_is_drawn_with_a_labelled_graticule() {
    let grid = grid(81, 65, 25_000.0);
    let z = field_of(&grid, "geopotential_height", "m", height).with_standard_name(Some("geopotential_height")).with_long_name("geopotential height");
    let u = field_of(&grid, "eastward_wind", "m s-1", |a, b| geostrophic(a, b).0).with_long_name("eastward geostrophic wind");
    let v = field_of(&grid, "northward_wind", "m s-1", |a, b| geostrophic(a, b).1).with_long_name("northward geostrophic wind");
    let wind = VectorField::new(u, v).unwrap();
    let bundle = figures::field_map_with(&z, None, &FigureSize::default()).expect("a projected map is drawn, not refused");
    let svg = bundle.text("image/svg+xml").unwrap();
    std::fs::write(check_dir().join("map-lambert-height.png"), bundle.binary("image/png").unwrap()).unwrap();
    std::fs::write(check_dir().join("map-lambert-height.svg"), svg).unwrap();
    let description = bundle.plain_text();
    assert!(description.contains("Lambert conformal") && description.contains("own projection"), "{description}");

    // Which lines must be labelled, from the projection's inverse alone:
    // a parallel whose latitude lies between the latitudes of the frame's
    // left edge at its two ends crosses that edge (parallels are monotone
    // along a meridian-like edge here); a meridian whose longitude lies
    // between those of the bottom edge's ends crosses the bottom edge.
    let p = grid.projection.clone().unwrap();
    let (ny, nx) = p.shape();
    let left = (p.latitude[0], p.latitude[(ny - 1) * nx]);
    let bottom = (p.longitude[0], p.longitude[nx - 1]);
    let frame = figures::projected_frame(&grid).unwrap();
    let texts = texts(svg);
    let mut checked = 0;
    for line in &frame.graticule {
        let must = match line.kind {
            baroc::render::graticule::GraticuleKind::Parallel => line.value > left.0 + 0.5 && line.value < left.1 - 0.5,
            baroc::render::graticule::GraticuleKind::Meridian => line.value > bottom.0 + 0.5 && line.value < bottom.1 - 0.5,
        };
        if must {
            checked += 1;
            assert!(texts.iter().any(|t| t == &line.label), "label {} missing; texts: {texts:?}", line.label);
        }
    }
    assert!(checked >= 4, "only {checked} lines cross the left and bottom edges");
    // Graticule lines are drawn as curves clipped to the frame: their grey
    // stroke appears once per visible run, at least once per line checked.
    let grey = svg.matches("stroke=\"#282828\"").count();
    assert!(grey >= checked, "{grey} graticule strokes for {checked} labelled lines");
    // Labels read as degrees with a hemisphere letter, as charts do.
    assert!(texts.iter().any(|t| t.ends_with("°N")) && texts.iter().any(|t| t.ends_with("°W")), "{texts:?}");

    let winds = figures::vector_map_with(&wind, &FigureSize::default()).expect("a wind map on a Lambert grid");
    std::fs::write(check_dir().join("map-lambert-wind.png"), winds.binary("image/png").unwrap()).unwrap();
    assert!(winds.plain_text().contains("barbs"), "{}", winds.plain_text());
}

#[test]
fn a_westerly_in_grid_directions_turns_by_the_cone_constant_times_the_longitude_offset() {
    // Snyder (1987), USGS PP 1395, eq. (15-1): theta = n (lambda - lambda0)
    // is the angle between a meridian and the grid's y axis, so the local
    // east (along the parallel) is the x axis turned by theta,
    // counterclockwise east of the central meridian.
    let grid = grid(81, 65, 25_000.0);
    let p = grid.projection.clone().unwrap();
    let n = lambert().cone_constant;
    let (ny, nx) = p.shape();
    let east = ndarray::Array2::<f32>::from_elem((ny, nx), 20.0);
    let north = ndarray::Array2::<f32>::zeros((ny, nx));
    let (along_x, along_y) = figures::in_grid_directions(&grid, east.view(), north.view());
    let mut far = 0.0f64;
    for (j, i) in [(10, 75), (32, 5), (60, 70), (3, 40)] {
        let k = j * nx + i;
        let offset = p.longitude[k] - CENTRAL_MERIDIAN;
        far = far.max(offset.abs());
        let angle = (along_y[[j, i]] as f64).atan2(along_x[[j, i]] as f64);
        assert!((angle - n * offset.to_radians()).abs() < 1e-5, "point ({j}, {i}): {angle} vs {}", n * offset.to_radians());
        assert!(((along_x[[j, i]] as f64).hypot(along_y[[j, i]] as f64) - 20.0).abs() < 1e-4);
    }
    assert!(far > 10.0, "the check reaches {far} degrees from the central meridian");
}

#[test]
fn barbs_on_a_lambert_map_lie_along_the_parallels() {
    // A coarse grid (5 x 4 points, 750 km apart) so that every interior
    // point gets a barb; a uniform westerly of 25 m s-1 (about 49 kt).
    // Each staff runs from its station towards the west along the parallel:
    // on the map that is the grid's -x axis turned by n (lambda - lambda0)
    // (Snyder 1987, eq. 15-1), i.e. on screen (y down) the direction
    // (-cos a, +sin a).
    let grid = grid(5, 4, 750_000.0);
    let p = grid.projection.clone().unwrap();
    let n = lambert().cone_constant;
    let (ny, nx) = p.shape();
    let east = ndarray::Array2::<f32>::from_elem((ny, nx), 25.0);
    let north = ndarray::Array2::<f32>::zeros((ny, nx));
    let (along_x, along_y) = figures::in_grid_directions(&grid, east.view(), north.view());
    let spec = MapSpec::new("uniform westerly", &grid.latitudes, &grid.longitudes)
        .vectors(VectorLayer::barbs(along_x.view(), along_y.view(), "wind").spacing(120.0))
        .projected(figures::projected_frame(&grid).unwrap());
    let bundle = render_map(&spec, &FigureSize::new(900, 700)).unwrap();
    let svg = bundle.text("image/svg+xml").unwrap();
    std::fs::write(check_dir().join("map-lambert-westerly.svg"), svg).unwrap();
    // Staffs are the long strokes (0.6 of the spacing, 72 px); feathers are
    // under half that, and the key's example barb is 24 px long.
    let mut staffs: Vec<((f64, f64), (f64, f64))> = black_segments(svg).into_iter().filter(|(a, b)| (b.0 - a.0).hypot(b.1 - a.1) > 60.0).collect();
    staffs.sort_by(|a, b| a.0 .1.total_cmp(&b.0 .1));
    // Interior points: rows 1..=2 (y ascending is up the screen), columns 1..=3.
    assert_eq!(staffs.len(), 6, "{staffs:?}");
    let mut expected = Vec::new();
    for j in [2usize, 1] {
        // Screen rows top to bottom: the higher y first.
        let mut row: Vec<f64> = (1..=3).map(|i| n * (p.longitude[j * nx + i] - CENTRAL_MERIDIAN).to_radians()).collect();
        row.sort_by(|a, b| a.total_cmp(b));
        expected.push(row);
    }
    for (r, chunk) in staffs.chunks(3).enumerate() {
        let mut chunk = chunk.to_vec();
        chunk.sort_by(|a, b| a.0 .0.total_cmp(&b.0 .0));
        for (c, (station, tip)) in chunk.iter().enumerate() {
            let (dx, dy) = (tip.0 - station.0, tip.1 - station.1);
            // Screen direction (-cos a, sin a): a = atan2(dy, -dx).
            let a = dy.atan2(-dx);
            let want = expected[r][c];
            // Points are rounded to whole pixels in the SVG: 1 px in 72.
            assert!((a - want).abs() < 0.02, "row {r} column {c}: staff at {:.2} degrees, expected {:.2}", a.to_degrees(), want.to_degrees());
        }
    }
    // East of the central meridian the parallel rises to the east, so the
    // westward staff dips below its station; west of it, the opposite.
    assert!(expected.iter().flatten().any(|a| a.to_degrees() > 3.0) && expected.iter().flatten().any(|a| a.to_degrees() < -3.0));
}

#[test]
fn a_polar_stereographic_map_around_the_pole_has_meridians_all_round() {
    // North polar stereographic, true at 60 N, vertical longitude 45 W; a
    // square of 6000 km about the pole. Meridians meet at the pole, so the
    // graticule must hold the whole circle of them.
    use baroc::projection::{PolarStereographic, Pole};
    let projection = Projection::PolarStereographic(PolarStereographic::with_standard_parallel(Pole::North, -45.0, 60.0, 0.0, 0.0, RADIUS).unwrap());
    let x: Vec<f64> = (0..61).map(|i| -3.0e6 + 1.0e5 * i as f64).collect();
    let grid = Arc::new(Grid::projected(ProjectedGrid::new(projection, x.clone(), x)));
    let z = field_of(&grid, "geopotential_height", "m", height).with_standard_name(Some("geopotential_height"));
    let bundle = figures::field_map_with(&z, None, &FigureSize::default()).unwrap();
    std::fs::write(check_dir().join("map-polar.png"), bundle.binary("image/png").unwrap()).unwrap();
    let frame = figures::projected_frame(&grid).unwrap();
    let meridians: Vec<f64> = frame.graticule.iter().filter(|l| l.kind == baroc::render::graticule::GraticuleKind::Meridian).map(|l| l.value).collect();
    let step = 360.0 / meridians.len() as f64;
    assert!(meridians.windows(2).all(|w| (w[1] - w[0] - step).abs() < 1e-9), "{meridians:?}");
    assert!(bundle.plain_text().contains("polar stereographic"));
}

#[test]
fn a_rotated_pole_map_is_drawn_with_its_true_graticule() {
    // Rotated pole at 40 N 170 W (CF rotated_latitude_longitude): the
    // rotated origin lies at 50 N 10 E, so a grid about it shows Europe-like
    // latitudes; its meridians and parallels are curves on the rotated grid.
    use baroc::projection::RotatedPole;
    let projection = Projection::RotatedPole(RotatedPole::new(40.0, -170.0, 0.0, RADIUS).unwrap());
    let x: Vec<f64> = (0..61).map(|i| -15.0 + 0.5 * i as f64).collect();
    let y: Vec<f64> = (0..41).map(|j| -10.0 + 0.5 * j as f64).collect();
    let grid = Arc::new(Grid::projected(ProjectedGrid::new(projection, x, y)));
    let z = field_of(&grid, "geopotential_height", "m", height).with_standard_name(Some("geopotential_height"));
    let bundle = figures::field_map_with(&z, None, &FigureSize::default()).unwrap();
    std::fs::write(check_dir().join("map-rotated.png"), bundle.binary("image/png").unwrap()).unwrap();
    let description = bundle.plain_text();
    assert!(description.contains("rotated-pole") && description.contains("degrees"), "{description}");
    let texts = texts(bundle.text("image/svg+xml").unwrap());
    assert!(texts.iter().any(|t| t == "50°N"), "{texts:?}");
}

/// The points of the SVG's polylines stroked `colour`, one list per polyline.
fn polylines(svg: &str, colour: &str) -> Vec<Vec<(f64, f64)>> {
    let doc = roxmltree::Document::parse(svg).unwrap();
    doc.descendants()
        .filter(|n| n.has_tag_name("polyline") && n.attribute("stroke") == Some(colour))
        .map(|n| n.attribute("points").unwrap_or("").split_whitespace().filter_map(|p| p.split_once(',').and_then(|(x, y)| Some((x.parse().ok()?, y.parse().ok()?)))).collect())
        .collect()
}

#[test]
fn graticule_lines_are_drawn_with_few_points_and_still_reach_their_labels() {
    // The graticule is sampled every 0.05 degrees (hundreds of points a
    // line); drawn, points closer to the line than a quarter pixel are
    // dropped (render::graticule::simplify_polyline). Common practice for
    // polylines in vector graphics, no outside source: the check is that
    // the drawn lines hold far fewer points than were sampled, and that
    // every label's tick starts at the end of a drawn line (the ends, where
    // lines meet the frame, are kept exactly).
    let grid = grid(81, 65, 25_000.0);
    let z = field_of(&grid, "geopotential_height", "m", height).with_standard_name(Some("geopotential_height")).with_long_name("geopotential height");
    let bundle = figures::field_map_with(&z, None, &FigureSize::default()).unwrap();
    let svg = bundle.text("image/svg+xml").unwrap();
    let frame = figures::projected_frame(&grid).unwrap();
    let sampled: usize = frame.graticule.iter().flat_map(|l| l.runs.iter()).map(|r| r.len()).sum();
    let lines = polylines(svg, "#282828");
    let drawn: usize = lines.iter().map(|l| l.len()).sum();
    eprintln!("graticule: {sampled} points sampled, {drawn} drawn in {} polylines; SVG {} bytes", lines.len(), svg.len());
    assert!(!lines.is_empty() && drawn * 10 <= sampled, "{drawn} points drawn of {sampled} sampled");
    // Label ticks: short black segments from the map's frame (the first
    // black rectangle) outwards.
    let ends: Vec<(f64, f64)> = lines.iter().flat_map(|l| [l[0], l[l.len() - 1]]).collect();
    let frame_box = polylines(svg, "#141414").into_iter().find(|l| l.len() == 5).expect("the frame");
    let (left, right) = (frame_box.iter().map(|p| p.0).fold(f64::INFINITY, f64::min), frame_box.iter().map(|p| p.0).fold(f64::NEG_INFINITY, f64::max));
    let (top, bottom) = (frame_box.iter().map(|p| p.1).fold(f64::INFINITY, f64::min), frame_box.iter().map(|p| p.1).fold(f64::NEG_INFINITY, f64::max));
    let on_frame = |p: (f64, f64)| {
        let within = p.0 >= left - 0.5 && p.0 <= right + 0.5 && p.1 >= top - 0.5 && p.1 <= bottom + 0.5;
        within && ((p.0 - left).abs() < 0.5 || (p.0 - right).abs() < 0.5 || (p.1 - top).abs() < 0.5 || (p.1 - bottom).abs() < 0.5)
    };
    let ticks: Vec<((f64, f64), (f64, f64))> = black_segments(svg).into_iter().filter(|(a, b)| (b.0 - a.0).hypot(b.1 - a.1) < 10.0 && on_frame(*a)).collect();
    assert!(ticks.len() >= 4, "{} label ticks", ticks.len());
    for (start, _) in ticks {
        assert!(ends.iter().any(|e| (e.0 - start.0).hypot(e.1 - start.1) < 0.01), "a label tick at {start:?} meets no graticule line");
    }
}
