//! Graticules of maps drawn in a projection's own plane: meridians and
//! parallels as polylines in projection coordinates, each with its label.
//!
//! The lines are computed by projecting latitude-longitude polylines
//! point by point (a meridian is a line of constant longitude sampled along
//! latitude, a parallel one of constant latitude sampled along longitude),
//! so they are curved where the projection curves them: parallels are arcs
//! about the pole on a Lambert conformal or polar stereographic grid, and
//! meridians converge towards it. The projection is given as a function
//! (latitude, longitude in degrees) -> (x, y), so this module knows nothing
//! of projections' formulas; clipping to the frame and placing labels is
//! the map's work (`render::map`).

/// Which family a graticule line belongs to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum GraticuleKind {
    /// A line of constant longitude.
    Meridian,
    /// A line of constant latitude.
    Parallel,
}

/// One meridian or parallel in projection coordinates.
#[derive(Debug, Clone, PartialEq)]
pub struct GraticuleLine {
    pub kind: GraticuleKind,
    /// Its longitude (meridian) or latitude (parallel), degrees.
    pub value: f64,
    /// Its label as a chart shows it ("30°N", "10°W").
    pub label: String,
    /// Runs of points (x, y); a run breaks where the projection is cut.
    pub runs: Vec<Vec<(f64, f64)>>,
}

/// Graticule step in degrees giving about `target` lines over `span`
/// (round values a chart reader expects: 1, 2, 5, 10, 15... degrees).
pub fn graticule_step(span: f64, target: f64) -> f64 {
    const STEPS: [f64; 13] = [0.25, 0.5, 1.0, 2.0, 2.5, 5.0, 10.0, 15.0, 20.0, 30.0, 45.0, 60.0, 90.0];
    let raw = span / target;
    STEPS.iter().copied().find(|&s| s >= raw).unwrap_or(90.0)
}

/// Brings a longitude within 180 degrees of `reference`.
fn near(longitude: f64, reference: f64) -> f64 {
    reference + (longitude - reference + 540.0).rem_euclid(360.0) - 180.0
}

/// The graticule of a map whose grid points have the given true latitudes
/// and longitudes (degrees, any order) and whose frame is the box
/// `frame` = (x_min, x_max, y_min, y_max) in projection coordinates.
/// Spacing is chosen from the points' extent (about five parallels and six
/// meridians); a frame holding a pole gets meridians all round it.
/// Lines are returned whole (they reach a step beyond the points' extent),
/// to be clipped by whoever draws them.
pub fn graticule(latitudes: &[f64], longitudes: &[f64], frame: (f64, f64, f64, f64), forward: &dyn Fn(f64, f64) -> (f64, f64)) -> Vec<GraticuleLine> {
    let finite: Vec<(f64, f64)> = latitudes.iter().zip(longitudes).filter(|(a, b)| a.is_finite() && b.is_finite()).map(|(a, b)| (*a, *b)).collect();
    if finite.is_empty() {
        return Vec::new();
    }
    let (x0, x1, y0, y1) = frame;
    let inside = |(x, y): (f64, f64)| x.is_finite() && y.is_finite() && x >= x0 && x <= x1 && y >= y0 && y <= y1;
    let north_pole = inside(forward(90.0, 0.0));
    let south_pole = inside(forward(-90.0, 0.0));
    // Longitudes unwrapped about the middle point's, so a grid across the
    // date line has one contiguous range.
    let reference = finite[finite.len() / 2].1;
    let (mut south, mut north, mut west, mut east) = (f64::INFINITY, f64::NEG_INFINITY, f64::INFINITY, f64::NEG_INFINITY);
    for &(lat, lon) in &finite {
        let lon = near(lon, reference);
        south = south.min(lat);
        north = north.max(lat);
        west = west.min(lon);
        east = east.max(lon);
    }
    if north_pole {
        north = 90.0;
    }
    if south_pole {
        south = -90.0;
    }
    let around_pole = north_pole || south_pole;
    if around_pole {
        west = reference - 180.0;
        east = reference + 180.0;
    }
    let lat_step = graticule_step(north - south, 5.0);
    // All round a pole the meridians fan out: twelve (every 30 degrees)
    // read better than six.
    let lon_step = graticule_step(east - west, if around_pole { 12.0 } else { 6.0 });
    // Lines reach one step beyond the points, short of the poles (where
    // meridians meet and a conic projection may run to infinity).
    let lat_from = (south - lat_step).max(-89.99);
    let lat_to = (north + lat_step).min(89.99);
    let (lon_from, lon_to) = if around_pole { (west, east) } else { (west - lon_step, east + lon_step) };
    let diagonal = (x1 - x0).hypot(y1 - y0);
    // Fine enough that a chord departs from the arc by well under a pixel
    // (about 300 points along the longest line).
    let samples = |from: f64, to: f64| -> Vec<f64> {
        let n = (((to - from) / 0.05).ceil() as usize).clamp(2, 2000);
        (0..=n).map(|k| from + (to - from) * k as f64 / n as f64).collect()
    };
    let runs_of = |points: Vec<(f64, f64)>| -> Vec<Vec<(f64, f64)>> {
        // Break where a point is not finite or a step jumps across a cut of
        // the projection (far longer than the frame could show).
        let mut runs: Vec<Vec<(f64, f64)>> = Vec::new();
        let mut current: Vec<(f64, f64)> = Vec::new();
        for p in points {
            let ok = p.0.is_finite() && p.1.is_finite();
            let jump = current.last().is_some_and(|q: &(f64, f64)| (p.0 - q.0).hypot(p.1 - q.1) > 0.25 * diagonal.max(1e-9));
            if !ok || jump {
                if current.len() > 1 {
                    runs.push(std::mem::take(&mut current));
                } else {
                    current.clear();
                }
            }
            if ok {
                current.push(p);
            }
        }
        if current.len() > 1 {
            runs.push(current);
        }
        runs
    };
    let mut lines = Vec::new();
    let latitudes_along = samples(lat_from, lat_to);
    let mut meridians = crate::render::colour::multiples_within(lon_from, lon_to, lon_step);
    if around_pole {
        // The circle once: drop a meridian equal to the first plus 360.
        meridians.retain(|&m| m < lon_from + 360.0 - 1e-9);
    }
    for lon in meridians {
        let runs = runs_of(latitudes_along.iter().map(|&lat| forward(lat, lon)).collect());
        lines.push(GraticuleLine { kind: GraticuleKind::Meridian, value: lon, label: super::map::lon_label(lon, lon_step), runs });
    }
    let longitudes_along = samples(lon_from, lon_to);
    for lat in crate::render::colour::multiples_within(lat_from, lat_to, lat_step) {
        if lat.abs() >= 90.0 {
            continue;
        }
        let runs = runs_of(longitudes_along.iter().map(|&lon| forward(lat, lon)).collect());
        lines.push(GraticuleLine { kind: GraticuleKind::Parallel, value: lat, label: super::map::lat_label(lat, lat_step), runs });
    }
    lines.retain(|l| !l.runs.is_empty());
    lines
}

/// A polyline with the points it does not need to keep its shape within
/// `tolerance`: every point dropped lies within `tolerance` of the line that
/// remains, and the first and last points are kept exactly (a graticule
/// line's ends are where it meets the frame and is labelled). The lines are
/// sampled finely in degrees so that curves stay smooth, which leaves many
/// points a fraction of a pixel apart, or on a straight run, once drawn;
/// with `tolerance` a fraction of a pixel the picture is the same and the
/// SVG far smaller. The Ramer-Douglas-Peucker simplification (Ramer 1972;
/// Douglas and Peucker 1973): keep the point farthest from the chord of a
/// run when it is farther than `tolerance`, and split the run there.
pub fn simplify_polyline(points: &[(f64, f64)], tolerance: f64) -> Vec<(f64, f64)> {
    let n = points.len();
    if n <= 2 || !(tolerance > 0.0) {
        return points.to_vec();
    }
    let mut keep = vec![false; n];
    keep[0] = true;
    keep[n - 1] = true;
    let mut runs = vec![(0usize, n - 1)];
    while let Some((first, last)) = runs.pop() {
        if last <= first + 1 {
            continue;
        }
        let (a, b) = (points[first], points[last]);
        let (dx, dy) = (b.0 - a.0, b.1 - a.1);
        let length = dx.hypot(dy);
        // Distance of a point from the chord (from the end point where the
        // chord has no length: a run that comes back on itself).
        let distance = |p: (f64, f64)| if length > 0.0 { ((p.0 - a.0) * dy - (p.1 - a.1) * dx).abs() / length } else { (p.0 - a.0).hypot(p.1 - a.1) };
        let (farthest, d) = (first + 1..last).map(|k| (k, distance(points[k]))).fold((first, -1.0), |m, c| if c.1 > m.1 { c } else { m });
        // A point that is not finite is kept (never silently moved).
        if d > tolerance || d.is_nan() {
            keep[farthest] = true;
            runs.push((first, farthest));
            runs.push((farthest, last));
        }
    }
    points.iter().zip(&keep).filter(|(_, k)| **k).map(|(p, _)| *p).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Distance from `p` to the segment a-b (plane geometry).
    fn to_segment(p: (f64, f64), a: (f64, f64), b: (f64, f64)) -> f64 {
        let (dx, dy) = (b.0 - a.0, b.1 - a.1);
        let l2 = dx * dx + dy * dy;
        let t = if l2 > 0.0 { (((p.0 - a.0) * dx + (p.1 - a.1) * dy) / l2).clamp(0.0, 1.0) } else { 0.0 };
        (p.0 - a.0 - t * dx).hypot(p.1 - a.1 - t * dy)
    }

    #[test]
    fn simplified_lines_keep_their_ends_and_stay_within_the_tolerance() {
        // A Lambert conformal graticule (Snyder 1987, eqs. 15-1 to 15-4,
        // spherical, one standard parallel at 45 N, so n = sin 45): the 50 N
        // parallel is an arc of a circle about the cone's apex, the 10 W
        // meridian a straight line through it. Drawn on a map about 800
        // pixels across (scale: 800 px per 0.5 units of the unit sphere).
        let n = 45f64.to_radians().sin();
        let f = 45f64.to_radians().cos() * (std::f64::consts::FRAC_PI_4 + 45f64.to_radians() / 2.0).tan().powf(n) / n;
        let forward = |lat: f64, lon: f64| {
            let rho = f / (std::f64::consts::FRAC_PI_4 + lat.to_radians() / 2.0).tan().powf(n);
            let theta = n * lon.to_radians();
            (1600.0 * rho * theta.sin(), -1600.0 * rho * theta.cos())
        };
        let parallel: Vec<(f64, f64)> = (0..=600).map(|k| forward(50.0, -30.0 + 0.05 * k as f64)).collect();
        let meridian: Vec<(f64, f64)> = (0..=600).map(|k| forward(35.0 + 0.05 * k as f64, -10.0)).collect();
        for (line, at_most) in [(&parallel, 120), (&meridian, 2)] {
            let simple = simplify_polyline(line, 0.25);
            // The ends are kept exactly: that is where a line meets the
            // frame and carries its label.
            assert_eq!(simple.first(), line.first());
            assert_eq!(simple.last(), line.last());
            // Far fewer points: a straight meridian needs its two ends only.
            assert!(simple.len() <= at_most, "{} points kept of {}", simple.len(), line.len());
            // Every original point within a quarter pixel of what remains.
            for &p in line.iter() {
                let d = simple.windows(2).map(|w| to_segment(p, w[0], w[1])).fold(f64::INFINITY, f64::min);
                assert!(d <= 0.25 + 1e-9, "a point {d} px from the simplified line");
            }
        }
        // Duplicates and runs back on themselves keep their turning point.
        let back = vec![(0.0, 0.0), (0.0, 0.0), (10.0, 0.0), (0.0, 0.0)];
        assert_eq!(simplify_polyline(&back, 0.25), vec![(0.0, 0.0), (10.0, 0.0), (0.0, 0.0)]);
    }

    /// A plain equirectangular "projection" (x = lon, y = lat) shows the
    /// lines straight, at the chosen multiples.
    #[test]
    fn lines_at_round_multiples_covering_the_extent() {
        let lats: Vec<f64> = (0..=20).map(|k| 40.0 + k as f64).collect();
        let lons: Vec<f64> = (0..=20).map(|k| -20.0 + 1.5 * k as f64).collect();
        let (mut la, mut lo) = (Vec::new(), Vec::new());
        for &a in &lats {
            for &b in &lons {
                la.push(a);
                lo.push(b);
            }
        }
        let lines = graticule(&la, &lo, (-20.0, 10.0, 40.0, 60.0), &|lat, lon| (lon, lat));
        let parallels: Vec<f64> = lines.iter().filter(|l| l.kind == GraticuleKind::Parallel).map(|l| l.value).collect();
        let meridians: Vec<f64> = lines.iter().filter(|l| l.kind == GraticuleKind::Meridian).map(|l| l.value).collect();
        // 20 degrees of latitude / 5 lines -> 5-degree step; 30 degrees of
        // longitude / 6 -> 5 degrees.
        assert!(parallels.contains(&40.0) && parallels.contains(&60.0) && parallels.iter().all(|v| v % 5.0 == 0.0), "{parallels:?}");
        assert!(meridians.contains(&-20.0) && meridians.contains(&10.0) && meridians.iter().all(|v| v % 5.0 == 0.0), "{meridians:?}");
        let label = lines.iter().find(|l| l.kind == GraticuleKind::Meridian && l.value == -10.0).unwrap();
        assert_eq!(label.label, "10°W");
        // A parallel is straight at its latitude here.
        let p45 = lines.iter().find(|l| l.kind == GraticuleKind::Parallel && l.value == 45.0).unwrap();
        assert!(p45.runs.iter().flatten().all(|p| (p.1 - 45.0).abs() < 1e-12));
    }

    #[test]
    fn a_frame_holding_the_pole_gets_meridians_all_round() {
        // Polar stereographic of the unit sphere, north pole (Snyder 1987,
        // eqs. 21-5 to 21-7, k0 = 1): rho = 2 tan(45 - lat/2).
        let forward = |lat: f64, lon: f64| {
            let rho = 2.0 * (45.0 - lat / 2.0f64).to_radians().tan();
            (rho * lon.to_radians().sin(), -rho * lon.to_radians().cos())
        };
        let (mut la, mut lo) = (Vec::new(), Vec::new());
        for j in 0..21 {
            for i in 0..21 {
                let (x, y) = (-0.5 + 0.05 * i as f64, -0.5 + 0.05 * j as f64);
                let rho = x.hypot(y);
                la.push(90.0 - 2.0 * (rho / 2.0).atan().to_degrees());
                lo.push(x.atan2(-y).to_degrees());
            }
        }
        let lines = graticule(&la, &lo, (-0.5, 0.5, -0.5, 0.5), &forward);
        let meridians: Vec<f64> = lines.iter().filter(|l| l.kind == GraticuleKind::Meridian).map(|l| l.value).collect();
        // The whole circle, once: 360 / step meridians.
        let step = 360.0 / meridians.len() as f64;
        assert!([30.0, 45.0, 60.0].contains(&step), "{meridians:?}");
        // Parallels are circles about the pole: every point of one is at the
        // same distance from the origin.
        for l in lines.iter().filter(|l| l.kind == GraticuleKind::Parallel) {
            let r = 2.0 * (45.0 - l.value / 2.0).to_radians().tan();
            assert!(l.runs.iter().flatten().all(|p| (p.0.hypot(p.1) - r).abs() < 1e-9));
        }
    }
}
