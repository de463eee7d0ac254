//! Contour geometry on rectilinear grids, in the grid's own coordinates.
//!
//! Built on the marching-squares implementation of the `contour` crate, which
//! knows nothing of missing data and closes every ring along the grid border.
//! This module adds what a meteorological chart needs:
//! - missing values (NaN) form a region of their own, bounded halfway
//!   between missing and valid nodes, which the figures paint with a grey
//!   hatch over the bands, so missing data never look like a value; under
//!   it the bands are computed on a field whose missing nodes borrow their
//!   neighbours' values, so that each band reaches the missing area with its
//!   own colour rather than with the colour of the lowest band;
//! - isolines are opened where they run along the grid border or through a
//!   cell with a missing corner, so no line is drawn where there is no data;
//! - coordinates may be unevenly spaced (Gaussian latitudes, pressure levels):
//!   fractional grid indices are mapped through the coordinate arrays by
//!   piecewise-linear interpolation.
//!
//! Values are row-major with `ny` rows (y, e.g. latitude) of `nx` columns
//! (x, e.g. longitude); both coordinate arrays strictly increase.

use contour::ContourBuilder;
use rayon::prelude::*;

use super::RenderError;

/// A closed ring or an open line, in grid coordinates (x, y).
pub type Path = Vec<(f64, f64)>;

/// A field on a rectilinear grid, NaN for missing values.
#[derive(Debug, Clone, Copy)]
pub struct GridField<'a> {
    pub values: &'a [f64],
    pub x: &'a [f64],
    pub y: &'a [f64],
}

/// Filled-contour geometry: for each level the region where the value is
/// at least that level, and the region of missing data. Each region is a
/// set of rings (outer boundaries and holes together) to be filled by the
/// even-odd rule. Painting the whole grid with the lowest band's colour,
/// then the regions in increasing level order, then the missing area, gives
/// every band its colour with no gaps between bands: each region lies on
/// top of the one below it, so no seam can show through.
#[derive(Debug, Clone, Default)]
pub struct FilledContours {
    pub at_least: Vec<(f64, Vec<Path>)>,
    pub missing_area: Vec<Path>,
}

/// The isolines of one level: open lines and closed rings.
#[derive(Debug, Clone)]
pub struct Isolines {
    pub level: f64,
    pub lines: Vec<Path>,
}

impl<'a> GridField<'a> {
    pub fn new(values: &'a [f64], x: &'a [f64], y: &'a [f64]) -> Result<Self, RenderError> {
        if x.len() < 2 || y.len() < 2 {
            return Err(RenderError::input(
                "grid",
                format!("needs at least 2 x 2 points, got {} x {}", y.len(), x.len()),
            ));
        }
        if values.len() != x.len() * y.len() {
            return Err(RenderError::input(
                "grid",
                format!(
                    "{} values do not fill {} rows of {} columns",
                    values.len(),
                    y.len(),
                    x.len()
                ),
            ));
        }
        for (name, c) in [("x coordinates", x), ("y coordinates", y)] {
            if c.iter().any(|v| !v.is_finite()) || c.windows(2).any(|w| w[1] <= w[0]) {
                return Err(RenderError::input(
                    name,
                    "must be finite and strictly increasing",
                ));
            }
        }
        Ok(GridField { values, x, y })
    }

    pub fn nx(&self) -> usize {
        self.x.len()
    }

    pub fn ny(&self) -> usize {
        self.y.len()
    }

    /// Smallest and largest valid value; None when every value is missing.
    pub fn range(&self) -> Option<(f64, f64)> {
        let mut lo = f64::INFINITY;
        let mut hi = f64::NEG_INFINITY;
        for &v in self.values {
            if v.is_finite() {
                lo = lo.min(v);
                hi = hi.max(v);
            }
        }
        (lo <= hi).then_some((lo, hi))
    }

    fn has_missing(&self) -> bool {
        self.values.iter().any(|v| !v.is_finite())
    }

    /// Values with missing ones replaced by a sentinel far below all data.
    fn masked(&self, lo: f64, hi: f64) -> (Vec<f64>, f64) {
        let sentinel = lo - (hi - lo) - 1.0;
        let values = self
            .values
            .iter()
            .map(|&v| if v.is_finite() { v } else { sentinel })
            .collect();
        (values, sentinel)
    }

    fn builder(&self) -> ContourBuilder {
        ContourBuilder::new(self.nx(), self.ny(), true)
    }

    /// Map a contour-crate coordinate to grid coordinates. The crate puts
    /// grid node i at i + 0.5 and closes rings half a cell outside the
    /// nodes; clamping to the node range puts those border runs exactly on
    /// the edge of the data.
    fn grid_coordinates(&self, cx: f64, cy: f64) -> (f64, f64) {
        (interpolate(self.x, cx - 0.5), interpolate(self.y, cy - 0.5))
    }

    fn ring_to_coordinates(&self, ring: &[geo_point::Coord]) -> Path {
        ring.iter()
            .map(|c| self.grid_coordinates(c.x, c.y))
            .collect()
    }

    /// Filled-contour regions for the given levels.
    pub fn filled(&self, levels: &[f64]) -> Result<FilledContours, RenderError> {
        let builder = self.builder();
        let Some((lo, hi)) = self.range() else {
            let (x0, x1) = (self.x[0], self.x[self.nx() - 1]);
            let (y0, y1) = (self.y[0], self.y[self.ny() - 1]);
            return Ok(FilledContours {
                at_least: Vec::new(),
                missing_area: vec![vec![(x0, y0), (x1, y0), (x1, y1), (x0, y1), (x0, y0)]],
            });
        };
        let missing_area = if self.has_missing() {
            let mask: Vec<f64> = self
                .values
                .iter()
                .map(|v| if v.is_finite() { 0.0 } else { 1.0 })
                .collect();
            self.regions(&builder, &mask, 0.5)?
        } else {
            Vec::new()
        };
        let values = self.filled_in(lo);
        // Levels at or below the smallest value cover the whole grid (the
        // lowest band, painted first); levels above the largest cover
        // nothing. Skip both.
        let useful: Vec<f64> = levels
            .iter()
            .copied()
            .filter(|&l| l > lo && l <= hi)
            .collect();
        let at_least = useful
            .par_iter()
            .map(|&level| self.regions(&builder, &values, level).map(|r| (level, r)))
            .collect::<Result<Vec<_>, _>>()?;
        Ok(FilledContours {
            at_least,
            missing_area,
        })
    }

    /// Values with each missing node given the mean of its valid neighbours,
    /// spreading a few nodes into missing areas; nodes deeper inside take
    /// `fallback`. Only the bands under the missing-data hatch depend on
    /// these values.
    fn filled_in(&self, fallback: f64) -> Vec<f64> {
        let (nx, ny) = (self.nx(), self.ny());
        let mut values = self.values.to_vec();
        if !self.has_missing() {
            return values;
        }
        for _ in 0..3 {
            let before = values.clone();
            let mut changed = false;
            for iy in 0..ny {
                for ix in 0..nx {
                    let k = iy * nx + ix;
                    if before[k].is_finite() {
                        continue;
                    }
                    let mut sum = 0.0;
                    let mut count = 0;
                    let neighbours = [
                        (ix > 0).then(|| k - 1),
                        (ix + 1 < nx).then(|| k + 1),
                        (iy > 0).then(|| k - nx),
                        (iy + 1 < ny).then(|| k + nx),
                    ];
                    for n in neighbours.into_iter().flatten() {
                        if before[n].is_finite() {
                            sum += before[n];
                            count += 1;
                        }
                    }
                    if count > 0 {
                        values[k] = sum / count as f64;
                        changed = true;
                    }
                }
            }
            if !changed {
                break;
            }
        }
        for v in values.iter_mut() {
            if !v.is_finite() {
                *v = fallback;
            }
        }
        values
    }

    fn regions(
        &self,
        builder: &ContourBuilder,
        values: &[f64],
        level: f64,
    ) -> Result<Vec<Path>, RenderError> {
        let contours = builder
            .contours(values, &[level])
            .map_err(|e| RenderError::Drawing(format!("contouring failed: {e:?}")))?;
        let mut rings = Vec::new();
        for contour in &contours {
            for polygon in contour.geometry().0.iter() {
                rings.push(self.ring_to_coordinates(&polygon.exterior().0));
                for hole in polygon.interiors() {
                    rings.push(self.ring_to_coordinates(&hole.0));
                }
            }
        }
        Ok(rings)
    }

    /// Isolines for the given levels, opened at the grid border and at
    /// missing data.
    pub fn isolines(&self, levels: &[f64]) -> Result<Vec<Isolines>, RenderError> {
        let Some((lo, hi)) = self.range() else {
            return Ok(Vec::new());
        };
        let (values, _) = self.masked(lo, hi);
        let builder = self.builder();
        let useful: Vec<f64> = levels
            .iter()
            .copied()
            .filter(|&l| l >= lo && l <= hi)
            .collect();
        useful
            .par_iter()
            .map(|&level| {
                let lines = builder
                    .lines(&values, &[level])
                    .map_err(|e| RenderError::Drawing(format!("contouring failed: {e:?}")))?;
                let mut out = Vec::new();
                for line in &lines {
                    for ring in line.geometry().0.iter() {
                        for run in self.open_ring(&ring.0) {
                            out.push(run);
                        }
                    }
                }
                Ok(Isolines { level, lines: out })
            })
            .collect()
    }

    /// Whether a contour-crate point lies on real data: inside the node range
    /// and on a cell edge whose end nodes are both present.
    fn point_on_data(&self, cx: f64, cy: f64) -> bool {
        let (fx, fy) = (cx - 0.5, cy - 0.5);
        let eps = 1e-9;
        let (nx, ny) = (self.nx() as f64, self.ny() as f64);
        if fx < -eps || fy < -eps || fx > nx - 1.0 + eps || fy > ny - 1.0 + eps {
            return false;
        }
        let fx = fx.clamp(0.0, nx - 1.0);
        let fy = fy.clamp(0.0, ny - 1.0);
        for ix in [fx.floor() as usize, fx.ceil() as usize] {
            for iy in [fy.floor() as usize, fy.ceil() as usize] {
                if !self.values[iy * self.nx() + ix].is_finite() {
                    return false;
                }
            }
        }
        true
    }

    fn open_ring(&self, ring: &[geo_point::Coord]) -> Vec<Path> {
        let keep: Vec<bool> = ring.iter().map(|c| self.point_on_data(c.x, c.y)).collect();
        if keep.iter().all(|&k| k) {
            return vec![self.ring_to_coordinates(ring)];
        }
        // A closed ring (first point repeated last) that is cut somewhere:
        // start just after a dropped point so no run is split in two.
        let closed = ring.len() > 2 && ring.first() == ring.last();
        let n = if closed { ring.len() - 1 } else { ring.len() };
        let start = if closed {
            keep[..n].iter().position(|k| !k).unwrap_or(0)
        } else {
            0
        };
        let mut runs = Vec::new();
        let mut current: Path = Vec::new();
        for step in 0..n {
            let i = (start + step) % n;
            if keep[i] {
                current.push(self.grid_coordinates(ring[i].x, ring[i].y));
            } else if !current.is_empty() {
                runs.push(std::mem::take(&mut current));
            }
        }
        if !closed && keep.len() > n {
            // (open input: nothing more to add)
        }
        if !current.is_empty() {
            runs.push(current);
        }
        runs.retain(|r| r.len() > 1);
        runs
    }
}

/// Coordinate at a fractional index, by piecewise-linear interpolation,
/// clamped to the ends.
pub fn interpolate(coords: &[f64], index: f64) -> f64 {
    let last = coords.len() - 1;
    if index <= 0.0 {
        return coords[0];
    }
    if index >= last as f64 {
        return coords[last];
    }
    let i = index.floor() as usize;
    let t = index - i as f64;
    coords[i] + t * (coords[i + 1] - coords[i])
}

/// Signed area of a ring by the shoelace formula (positive anticlockwise
/// with y up).
pub fn signed_area(ring: &[(f64, f64)]) -> f64 {
    let n = ring.len();
    if n < 3 {
        return 0.0;
    }
    let mut sum = 0.0;
    for i in 0..n {
        let (x0, y0) = ring[i];
        let (x1, y1) = ring[(i + 1) % n];
        sum += x0 * y1 - x1 * y0;
    }
    0.5 * sum
}

/// Area covered by a set of rings under the even-odd rule, for rings that
/// do not cross (as marching squares produces): the sum of signed areas
/// when outer rings and holes wind oppositely.
pub fn region_area(rings: &[Path]) -> f64 {
    rings.iter().map(|r| signed_area(r)).sum::<f64>().abs()
}

/// Names for the contour crate's point type, kept in one place.
mod geo_point {
    pub type Coord = geo_types::Coord<f64>;
}

#[cfg(test)]
mod tests {
    use super::*;

    fn grid(n: usize, h: f64) -> Vec<f64> {
        (0..n).map(|i| i as f64 * h).collect()
    }

    #[test]
    fn isoline_of_a_linear_field_lies_on_the_exact_line() {
        // v = 2x + 1: linear interpolation along cell edges is exact for a
        // linear field, so the 8.0 isoline is x = 3.5 everywhere.
        let x = grid(11, 1.0);
        let y = grid(7, 1.0);
        let values: Vec<f64> = y
            .iter()
            .flat_map(|_| x.iter().map(|&xv| 2.0 * xv + 1.0))
            .collect();
        let field = GridField::new(&values, &x, &y).unwrap();
        let lines = field.isolines(&[8.0]).unwrap();
        assert_eq!(lines.len(), 1);
        let points: Vec<_> = lines[0].lines.iter().flatten().collect();
        assert!(points.len() >= 7);
        for p in &points {
            assert!((p.0 - 3.5).abs() < 1e-9, "point {p:?} off the line x = 3.5");
        }
        // The line is open: it runs from the bottom edge to the top edge and
        // does not follow the border.
        assert_eq!(lines[0].lines.len(), 1);
        let ys: Vec<f64> = lines[0].lines[0].iter().map(|p| p.1).collect();
        let (ymin, ymax) = ys
            .iter()
            .fold((f64::MAX, f64::MIN), |a, &b| (a.0.min(b), a.1.max(b)));
        assert!((ymin - 0.0).abs() < 1e-9 && (ymax - 6.0).abs() < 1e-9);
    }

    #[test]
    fn isoline_of_a_radial_field_is_a_circle_of_the_right_radius() {
        // v = sqrt(x^2 + y^2) on an uneven grid; the 5.0 isoline is the circle
        // r = 5 (analytic). Linear interpolation of a curved field is accurate
        // to O(h^2 / r) with h = 0.25 here; allow 0.01.
        let mut x: Vec<f64> = (0..=64).map(|i| -8.0 + 0.25 * i as f64).collect();
        x[10] += 0.05; // uneven spacing on purpose
        let y = x.clone();
        let values: Vec<f64> = y
            .iter()
            .flat_map(|&yv| x.iter().map(move |&xv| (xv * xv + yv * yv).sqrt()))
            .collect();
        let field = GridField::new(&values, &x, &y).unwrap();
        let lines = field.isolines(&[5.0]).unwrap();
        let ring = &lines[0].lines;
        assert_eq!(ring.len(), 1, "one closed ring expected");
        assert!(ring[0].len() > 50);
        for p in &ring[0] {
            let r = (p.0 * p.0 + p.1 * p.1).sqrt();
            assert!((r - 5.0).abs() < 0.01, "radius {r} at {p:?}");
        }
    }

    #[test]
    fn filled_region_with_a_hole_has_the_analytic_area() {
        // Region r >= 3 inside the square [-8, 8]^2: 256 - 9 pi (analytic).
        let x: Vec<f64> = (0..=128).map(|i| -8.0 + 0.125 * i as f64).collect();
        let y = x.clone();
        let values: Vec<f64> = y
            .iter()
            .flat_map(|&yv| x.iter().map(move |&xv| (xv * xv + yv * yv).sqrt()))
            .collect();
        let field = GridField::new(&values, &x, &y).unwrap();
        let filled = field.filled(&[3.0]).unwrap();
        assert_eq!(filled.at_least.len(), 1);
        let rings = &filled.at_least[0].1;
        assert_eq!(rings.len(), 2, "outer square and the hole");
        let area = region_area(rings);
        let expected = 256.0 - 9.0 * std::f64::consts::PI;
        assert!((area - expected).abs() < 0.05, "area {area} vs {expected}");
        assert!(filled.missing_area.is_empty());
    }

    #[test]
    fn missing_values_are_left_out_of_regions_and_lines() {
        // v = x with the block x in [4, 6], y in [2, 4] missing.
        let x = grid(11, 1.0);
        let y = grid(7, 1.0);
        let mut values: Vec<f64> = y.iter().flat_map(|_| x.iter().copied()).collect();
        for iy in 2..=4 {
            for ix in 4..=6 {
                values[iy * 11 + ix] = f64::NAN;
            }
        }
        let field = GridField::new(&values, &x, &y).unwrap();
        let filled = field.filled(&[2.0, 5.0]).unwrap();
        let missing = region_area(&filled.missing_area);
        // The missing block's boundary runs halfway between missing and
        // valid nodes: x 3.5..6.5, y 1.5..4.5, a 3 x 3 square whose four
        // corners marching squares cuts by triangles of 1/8: 9 - 0.5.
        assert!((missing - 8.5).abs() < 1e-9, "missing area {missing}");
        // Under the hatch the 5.0 region still follows x >= 5 (neighbour
        // values continue the field), so the band edge meets the missing
        // area instead of stopping short of it.
        let region = &filled.at_least[1].1;
        assert!(
            (region_area(region) - 5.0 * 6.0).abs() < 1.0,
            "{}",
            region_area(region)
        );
        // No isoline point of 5.0 (which runs through the gap) lies in a cell
        // touching a missing node.
        let lines = field.isolines(&[5.0]).unwrap();
        for p in lines[0].lines.iter().flatten() {
            assert!((p.0 - 5.0).abs() < 1e-9);
            assert!(
                p.1 <= 1.0 + 1e-9 || p.1 >= 5.0 - 1e-9,
                "point {p:?} inside the missing block"
            );
        }
        assert_eq!(lines[0].lines.len(), 2, "the line is cut in two by the gap");
    }

    /// Even-odd point-in-rings test (the rule the painter fills by).
    fn inside(rings: &[Path], (px, py): (f64, f64)) -> bool {
        let mut odd = false;
        for ring in rings {
            let n = ring.len();
            for i in 0..n {
                let (a, b) = (ring[i], ring[(i + 1) % n]);
                if (a.1 > py) != (b.1 > py) && px < a.0 + (py - a.1) * (b.0 - a.0) / (b.1 - a.1) {
                    odd = !odd;
                }
            }
        }
        odd
    }

    #[test]
    fn interior_missing_hole_beside_a_border_gap_is_inside_the_missing_area() {
        // The demo's turning map shape: a disc of missing nodes (radius 3)
        // wholly surrounded by valid values, and a missing bay touching the
        // southern border. Both must lie inside the hatched (missing) area
        // by the even-odd rule, and valid ground between them must not.
        let x = grid(21, 1.0);
        let y = grid(21, 1.0);
        let mut values: Vec<f64> = y.iter().flat_map(|&yv| x.iter().map(move |&xv| xv - yv)).collect();
        for iy in 0..21 {
            for ix in 0..21 {
                let (dx, dy) = (ix as f64 - 10.0, iy as f64 - 12.0);
                let in_hole = dx * dx + dy * dy <= 9.0;
                let in_bay = iy <= 2 && (6..=14).contains(&ix);
                if in_hole || in_bay {
                    values[iy * 21 + ix] = f64::NAN;
                }
            }
        }
        let field = GridField::new(&values, &x, &y).unwrap();
        let filled = field.filled(&[-5.0, 0.0, 5.0]).unwrap();
        let missing = &filled.missing_area;
        assert!(inside(missing, (10.0, 12.0)), "hole centre not hatched");
        assert!(inside(missing, (12.0, 13.0)), "hole off-centre not hatched");
        assert!(inside(missing, (10.0, 0.5)), "border bay not hatched");
        assert!(!inside(missing, (10.0, 6.0)), "valid ground between them hatched");
        assert!(!inside(missing, (2.0, 18.0)), "valid corner hatched");
        // The hole's boundary runs halfway between missing and valid nodes:
        // its area lies between the discs of radius 3 and 4 (analytic bounds).
        let hole: Vec<Path> = missing
            .iter()
            .filter(|r| inside(&[(*r).clone()], (10.0, 12.0)))
            .cloned()
            .collect();
        let area = region_area(&hole);
        let pi = std::f64::consts::PI;
        assert!(area > 9.0 * pi && area < 16.0 * pi, "hole area {area}");
    }

    #[test]
    fn inconsistent_shapes_are_reported_not_panicked_on() {
        let x = grid(3, 1.0);
        let y = grid(3, 1.0);
        let err = GridField::new(&[1.0; 8], &x, &y).unwrap_err();
        assert!(err.to_string().contains("8 values"));
        let err = GridField::new(&[1.0; 9], &[0.0, 2.0, 1.0], &y).unwrap_err();
        assert!(err.to_string().contains("increasing"));
    }
}
