//! Point values and area statistics on latitude-longitude grids.

use ndarray::ArrayView2;

use crate::grid::Grid;

/// Why a point or area cannot be sampled.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SamplingError {
    #[error("the point {latitude:.2}, {longitude:.2} lies outside the grid (latitude {south:.2} to {north:.2}, longitude {west:.2} to {east:.2})")]
    OutsideGrid { latitude: f64, longitude: f64, south: f64, north: f64, west: f64, east: f64 },
    #[error("the region holds no grid points (grid: latitude {south:.2} to {north:.2}, longitude {west:.2} to {east:.2})")]
    EmptyRegion { south: f64, north: f64, west: f64, east: f64 },
}

/// Brings a longitude into the grid's convention (0..360 or -180..180) by
/// whole turns, so that a point given as 20 W finds 340 E.
pub fn longitude_in_grid(grid: &Grid, longitude: f64) -> f64 {
    let (_, _, west, _) = grid.extent();
    let mut lon = longitude;
    while lon < west - 1e-9 {
        lon += 360.0;
    }
    while lon >= west + 360.0 - 1e-9 {
        lon -= 360.0;
    }
    lon
}

/// Position of `x` between neighbours in a monotonic coordinate: (index of
/// the lower bracket, fraction). None outside.
fn bracket(coordinate: &[f64], x: f64) -> Option<(usize, f64)> {
    let n = coordinate.len();
    if n == 1 {
        return ((coordinate[0] - x).abs() < 1e-9).then_some((0, 0.0));
    }
    for k in 0..n - 1 {
        let (a, b) = (coordinate[k], coordinate[k + 1]);
        if (x - a) * (x - b) <= 0.0 {
            let t = if b == a { 0.0 } else { (x - a) / (b - a) };
            return Some((k, t));
        }
    }
    None
}

/// Bilinear interpolation of a [lat, lon] slice at a point. On a global grid
/// the cell across the seam is used. NaN if any of the four corners is
/// missing (a missing value is never averaged in). Fails outside the grid.
pub fn bilinear(grid: &Grid, values: ArrayView2<f32>, latitude: f64, longitude: f64) -> Result<f32, SamplingError> {
    let (south, north, west, east) = grid.extent();
    let outside = || SamplingError::OutsideGrid { latitude, longitude, south, north, west, east };
    if let Some(projected) = &grid.projection {
        // Projected grid: the point's grid coordinates (forward projection),
        // bilinear in them.
        let (x, y) = projected.projection.forward(latitude, longitude);
        let (j, ty) = bracket(&grid.latitudes, y).ok_or_else(outside)?;
        let (i, tx) = bracket(&grid.longitudes, x).ok_or_else(outside)?;
        let (j1, i1) = ((j + 1).min(grid.latitudes.len() - 1), (i + 1).min(grid.longitudes.len() - 1));
        let v = |jj: usize, ii: usize| values[[jj, ii]] as f64;
        return Ok(((1.0 - ty) * ((1.0 - tx) * v(j, i) + tx * v(j, i1)) + ty * ((1.0 - tx) * v(j1, i) + tx * v(j1, i1))) as f32);
    }
    let lon = longitude_in_grid(grid, longitude);
    let (j, ty) = bracket(&grid.latitudes, latitude).ok_or_else(outside)?;
    let nx = grid.longitudes.len();
    let (i0, i1, tx) = match bracket(&grid.longitudes, lon) {
        Some((i, t)) => (i, (i + 1).min(nx - 1), t),
        None if grid.global => {
            // Between the last column and the first, across the seam.
            let last = grid.longitudes[nx - 1];
            let span = grid.longitudes[0] + 360.0 - last;
            let mut d = lon - last;
            if d < 0.0 {
                d += 360.0;
            }
            (nx - 1, 0, d / span)
        }
        None => return Err(outside()),
    };
    let j1 = (j + 1).min(grid.latitudes.len() - 1);
    let v = |jj: usize, ii: usize| values[[jj, ii]] as f64;
    let value = (1.0 - ty) * ((1.0 - tx) * v(j, i0) + tx * v(j, i1)) + ty * ((1.0 - tx) * v(j1, i0) + tx * v(j1, i1));
    Ok(value as f32)
}

/// A latitude-longitude box. Longitudes may cross the seam (west > east means
/// the box spans the 180 or 0 meridian eastward from `west`).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Region {
    pub south: f64,
    pub north: f64,
    pub west: f64,
    pub east: f64,
}

impl Region {
    /// True if the point lies in the box (edges included). Longitudes are
    /// compared modulo 360.
    pub fn contains(&self, latitude: f64, longitude: f64) -> bool {
        if latitude < self.south - 1e-9 || latitude > self.north + 1e-9 {
            return false;
        }
        let width = (self.east - self.west).rem_euclid(360.0);
        let width = if width == 0.0 && self.east != self.west { 360.0 } else { width };
        let offset = (longitude - self.west).rem_euclid(360.0);
        offset <= width + 1e-9 || offset >= 360.0 - 1e-9
    }
}

/// Area statistics over a region, weighted by cos(latitude) (the area of a
/// latitude-longitude cell is proportional to it; field guide).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct AreaStatistics {
    pub weighted_mean: f64,
    pub minimum: f64,
    pub maximum: f64,
    pub valid_points: usize,
    pub missing_points: usize,
}

/// cos(lat)-weighted mean, minimum and maximum of a [lat, lon] slice over a
/// region; missing values are skipped and counted. Fails when the region holds
/// no grid points. All-missing gives NaN statistics with the count.
///
/// On a projected grid the cells taken are those whose centres' true
/// latitude and longitude lie in the box, and each is weighted by its area
/// on the earth: a regular cell of a conformal projection covers
/// dx dy / m^2 (m the map factor, Snyder 1987, USGS PP 1395, ch. 4); a
/// rotated latitude-longitude cell covers an area proportional to the
/// cosine of its rotated latitude, as on any latitude-longitude grid.
pub fn area_statistics(grid: &Grid, values: ArrayView2<f32>, region: &Region) -> Result<AreaStatistics, SamplingError> {
    let (mut sum, mut weights, mut minimum, mut maximum, mut valid, mut missing) = (0.0f64, 0.0f64, f64::INFINITY, f64::NEG_INFINITY, 0, 0);
    let nx = grid.longitudes.len();
    for j in 0..grid.latitudes.len() {
        for i in 0..nx {
            let (lat, lon, w) = match &grid.projection {
                Some(p) => {
                    let k = j * nx + i;
                    let m = p.map_factor[k];
                    let w = if p.projection.is_angular() { 1.0 / m } else { 1.0 / (m * m) };
                    (p.latitude[k], p.longitude[k], if w.is_finite() { w.max(0.0) } else { 0.0 })
                }
                None => (grid.latitudes[j], grid.longitudes[i], grid.latitudes[j].to_radians().cos().max(0.0)),
            };
            if !region.contains(lat, lon) {
                continue;
            }
            let v = values[[j, i]];
            if v.is_nan() {
                missing += 1;
                continue;
            }
            let v = v as f64;
            sum += w * v;
            weights += w;
            minimum = minimum.min(v);
            maximum = maximum.max(v);
            valid += 1;
        }
    }
    if valid + missing == 0 {
        let (south, north, west, east) = grid.extent();
        return Err(SamplingError::EmptyRegion { south, north, west, east });
    }
    let mean = if weights > 0.0 { sum / weights } else { f64::NAN };
    if valid == 0 {
        return Ok(AreaStatistics { weighted_mean: f64::NAN, minimum: f64::NAN, maximum: f64::NAN, valid_points: 0, missing_points: missing });
    }
    Ok(AreaStatistics { weighted_mean: mean, minimum, maximum, valid_points: valid, missing_points: missing })
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;

    #[test]
    fn bilinear_reproduces_a_plane_and_wraps_longitude() {
        // Bilinear interpolation is exact for a function linear in each
        // coordinate (its definition).
        let grid = Grid::new(vec![40.0, 41.0, 42.0], vec![340.0, 341.0, 342.0]);
        let values = Array2::from_shape_fn((3, 3), |(j, i)| (2.0 * j as f64 + 3.0 * i as f64) as f32);
        let v = bilinear(&grid, values.view(), 41.5, -18.5).unwrap(); // -18.5 = 341.5
        assert!((v - (2.0 * 1.5 + 3.0 * 1.5)).abs() < 1e-5);
        assert!(bilinear(&grid, values.view(), 45.0, 341.0).is_err());
    }

    #[test]
    fn area_mean_weights_by_cos_latitude() {
        // Two rows at 0 and 60 degrees: weights 1 and 0.5. Values 1 and 4:
        // weighted mean (1*1 + 0.5*4)/1.5 = 2.
        let grid = Grid::new(vec![0.0, 60.0], vec![0.0, 1.0]);
        let values = Array2::from_shape_vec((2, 2), vec![1.0f32, 1.0, 4.0, 4.0]).unwrap();
        let region = Region { south: -10.0, north: 70.0, west: -5.0, east: 5.0 };
        let s = area_statistics(&grid, values.view(), &region).unwrap();
        assert!((s.weighted_mean - 2.0).abs() < 1e-9);
        let nan = Array2::from_shape_vec((2, 2), vec![1.0f32, f32::NAN, 4.0, 4.0]).unwrap();
        assert_eq!(area_statistics(&grid, nan.view(), &region).unwrap().missing_points, 1);
    }

    #[test]
    fn region_across_the_seam() {
        let r = Region { south: 0.0, north: 10.0, west: 350.0, east: 10.0 };
        assert!(r.contains(5.0, 355.0) && r.contains(5.0, 5.0) && r.contains(5.0, -5.0));
        assert!(!r.contains(5.0, 20.0));
    }
}
