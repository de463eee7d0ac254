//! Wind barbs and arrows: the pure geometry, testable without drawing.
//!
//! Barbs follow the WMO convention for plotted wind (WMO Manual on Codes and
//! the station-model practice of the trade): the staff points from the
//! station towards the direction the wind blows FROM; speed is rounded to
//! the nearest 5 knots and drawn at the staff's outer end as pennants
//! (50 kt), full barbs (10 kt) and one half barb (5 kt); a calm wind
//! (under 2.5 kt) is a circle.
//!
//! Side of the feathers: they point towards low pressure. By Buys Ballot's
//! law, with your back to the wind in the northern hemisphere low pressure
//! is on your left. Looking out along the staff from the station (that is,
//! facing the wind) it is therefore on your right: the feathers are drawn a
//! quarter turn clockwise from the staff direction. Check: a westerly wind
//! in the northern hemisphere (low pressure to the north) has its staff to
//! the west of the station and its feathers pointing north. In the southern
//! hemisphere the side is mirrored (anticlockwise).
//!
//! Unit: 1 knot = 1 international nautical mile (1852 m, exact) per hour,
//! so 1 kt = 1852/3600 m/s.

/// Metres per second in one knot (exact by definition of the nautical mile).
pub const METRES_PER_SECOND_PER_KNOT: f64 = 1852.0 / 3600.0;

/// Hemisphere of a barb, which sets the side its feathers are drawn on.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Hemisphere {
    North,
    South,
}

impl Hemisphere {
    pub fn of_latitude(latitude: f64) -> Self {
        if latitude < 0.0 {
            Hemisphere::South
        } else {
            Hemisphere::North
        }
    }
}

/// How a wind speed is drawn as a barb.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct BarbCounts {
    /// Speed rounded to the nearest 5 kt.
    pub rounded_knots: u32,
    /// 50-kt triangles.
    pub pennants: u32,
    /// 10-kt full barbs.
    pub full_barbs: u32,
    /// 5-kt half barbs (0 or 1).
    pub half_barbs: u32,
}

impl BarbCounts {
    pub fn is_calm(&self) -> bool {
        self.rounded_knots == 0
    }
}

/// Decompose a wind speed in m/s into pennants, full and half barbs.
/// Returns None for a speed that is missing, negative or absurd (over
/// 1000 kt), which is then not drawn.
pub fn barb_decomposition(speed_m_s: f64) -> Option<BarbCounts> {
    if !speed_m_s.is_finite() || speed_m_s < 0.0 {
        return None;
    }
    let knots = speed_m_s / METRES_PER_SECOND_PER_KNOT;
    if knots > 1000.0 {
        return None;
    }
    let fives = (knots / 5.0).round() as u32;
    let rounded_knots = fives * 5;
    let pennants = rounded_knots / 50;
    let rest = rounded_knots % 50;
    Some(BarbCounts {
        rounded_knots,
        pennants,
        full_barbs: rest / 10,
        half_barbs: (rest % 10) / 5,
    })
}

/// Screen point in pixels, y downward.
pub type ScreenPoint = (f64, f64);

/// The strokes and filled triangles that draw one barb.
#[derive(Debug, Clone, PartialEq)]
pub struct BarbShape {
    pub counts: BarbCounts,
    pub station: ScreenPoint,
    /// From the station to the outer end. Empty for calm.
    pub staff: Option<(ScreenPoint, ScreenPoint)>,
    /// Full and half barbs as segments from the staff outward.
    pub feathers: Vec<(ScreenPoint, ScreenPoint)>,
    /// Pennants as triangles.
    pub pennants: Vec<[ScreenPoint; 3]>,
    /// Calm: a circle of this radius around the station.
    pub calm_radius: Option<f64>,
}

/// Geometry of a barb for the wind (u eastward, v northward, m/s) at a
/// station drawn at `station` on a north-up chart, with a staff `length`
/// pixels long.
pub fn barb_shape(
    station: ScreenPoint,
    u: f64,
    v: f64,
    hemisphere: Hemisphere,
    length: f64,
) -> Option<BarbShape> {
    let speed = (u * u + v * v).sqrt();
    let counts = barb_decomposition(speed)?;
    if counts.is_calm() {
        return Some(BarbShape {
            counts,
            station,
            staff: None,
            feathers: Vec::new(),
            pennants: Vec::new(),
            calm_radius: Some(length * 0.15),
        });
    }
    // Direction the wind comes from, in chart axes (x east, y north), then on
    // screen (y down).
    let (fx, fy) = (-u / speed, -v / speed);
    let dir = (fx, -fy);
    // A quarter turn clockwise on the chart is (x, y) -> (y, -x); on screen
    // that is (sx, sy) -> (-sy, sx). Anticlockwise is the opposite.
    let side = match hemisphere {
        Hemisphere::North => (-dir.1, dir.0),
        Hemisphere::South => (dir.1, -dir.0),
    };
    let tip = (station.0 + dir.0 * length, station.1 + dir.1 * length);
    let feather = length * 0.45;
    let spacing = length * 0.15;
    let pennant_base = length * 0.18;
    // Feathers lean towards the outer end, about 60 degrees from the staff.
    let slant = |at: ScreenPoint, reach: f64| {
        (
            at.0 + reach * (0.866 * side.0 + 0.5 * dir.0),
            at.1 + reach * (0.866 * side.1 + 0.5 * dir.1),
        )
    };
    let along = |distance_from_tip: f64| {
        (
            tip.0 - dir.0 * distance_from_tip,
            tip.1 - dir.1 * distance_from_tip,
        )
    };
    let mut position = 0.0;
    let mut pennants = Vec::new();
    for _ in 0..counts.pennants {
        // A pennant is a filled triangle standing on the staff: its base
        // runs along the staff, its apex sits square off the outer corner
        // at the length of a full barb's reach, so it reads as a flag.
        let outer = along(position);
        let inner = along(position + pennant_base);
        let apex = (outer.0 + feather * 0.866 * side.0, outer.1 + feather * 0.866 * side.1);
        pennants.push([outer, apex, inner]);
        position += pennant_base + spacing * 0.35;
    }
    if counts.pennants > 0 {
        position += spacing * 0.3;
    }
    let mut feathers = Vec::new();
    for _ in 0..counts.full_barbs {
        let at = along(position);
        feathers.push((at, slant(at, feather)));
        position += spacing;
    }
    if counts.half_barbs > 0 {
        // A lone half barb sits one spacing in from the end so that it cannot
        // be mistaken for a full barb.
        if counts.pennants == 0 && counts.full_barbs == 0 {
            position = spacing;
        }
        let at = along(position);
        feathers.push((at, slant(at, feather * 0.5)));
    }
    Some(BarbShape {
        counts,
        station,
        staff: Some((station, tip)),
        feathers,
        pennants,
        calm_radius: None,
    })
}

impl BarbShape {
    /// Every straight stroke of the barb: the staff, the feathers and the
    /// pennants' edges (a calm circle as its bounding square's edges).
    pub fn segments(&self) -> Vec<(ScreenPoint, ScreenPoint)> {
        let mut out = Vec::new();
        if let Some(staff) = self.staff {
            out.push(staff);
        }
        out.extend(self.feathers.iter().copied());
        for t in &self.pennants {
            out.extend([(t[0], t[1]), (t[1], t[2]), (t[2], t[0])]);
        }
        if let Some(r) = self.calm_radius {
            let (x, y) = self.station;
            let c = [(x - r, y - r), (x + r, y - r), (x + r, y + r), (x - r, y + r)];
            out.extend([(c[0], c[1]), (c[1], c[2]), (c[2], c[3]), (c[3], c[0])]);
        }
        out
    }

    /// The smallest box (left, top, right, bottom) holding the whole barb.
    pub fn bounds(&self) -> (f64, f64, f64, f64) {
        let mut b = (f64::INFINITY, f64::INFINITY, f64::NEG_INFINITY, f64::NEG_INFINITY);
        for (p, q) in self.segments() {
            for (x, y) in [p, q] {
                b = (b.0.min(x), b.1.min(y), b.2.max(x), b.3.max(y));
            }
        }
        b
    }
}

/// Shortest distance between two segments (zero when they cross).
pub fn segment_distance(a: (ScreenPoint, ScreenPoint), b: (ScreenPoint, ScreenPoint)) -> f64 {
    let cross = |o: ScreenPoint, p: ScreenPoint, q: ScreenPoint| (p.0 - o.0) * (q.1 - o.1) - (p.1 - o.1) * (q.0 - o.0);
    let (d1, d2) = (cross(b.0, b.1, a.0), cross(b.0, b.1, a.1));
    let (d3, d4) = (cross(a.0, a.1, b.0), cross(a.0, a.1, b.1));
    if d1 * d2 < 0.0 && d3 * d4 < 0.0 {
        return 0.0;
    }
    let point_to = |p: ScreenPoint, s: (ScreenPoint, ScreenPoint)| {
        let (dx, dy) = (s.1 .0 - s.0 .0, s.1 .1 - s.0 .1);
        let len2 = dx * dx + dy * dy;
        let t = if len2 > 0.0 { (((p.0 - s.0 .0) * dx + (p.1 - s.0 .1) * dy) / len2).clamp(0.0, 1.0) } else { 0.0 };
        ((p.0 - s.0 .0 - t * dx).powi(2) + (p.1 - s.0 .1 - t * dy).powi(2)).sqrt()
    };
    point_to(a.0, b).min(point_to(a.1, b)).min(point_to(b.0, a)).min(point_to(b.1, a))
}

/// Shortest distance between the strokes of two barbs.
pub fn barb_distance(a: &BarbShape, b: &BarbShape) -> f64 {
    let (sa, sb) = (a.segments(), b.segments());
    let mut best = f64::INFINITY;
    for x in &sa {
        for y in &sb {
            best = best.min(segment_distance(*x, *y));
        }
    }
    best
}

/// One wind to draw: where (screen), the wind (m/s) and the hemisphere.
#[derive(Debug, Clone, Copy)]
pub struct BarbCandidate {
    pub station: ScreenPoint,
    pub u: f64,
    pub v: f64,
    pub hemisphere: Hemisphere,
}

/// Choose the barbs to draw so that the map reads whatever the grid's
/// density: candidates are taken in order, and one is kept only if its
/// station is at least `min_distance` pixels from every kept station, its
/// whole figure lies inside `frame` (left, top, right, bottom), and none of
/// its strokes comes within `clearance` pixels of a kept barb's strokes.
/// Calm and missing winds are kept as circles or dropped as the shape says.
pub fn place_barbs(
    candidates: &[BarbCandidate],
    length: f64,
    frame: (f64, f64, f64, f64),
    min_distance: f64,
    clearance: f64,
) -> Vec<BarbShape> {
    // Kept barbs indexed by a coarse screen lattice, so each candidate is
    // compared only with its neighbours (a barb reaches at most about 1.3
    // staff lengths from its station).
    let reach = length * 1.4 + clearance;
    let cell = (2.0 * reach).max(min_distance).max(1.0);
    let mut buckets: std::collections::HashMap<(i64, i64), Vec<usize>> = std::collections::HashMap::new();
    let mut kept: Vec<BarbShape> = Vec::new();
    for c in candidates {
        let Some(shape) = barb_shape(c.station, c.u, c.v, c.hemisphere, length) else {
            continue;
        };
        let b = shape.bounds();
        if !(b.0 >= frame.0 && b.1 >= frame.1 && b.2 <= frame.2 && b.3 <= frame.3) {
            continue;
        }
        let key = ((c.station.0 / cell).floor() as i64, (c.station.1 / cell).floor() as i64);
        let mut fits = true;
        'search: for dx in -1..=1 {
            for dy in -1..=1 {
                for &k in buckets.get(&(key.0 + dx, key.1 + dy)).map(|v| v.as_slice()).unwrap_or(&[]) {
                    let other = &kept[k];
                    let d = (other.station.0 - c.station.0).hypot(other.station.1 - c.station.1);
                    if d < min_distance || barb_distance(other, &shape) < clearance {
                        fits = false;
                        break 'search;
                    }
                }
            }
        }
        if fits {
            buckets.entry(key).or_default().push(kept.len());
            kept.push(shape);
        }
    }
    kept
}

/// An arrow in the direction the wind blows TO, centred on the station:
/// (tail, head, the two barbs of the arrowhead). `pixels_per_unit` converts
/// speed to length.
pub fn arrow_shape(
    station: ScreenPoint,
    u: f64,
    v: f64,
    pixels_per_unit: f64,
) -> Option<(ScreenPoint, ScreenPoint, ScreenPoint, ScreenPoint)> {
    if !(u.is_finite() && v.is_finite()) {
        return None;
    }
    let (dx, dy) = (u * pixels_per_unit, -v * pixels_per_unit);
    let length = (dx * dx + dy * dy).sqrt();
    if length < 0.5 {
        return None;
    }
    let tail = (station.0 - dx / 2.0, station.1 - dy / 2.0);
    let head = (station.0 + dx / 2.0, station.1 + dy / 2.0);
    let head_length = (length * 0.3).clamp(2.0, 8.0);
    let (ux, uy) = (dx / length, dy / length);
    // Arrowhead sides at 25 degrees either side of the shaft.
    let (c, s) = (25f64.to_radians().cos(), 25f64.to_radians().sin());
    let left = (
        head.0 - head_length * (ux * c - uy * s),
        head.1 - head_length * (uy * c + ux * s),
    );
    let right = (
        head.0 - head_length * (ux * c + uy * s),
        head.1 - head_length * (uy * c - ux * s),
    );
    Some((tail, head, left, right))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn knots(k: f64) -> f64 {
        k * METRES_PER_SECOND_PER_KNOT
    }

    #[test]
    fn speeds_decompose_into_pennants_barbs_and_half_barbs() {
        // WMO convention: pennant 50 kt, full barb 10 kt, half barb 5 kt,
        // speed rounded to the nearest 5 kt.
        let cases = [
            (0.0, (0, 0, 0, 0)),
            (2.0, (0, 0, 0, 0)),
            (5.0, (5, 0, 0, 1)),
            (10.0, (10, 0, 1, 0)),
            (15.0, (15, 0, 1, 1)),
            (47.6, (50, 1, 0, 0)),
            (65.0, (65, 1, 1, 1)),
            (73.0, (75, 1, 2, 1)),
            (105.0, (105, 2, 0, 1)),
            (120.0, (120, 2, 2, 0)),
        ];
        for (kt, (rounded, p, f, h)) in cases {
            let c = barb_decomposition(knots(kt)).unwrap();
            assert_eq!(
                (c.rounded_knots, c.pennants, c.full_barbs, c.half_barbs),
                (rounded, p, f, h),
                "{kt} kt"
            );
        }
        // 25 m/s is 48.6 kt (25 * 3600 / 1852), drawn as one pennant.
        let c = barb_decomposition(25.0).unwrap();
        assert_eq!((c.rounded_knots, c.pennants), (50, 1));
        assert_eq!(barb_decomposition(f64::NAN), None);
        assert_eq!(barb_decomposition(-1.0), None);
    }

    #[test]
    fn barb_shape_has_one_stroke_per_barb_and_one_triangle_per_pennant() {
        let shape = barb_shape((100.0, 100.0), knots(65.0), 0.0, Hemisphere::North, 30.0).unwrap();
        assert_eq!(shape.pennants.len(), 1);
        assert_eq!(shape.feathers.len(), 2, "one full and one half barb");
        let calm = barb_shape((0.0, 0.0), 0.3, 0.2, Hemisphere::North, 30.0).unwrap();
        assert!(calm.staff.is_none() && calm.calm_radius.is_some());
    }

    #[test]
    fn westerly_barb_points_west_with_feathers_north_in_the_north() {
        // A westerly (wind from 270 degrees): the staff extends west of the
        // station; northern-hemisphere feathers point to low pressure, which
        // lies north for a westerly geostrophic wind (Buys Ballot's law).
        let station = (100.0, 100.0);
        let shape = barb_shape(station, knots(20.0), 0.0, Hemisphere::North, 30.0).unwrap();
        let (from, tip) = shape.staff.unwrap();
        assert_eq!(from, station);
        assert!(
            (tip.0 - 70.0).abs() < 1e-9 && (tip.1 - 100.0).abs() < 1e-9,
            "tip {tip:?}"
        );
        for (base, end) in &shape.feathers {
            assert!(end.1 < base.1, "north is up on screen (smaller y)");
        }
        let south = barb_shape(station, knots(20.0), 0.0, Hemisphere::South, 30.0).unwrap();
        for (base, end) in &south.feathers {
            assert!(end.1 > base.1, "southern-hemisphere feathers point south");
        }
    }

    #[test]
    fn northerly_barb_points_north() {
        // Wind from the north (v < 0): staff points north (up on screen);
        // feathers a quarter turn clockwise from north, i.e. east, in the NH.
        let shape = barb_shape((50.0, 50.0), 0.0, -knots(30.0), Hemisphere::North, 20.0).unwrap();
        let (_, tip) = shape.staff.unwrap();
        assert!((tip.0 - 50.0).abs() < 1e-9 && (tip.1 - 30.0).abs() < 1e-9);
        for (base, end) in &shape.feathers {
            assert!(end.0 > base.0);
        }
    }

    #[test]
    fn arrows_point_where_the_wind_blows() {
        // South-westerly: u > 0, v > 0 blows towards the north-east, which is
        // right and up on a north-up screen.
        let (tail, head, _, _) = arrow_shape((0.0, 0.0), 3.0, 4.0, 2.0).unwrap();
        assert!(head.0 > tail.0 && head.1 < tail.1);
        let length = ((head.0 - tail.0).powi(2) + (head.1 - tail.1).powi(2)).sqrt();
        assert!(
            (length - 10.0).abs() < 1e-9,
            "5 m/s at 2 px per m/s is 10 px"
        );
        let angle = (-(head.1 - tail.1)).atan2(head.0 - tail.0);
        assert!((angle - 4f64.atan2(3.0)).abs() < 1e-12);
    }

    /// A deterministic scatter of winds (a linear congruential generator,
    /// Numerical Recipes constants) for the geometry tests.
    fn scatter(n: usize, seed: u64) -> Vec<f64> {
        let mut x = seed;
        (0..n)
            .map(|_| {
                x = x.wrapping_mul(1664525).wrapping_add(1013904223) % (1 << 32);
                x as f64 / (1u64 << 32) as f64
            })
            .collect()
    }

    #[test]
    fn placed_barbs_stay_inside_the_frame_and_never_touch_each_other() {
        // Legibility rule of plotted wind (common practice, no source): a
        // barb is drawn whole inside the chart and apart from its
        // neighbours. A dense grid (every 4 px, much denser than the
        // barbs) of winds of every direction and 0..120 kt.
        let frame = (50.0, 40.0, 650.0, 440.0);
        let mut candidates = Vec::new();
        let r = scatter(2 * 160 * 110, 7);
        for j in 0..110 {
            for i in 0..160 {
                let k = 2 * (j * 160 + i);
                let (speed, angle) = (r[k] * 62.0, r[k + 1] * std::f64::consts::TAU);
                candidates.push(BarbCandidate {
                    station: (40.0 + 4.0 * i as f64, 30.0 + 4.0 * j as f64),
                    u: speed * angle.cos(),
                    v: speed * angle.sin(),
                    hemisphere: if j < 55 { Hemisphere::North } else { Hemisphere::South },
                });
            }
        }
        let length = 24.0;
        let placed = place_barbs(&candidates, length, frame, 30.0, 2.0);
        // Enough of them to read the field: at least one per 60 x 60 px.
        assert!(placed.len() >= (600 * 400) / (60 * 60), "only {} barbs", placed.len());
        for b in &placed {
            for (p, q) in b.segments() {
                for (x, y) in [p, q] {
                    assert!(x >= frame.0 && x <= frame.2 && y >= frame.1 && y <= frame.3, "({x}, {y}) outside the frame");
                }
            }
        }
        for (i, a) in placed.iter().enumerate() {
            for b in &placed[i + 1..] {
                assert!(barb_distance(a, b) >= 2.0, "barbs at {:?} and {:?} touch", a.station, b.station);
            }
        }
    }

    #[test]
    fn a_barb_over_the_edge_is_left_out_not_cut() {
        // A westerly at the left edge: its staff would run west out of the frame.
        let c = BarbCandidate { station: (55.0, 100.0), u: 20.0, v: 0.0, hemisphere: Hemisphere::North };
        assert!(place_barbs(&[c], 24.0, (50.0, 40.0, 650.0, 440.0), 30.0, 2.0).is_empty());
        let inside = BarbCandidate { station: (100.0, 100.0), ..c };
        assert_eq!(place_barbs(&[inside], 24.0, (50.0, 40.0, 650.0, 440.0), 30.0, 2.0).len(), 1);
    }

    #[test]
    fn pennants_are_triangles_standing_on_the_staff() {
        // WMO plotted-wind practice: a pennant's base lies on the staff.
        let shape = barb_shape((0.0, 0.0), knots(65.0), 0.0, Hemisphere::North, 30.0).unwrap();
        let (station, tip) = shape.staff.unwrap();
        let t = shape.pennants[0];
        let on_staff = |p: ScreenPoint| ((tip.0 - station.0) * (p.1 - station.1) - (tip.1 - station.1) * (p.0 - station.0)).abs() < 1e-9;
        assert!(on_staff(t[0]) && on_staff(t[2]) && !on_staff(t[1]));
        let area = ((t[1].0 - t[0].0) * (t[2].1 - t[0].1) - (t[2].0 - t[0].0) * (t[1].1 - t[0].1)).abs() / 2.0;
        assert!(area > 10.0, "a visible triangle, area {area}");
    }

    #[test]
    fn segment_distance_is_zero_for_crossing_and_the_gap_otherwise() {
        // Plane geometry.
        assert_eq!(segment_distance(((0.0, 0.0), (2.0, 2.0)), ((0.0, 2.0), (2.0, 0.0))), 0.0);
        assert!((segment_distance(((0.0, 0.0), (1.0, 0.0)), ((0.0, 3.0), (1.0, 3.0))) - 3.0).abs() < 1e-12);
        assert!((segment_distance(((0.0, 0.0), (1.0, 0.0)), ((4.0, 4.0), (4.0, 5.0))) - 5.0).abs() < 1e-12);
    }
}
