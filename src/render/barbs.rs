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
        let outer = along(position);
        let inner = along(position + pennant_base);
        pennants.push([outer, slant(outer, feather), inner]);
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
}
