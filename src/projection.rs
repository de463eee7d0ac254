//! Map projections of regional grids: Lambert conformal conic (one or two
//! standard parallels), polar stereographic (either pole) and rotated
//! latitude-longitude, on a sphere.
//!
//! Formulas: Snyder, J. P. (1987), "Map Projections: A Working Manual", USGS
//! Professional Paper 1395, spherical forms: Lambert conformal conic
//! eqs. (15-1) to (15-5) (forward), (14-10), (15-3) and (15-5) (inverse),
//! scale factor (15-4); polar stereographic eqs. (21-5) to (21-7) with the
//! polar aspect of (21-4) for the scale factor, inverse (20-18), (20-14) and
//! (20-16)/(20-17). The rotated latitude-longitude grid is a rotation of the
//! sphere (CF conventions, appendix F, "Rotated pole"), written here as an
//! orthonormal change of basis.
//!
//! This module knows nothing of files: a projection is built from plain
//! parameters (`LambertConformal::new`, ...), or from a CF grid mapping's
//! attributes handed over as a look-up function (`Projection::from_cf`).
//! Every constructor checks its parameters and fails with a message saying
//! which one is missing or out of range; nothing here panics on input.
//!
//! Conventions used throughout:
//! - angles in the public interface are degrees, projection coordinates
//!   metres (rotated grids: rotated longitude and latitude in degrees);
//! - `east_angle(lat, lon)` is the angle, counterclockwise from the grid's
//!   x axis, of the local eastward direction. A vector with grid components
//!   (u_x, u_y) has earth-relative components
//!   u_east = u_x cos a + u_y sin a, u_north = -u_x sin a + u_y cos a
//!   (all three projections are conformal, so north is east turned by +90
//!   degrees in the grid too). For Lambert conformal a = n (lon - lon0), the
//!   cone constant times the longitude offset (Snyder eq. 15-1, theta).

use std::f64::consts::{FRAC_PI_2, FRAC_PI_4};

/// Why a projection could not be built.
#[derive(Debug, Clone, PartialEq)]
pub struct ProjectionError(pub String);

impl std::fmt::Display for ProjectionError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

impl std::error::Error for ProjectionError {}

fn check_latitude(name: &str, value: f64, open: bool) -> Result<(), ProjectionError> {
    let limit_ok = if open { value.abs() < 90.0 } else { value.abs() <= 90.0 };
    if !value.is_finite() || !limit_ok {
        return Err(ProjectionError(format!(
            "{name} = {value} is not a valid latitude (expected {} -90 and 90 degrees)",
            if open { "strictly between" } else { "between" }
        )));
    }
    Ok(())
}

fn check_finite(name: &str, value: f64) -> Result<(), ProjectionError> {
    if !value.is_finite() {
        return Err(ProjectionError(format!("{name} = {value} is not a finite number")));
    }
    Ok(())
}

fn check_radius(radius: f64) -> Result<(), ProjectionError> {
    if !(radius.is_finite() && radius > 1.0) {
        return Err(ProjectionError(format!("earth radius {radius} m is not a positive length")));
    }
    Ok(())
}

/// Brings a longitude difference in radians into [-pi, pi).
fn wrap_pi(angle: f64) -> f64 {
    (angle + std::f64::consts::PI).rem_euclid(std::f64::consts::TAU) - std::f64::consts::PI
}

/// Lambert conformal conic projection on a sphere (Snyder 1987, section 15).
#[derive(Debug, Clone, PartialEq)]
pub struct LambertConformal {
    pub standard_parallels: (f64, f64),
    pub central_meridian: f64,
    pub origin_latitude: f64,
    pub false_easting: f64,
    pub false_northing: f64,
    pub radius: f64,
    /// Cone constant n (Snyder eq. 15-3, or sin(phi1) for one parallel).
    pub cone_constant: f64,
    /// R F (Snyder eq. 15-2 times the radius).
    radius_f: f64,
    /// rho0 (Snyder eq. 15-1a at the origin latitude).
    rho0: f64,
}

impl LambertConformal {
    /// One standard parallel: pass it twice. Fails on a parallel at a pole
    /// or the equator (no cone), on parallels of opposite sign, or on an
    /// origin at the pole opposite to the cone's apex.
    pub fn new(
        standard_parallels: (f64, f64),
        central_meridian: f64,
        origin_latitude: f64,
        false_easting: f64,
        false_northing: f64,
        radius: f64,
    ) -> Result<Self, ProjectionError> {
        check_latitude("standard_parallel", standard_parallels.0, true)?;
        check_latitude("standard_parallel", standard_parallels.1, true)?;
        check_latitude("latitude_of_projection_origin", origin_latitude, true)?;
        check_finite("longitude_of_central_meridian", central_meridian)?;
        check_finite("false_easting", false_easting)?;
        check_finite("false_northing", false_northing)?;
        check_radius(radius)?;
        let (p1, p2) = (standard_parallels.0.to_radians(), standard_parallels.1.to_radians());
        if p1 * p2 <= 0.0 {
            return Err(ProjectionError(format!(
                "standard parallels {} and {} must be on the same side of the equator and not on it",
                standard_parallels.0, standard_parallels.1
            )));
        }
        let t = |phi: f64| (FRAC_PI_4 + phi / 2.0).tan();
        // Snyder eq. (15-3); the one-parallel limit is n = sin(phi1).
        let n = if (p1 - p2).abs() < 1e-10 { p1.sin() } else { (p1.cos() / p2.cos()).ln() / (t(p2) / t(p1)).ln() };
        // Snyder eq. (15-2).
        let f = p1.cos() * t(p1).powf(n) / n;
        let radius_f = radius * f;
        let rho0 = radius_f / t(origin_latitude.to_radians()).powf(n);
        Ok(Self {
            standard_parallels,
            central_meridian,
            origin_latitude,
            false_easting,
            false_northing,
            radius,
            cone_constant: n,
            radius_f,
            rho0,
        })
    }

    fn rho(&self, phi: f64) -> f64 {
        // Snyder eq. (15-1a); at the pole opposite the apex rho is infinite.
        self.radius_f / (FRAC_PI_4 + phi / 2.0).tan().powf(self.cone_constant)
    }

    fn forward(&self, lat: f64, lon: f64) -> (f64, f64) {
        let rho = self.rho(lat.to_radians());
        let theta = self.cone_constant * wrap_pi((lon - self.central_meridian).to_radians());
        // Snyder eqs. (14-1), (14-2).
        (self.false_easting + rho * theta.sin(), self.false_northing + self.rho0 - rho * theta.cos())
    }

    fn inverse(&self, x: f64, y: f64) -> (f64, f64) {
        let n = self.cone_constant;
        let (dx, dy) = (x - self.false_easting, self.rho0 - (y - self.false_northing));
        // Snyder eqs. (14-10), (14-11): rho and theta take the sign of n.
        let rho = n.signum() * dx.hypot(dy);
        let theta = (n.signum() * dx).atan2(n.signum() * dy);
        // Snyder eq. (15-5); rho = 0 is the apex (a pole).
        let phi = if rho == 0.0 { n.signum() * FRAC_PI_2 } else { 2.0 * (self.radius_f / rho).powf(1.0 / n).atan() - FRAC_PI_2 };
        let lon = self.central_meridian + (theta / n).to_degrees();
        (phi.to_degrees(), lon)
    }

    fn map_factor(&self, lat: f64) -> f64 {
        // Snyder eq. (15-4): k = rho n / (R cos phi).
        let phi = lat.to_radians();
        self.rho(phi) * self.cone_constant / (self.radius * phi.cos())
    }
}

/// Which pole a polar stereographic projection is centred on.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Pole {
    North,
    South,
}

/// Polar stereographic projection on a sphere (Snyder 1987, section 21).
#[derive(Debug, Clone, PartialEq)]
pub struct PolarStereographic {
    pub pole: Pole,
    /// Longitude pointing from the pole straight down the grid's y axis
    /// (CF `straight_vertical_longitude_from_pole`).
    pub straight_vertical_longitude: f64,
    /// Scale factor at the pole, k0.
    pub scale_factor: f64,
    pub false_easting: f64,
    pub false_northing: f64,
    pub radius: f64,
}

impl PolarStereographic {
    /// Scale at the pole given directly (k0).
    pub fn with_scale_factor(
        pole: Pole,
        straight_vertical_longitude: f64,
        scale_factor: f64,
        false_easting: f64,
        false_northing: f64,
        radius: f64,
    ) -> Result<Self, ProjectionError> {
        check_finite("straight_vertical_longitude_from_pole", straight_vertical_longitude)?;
        check_finite("false_easting", false_easting)?;
        check_finite("false_northing", false_northing)?;
        check_radius(radius)?;
        if !(scale_factor.is_finite() && scale_factor > 0.0 && scale_factor <= 1.0 + 1e-12) {
            return Err(ProjectionError(format!(
                "scale_factor_at_projection_origin = {scale_factor} is outside (0, 1]"
            )));
        }
        Ok(Self { pole, straight_vertical_longitude, scale_factor, false_easting, false_northing, radius })
    }

    /// True scale along a standard parallel (latitude of true scale): on a
    /// sphere k0 = (1 + sin|phi_c|) / 2 (Snyder eq. 21-4 at the pole, solved
    /// for k0 with k = 1 at phi_c). The parallel must be in the pole's
    /// hemisphere.
    pub fn with_standard_parallel(
        pole: Pole,
        straight_vertical_longitude: f64,
        standard_parallel: f64,
        false_easting: f64,
        false_northing: f64,
        radius: f64,
    ) -> Result<Self, ProjectionError> {
        check_latitude("standard_parallel", standard_parallel, false)?;
        let right_side = match pole {
            Pole::North => standard_parallel > 0.0,
            Pole::South => standard_parallel < 0.0,
        };
        if !right_side {
            return Err(ProjectionError(format!(
                "standard_parallel = {standard_parallel} is not in the hemisphere of the projection's pole ({:?})",
                pole
            )));
        }
        let k0 = (1.0 + standard_parallel.to_radians().sin().abs()) / 2.0;
        Self::with_scale_factor(pole, straight_vertical_longitude, k0, false_easting, false_northing, radius)
    }

    fn sign(&self) -> f64 {
        match self.pole {
            Pole::North => 1.0,
            Pole::South => -1.0,
        }
    }

    fn forward(&self, lat: f64, lon: f64) -> (f64, f64) {
        let s = self.sign();
        let phi = lat.to_radians();
        let dl = (lon - self.straight_vertical_longitude).to_radians();
        // Snyder eqs. (21-5) to (21-7) (north) and (21-12) to (21-14) (south),
        // written with s = +1 (north) or -1 (south).
        let rho = 2.0 * self.radius * self.scale_factor * (FRAC_PI_4 - s * phi / 2.0).tan();
        (self.false_easting + rho * dl.sin(), self.false_northing - s * rho * dl.cos())
    }

    fn inverse(&self, x: f64, y: f64) -> (f64, f64) {
        let s = self.sign();
        let (dx, dy) = (x - self.false_easting, y - self.false_northing);
        let rho = dx.hypot(dy);
        // Snyder eq. (20-18) with phi1 = +-90: c = 2 arctan(rho / (2 R k0)),
        // phi = s (90 - c) (eq. 20-14); lambda from eqs. (20-16), (20-17).
        let c = 2.0 * (rho / (2.0 * self.radius * self.scale_factor)).atan();
        let lat = s * (FRAC_PI_2 - c);
        let lon = if rho == 0.0 { 0.0 } else { dx.atan2(-s * dy) };
        (lat.to_degrees(), self.straight_vertical_longitude + lon.to_degrees())
    }

    fn map_factor(&self, lat: f64) -> f64 {
        // Snyder eq. (21-4) in the polar aspect: k = 2 k0 / (1 + s sin phi).
        2.0 * self.scale_factor / (1.0 + self.sign() * lat.to_radians().sin())
    }
}

/// A latitude-longitude grid whose pole is moved (CF `rotated_latitude_longitude`).
#[derive(Debug, Clone, PartialEq)]
pub struct RotatedPole {
    /// True latitude and longitude of the rotated grid's north pole.
    pub pole_latitude: f64,
    pub pole_longitude: f64,
    /// Longitude of the true north pole in the rotated grid (CF
    /// `north_pole_grid_longitude`, 0 by default).
    pub north_pole_grid_longitude: f64,
    pub radius: f64,
    /// Rotated basis in true Cartesian coordinates: x' towards rotated
    /// (0, 0), y' towards rotated (0, 90 E), z' the rotated pole.
    basis: [[f64; 3]; 3],
}

impl RotatedPole {
    pub fn new(pole_latitude: f64, pole_longitude: f64, north_pole_grid_longitude: f64, radius: f64) -> Result<Self, ProjectionError> {
        check_latitude("grid_north_pole_latitude", pole_latitude, false)?;
        check_finite("grid_north_pole_longitude", pole_longitude)?;
        check_finite("north_pole_grid_longitude", north_pole_grid_longitude)?;
        check_radius(radius)?;
        let (pp, lp) = (pole_latitude.to_radians(), pole_longitude.to_radians());
        // z' is the pole; x' the point 90 degrees from it on the meridian of
        // the pole, beyond the true north pole (so the true north pole lies on
        // the rotated meridian 0); y' = z' x x'.
        let z = [pp.cos() * lp.cos(), pp.cos() * lp.sin(), pp.sin()];
        let x = [-pp.sin() * lp.cos(), -pp.sin() * lp.sin(), pp.cos()];
        let y = [lp.sin(), -lp.cos(), 0.0];
        Ok(Self { pole_latitude, pole_longitude, north_pole_grid_longitude, radius, basis: [x, y, z] })
    }

    fn forward(&self, lat: f64, lon: f64) -> (f64, f64) {
        let (phi, lambda) = (lat.to_radians(), lon.to_radians());
        let p = [phi.cos() * lambda.cos(), phi.cos() * lambda.sin(), phi.sin()];
        let dot = |b: &[f64; 3]| b[0] * p[0] + b[1] * p[1] + b[2] * p[2];
        let (px, py, pz) = (dot(&self.basis[0]), dot(&self.basis[1]), dot(&self.basis[2]));
        let rotated_lat = pz.clamp(-1.0, 1.0).asin();
        let rotated_lon = wrap_pi(py.atan2(px) + self.north_pole_grid_longitude.to_radians());
        (rotated_lon.to_degrees(), rotated_lat.to_degrees())
    }

    fn inverse(&self, rotated_lon: f64, rotated_lat: f64) -> (f64, f64) {
        let phi = rotated_lat.to_radians();
        let lambda = (rotated_lon - self.north_pole_grid_longitude).to_radians();
        let (a, b, c) = (phi.cos() * lambda.cos(), phi.cos() * lambda.sin(), phi.sin());
        let [x, y, z] = &self.basis;
        let p = [a * x[0] + b * y[0] + c * z[0], a * x[1] + b * y[1] + c * z[1], a * x[2] + b * y[2] + c * z[2]];
        let lat = p[2].clamp(-1.0, 1.0).asin();
        let lon = p[1].atan2(p[0]);
        (lat.to_degrees(), lon.to_degrees())
    }
}

/// One of the supported projections.
#[derive(Debug, Clone, PartialEq)]
pub enum Projection {
    LambertConformal(LambertConformal),
    PolarStereographic(PolarStereographic),
    RotatedPole(RotatedPole),
}

impl Projection {
    /// The CF grid_mapping_name of this projection.
    pub fn cf_name(&self) -> &'static str {
        match self {
            Projection::LambertConformal(_) => "lambert_conformal_conic",
            Projection::PolarStereographic(_) => "polar_stereographic",
            Projection::RotatedPole(_) => "rotated_latitude_longitude",
        }
    }

    pub fn radius(&self) -> f64 {
        match self {
            Projection::LambertConformal(p) => p.radius,
            Projection::PolarStereographic(p) => p.radius,
            Projection::RotatedPole(p) => p.radius,
        }
    }

    /// True when the grid coordinates are rotated longitude and latitude in
    /// degrees rather than metres.
    pub fn is_angular(&self) -> bool {
        matches!(self, Projection::RotatedPole(_))
    }

    /// One line for metadata and tables.
    pub fn describe(&self) -> String {
        match self {
            Projection::LambertConformal(p) => format!(
                "Lambert conformal conic, standard parallels {} and {}, central meridian {}, origin latitude {}, cone constant {:.6}, sphere of radius {} m",
                p.standard_parallels.0, p.standard_parallels.1, p.central_meridian, p.origin_latitude, p.cone_constant, p.radius
            ),
            Projection::PolarStereographic(p) => format!(
                "polar stereographic ({:?} pole), straight vertical longitude {}, scale factor at the pole {:.6}, sphere of radius {} m",
                p.pole, p.straight_vertical_longitude, p.scale_factor, p.radius
            ),
            Projection::RotatedPole(p) => format!(
                "rotated latitude-longitude, grid north pole at {} N {} E, north pole grid longitude {}, sphere of radius {} m",
                p.pole_latitude, p.pole_longitude, p.north_pole_grid_longitude, p.radius
            ),
        }
    }

    /// Grid coordinates (x, y) of a point given in degrees: metres, or
    /// rotated (longitude, latitude) in degrees for a rotated grid.
    pub fn forward(&self, latitude: f64, longitude: f64) -> (f64, f64) {
        match self {
            Projection::LambertConformal(p) => p.forward(latitude, longitude),
            Projection::PolarStereographic(p) => p.forward(latitude, longitude),
            Projection::RotatedPole(p) => p.forward(latitude, longitude),
        }
    }

    /// (latitude, longitude) in degrees of grid coordinates (x, y).
    /// Longitudes come back in (-180, 180] about the central meridian.
    pub fn inverse(&self, x: f64, y: f64) -> (f64, f64) {
        match self {
            Projection::LambertConformal(p) => p.inverse(x, y),
            Projection::PolarStereographic(p) => p.inverse(x, y),
            Projection::RotatedPole(p) => p.inverse(x, y),
        }
    }

    /// Map scale factor k (grid length over true length) at a point. For a
    /// rotated grid, the grid is a latitude-longitude grid on the rotated
    /// sphere, so its x scale is 1 / cos(rotated latitude) per unit of
    /// rotated angle, as on any latitude-longitude grid; this returns that.
    pub fn map_factor(&self, latitude: f64, longitude: f64) -> f64 {
        match self {
            Projection::LambertConformal(p) => p.map_factor(latitude),
            Projection::PolarStereographic(p) => p.map_factor(latitude),
            Projection::RotatedPole(p) => 1.0 / p.forward(latitude, longitude).1.to_radians().cos(),
        }
    }

    /// Angle (radians, counterclockwise from the grid's x axis) of the local
    /// eastward direction. Computed from the projection itself (a centred
    /// difference of `forward` along the parallel), so one formula serves
    /// every projection; tests check it against the closed forms
    /// (Lambert: n (lon - lon0)). NaN at a pole, where east is undefined.
    pub fn east_angle(&self, latitude: f64, longitude: f64) -> f64 {
        if (latitude.abs() - 90.0).abs() < 1e-9 {
            return f64::NAN;
        }
        // 1e-4 degree: truncation error ~h^2 (1e-12 rad), rounding ~1e-16 *
        // 1e7 m / 10 m ~ 1e-10 rad.
        let h = 1e-4;
        let (x1, y1) = self.forward(latitude, longitude - h);
        let (x2, y2) = self.forward(latitude, longitude + h);
        let (mut dx, dy) = (x2 - x1, y2 - y1);
        if self.is_angular() {
            // Rotated longitude is an angle: bring the difference across the
            // seam, and scale by cos(rotated latitude) to get a length.
            if dx > 180.0 {
                dx -= 360.0;
            } else if dx < -180.0 {
                dx += 360.0;
            }
            dx *= self.forward(latitude, longitude).1.to_radians().cos();
        }
        dy.atan2(dx)
    }

    /// The CF grid-mapping attributes that describe this projection (the
    /// inverse of `from_cf`), for writing results on the same grid.
    pub fn cf_attributes(&self) -> Vec<(&'static str, Vec<f64>)> {
        match self {
            Projection::LambertConformal(p) => vec![
                ("standard_parallel", vec![p.standard_parallels.0, p.standard_parallels.1]),
                ("longitude_of_central_meridian", vec![p.central_meridian]),
                ("latitude_of_projection_origin", vec![p.origin_latitude]),
                ("false_easting", vec![p.false_easting]),
                ("false_northing", vec![p.false_northing]),
                ("earth_radius", vec![p.radius]),
            ],
            Projection::PolarStereographic(p) => vec![
                ("latitude_of_projection_origin", vec![if p.pole == Pole::North { 90.0 } else { -90.0 }]),
                ("straight_vertical_longitude_from_pole", vec![p.straight_vertical_longitude]),
                ("scale_factor_at_projection_origin", vec![p.scale_factor]),
                ("false_easting", vec![p.false_easting]),
                ("false_northing", vec![p.false_northing]),
                ("earth_radius", vec![p.radius]),
            ],
            Projection::RotatedPole(p) => vec![
                ("grid_north_pole_latitude", vec![p.pole_latitude]),
                ("grid_north_pole_longitude", vec![p.pole_longitude]),
                ("north_pole_grid_longitude", vec![p.north_pole_grid_longitude]),
                ("earth_radius", vec![p.radius]),
            ],
        }
    }

    /// Builds a projection from a CF grid mapping. `number(name)` returns a
    /// numeric attribute of the grid-mapping variable (all its values) and
    /// `default_radius` is used when the mapping names no sphere. Returns
    /// the projection and notes for the metadata (for example that an
    /// ellipsoid was replaced by a sphere). The error names the missing or
    /// invalid attribute and what would be valid.
    pub fn from_cf(
        grid_mapping_name: &str,
        number: &dyn Fn(&str) -> Option<Vec<f64>>,
        default_radius: f64,
    ) -> Result<(Projection, Vec<String>), ProjectionError> {
        let mut notes = Vec::new();
        let one = |name: &str| number(name).and_then(|v| v.first().copied());
        let required = |name: &str| {
            one(name).ok_or_else(|| ProjectionError(format!("grid mapping '{grid_mapping_name}' lacks the attribute '{name}'")))
        };
        let radius = match (one("earth_radius"), one("semi_major_axis"), one("semi_minor_axis"), one("inverse_flattening")) {
            (Some(r), _, _, _) => r,
            (None, Some(a), b, f) => {
                let sphere = b.is_none_or(|b| (b - a).abs() < 1e-6 * a) && f.is_none_or(|f| f == 0.0);
                if !sphere {
                    notes.push(format!(
                        "the grid mapping gives an ellipsoid (semi_major_axis {a} m); spherical formulas are used with that radius"
                    ));
                }
                a
            }
            _ => {
                notes.push(format!("the grid mapping names no earth radius; the sphere of radius {default_radius} m is used"));
                default_radius
            }
        };
        let false_easting = one("false_easting").unwrap_or(0.0);
        let false_northing = one("false_northing").unwrap_or(0.0);
        let projection = match grid_mapping_name {
            "lambert_conformal_conic" => {
                let parallels = number("standard_parallel").ok_or_else(|| {
                    ProjectionError(format!("grid mapping '{grid_mapping_name}' lacks the attribute 'standard_parallel' (one or two latitudes)"))
                })?;
                let parallels = match parallels.as_slice() {
                    [a] => (*a, *a),
                    [a, b] => (*a, *b),
                    other => {
                        return Err(ProjectionError(format!(
                            "grid mapping '{grid_mapping_name}': standard_parallel has {} values; expected one or two",
                            other.len()
                        )))
                    }
                };
                Projection::LambertConformal(LambertConformal::new(
                    parallels,
                    required("longitude_of_central_meridian")?,
                    required("latitude_of_projection_origin")?,
                    false_easting,
                    false_northing,
                    radius,
                )?)
            }
            "polar_stereographic" => {
                let origin = required("latitude_of_projection_origin")?;
                let pole = if (origin - 90.0).abs() < 1e-9 {
                    Pole::North
                } else if (origin + 90.0).abs() < 1e-9 {
                    Pole::South
                } else {
                    return Err(ProjectionError(format!(
                        "grid mapping '{grid_mapping_name}': latitude_of_projection_origin = {origin}; expected 90 or -90"
                    )));
                };
                let vertical = one("straight_vertical_longitude_from_pole")
                    .or_else(|| one("longitude_of_projection_origin"))
                    .ok_or_else(|| {
                        ProjectionError(format!("grid mapping '{grid_mapping_name}' lacks the attribute 'straight_vertical_longitude_from_pole'"))
                    })?;
                match (one("standard_parallel"), one("scale_factor_at_projection_origin")) {
                    (Some(parallel), _) => Projection::PolarStereographic(PolarStereographic::with_standard_parallel(
                        pole,
                        vertical,
                        parallel,
                        false_easting,
                        false_northing,
                        radius,
                    )?),
                    (None, Some(k0)) => Projection::PolarStereographic(PolarStereographic::with_scale_factor(
                        pole,
                        vertical,
                        k0,
                        false_easting,
                        false_northing,
                        radius,
                    )?),
                    (None, None) => {
                        return Err(ProjectionError(format!(
                            "grid mapping '{grid_mapping_name}' needs either 'standard_parallel' or 'scale_factor_at_projection_origin'"
                        )))
                    }
                }
            }
            "rotated_latitude_longitude" => Projection::RotatedPole(RotatedPole::new(
                required("grid_north_pole_latitude")?,
                required("grid_north_pole_longitude")?,
                one("north_pole_grid_longitude").unwrap_or(0.0),
                radius,
            )?),
            other => {
                return Err(ProjectionError(format!(
                    "grid mapping '{other}' is not supported; supported are lambert_conformal_conic, polar_stereographic, rotated_latitude_longitude and latitude_longitude"
                )))
            }
        };
        Ok((projection, notes))
    }
}

/// A regular grid in a projection's coordinates with everything the physics
/// needs at each point, computed once: true latitude and longitude, map
/// factor, Coriolis latitude and the rotation between grid and earth axes.
///
/// Arrays are [row (y), column (x)] flattened row by row, the same layout as
/// a field's horizontal slice.
#[derive(Debug, Clone, PartialEq)]
pub struct ProjectedGrid {
    pub projection: Projection,
    /// Grid x coordinates (metres, or rotated longitude in degrees).
    pub x: Vec<f64>,
    /// Grid y coordinates (metres, or rotated latitude in degrees).
    pub y: Vec<f64>,
    pub latitude: Vec<f64>,
    pub longitude: Vec<f64>,
    /// Map factor m at each point (see `Projection::map_factor`).
    pub map_factor: Vec<f64>,
    /// cos and sin of `Projection::east_angle` at each point.
    pub east_cos: Vec<f64>,
    pub east_sin: Vec<f64>,
    /// d/dx_earth = inverse_scale_x * d/dx_grid, per grid unit (per metre,
    /// or per radian of rotated longitude), likewise for y.
    pub inverse_scale_x: Vec<f64>,
    pub inverse_scale_y: Vec<f64>,
    /// Per-point coefficients of the gradient (physics::projected), made
    /// once per grid on first use rather than on every call.
    pub gradient_coefficients: GridCache<[Vec<f32>; 4]>,
    /// Per-point coefficients of balanced (geostrophic, thermal) winds,
    /// kept for the last few (rotation rate, scale, equator band) asked.
    pub balanced_coefficients: GridCache<std::sync::Mutex<Vec<([u64; 3], std::sync::Arc<[Vec<f32>; 4]>)>>>,
}

/// A value computed from a grid once, on first use. It is derived from the
/// grid, so two grids are equal whether or not either has filled it, and a
/// copy of a grid starts with it empty (grids are shared behind `Arc`, so
/// copies are rare).
#[derive(Debug, Default)]
pub struct GridCache<T>(std::sync::OnceLock<T>);

impl<T> Clone for GridCache<T> {
    fn clone(&self) -> Self {
        Self(std::sync::OnceLock::new())
    }
}

impl<T> GridCache<T> {
    pub fn get_or_init(&self, make: impl FnOnce() -> T) -> &T {
        self.0.get_or_init(make)
    }
}

impl<T> PartialEq for GridCache<T> {
    fn eq(&self, _: &Self) -> bool {
        true
    }
}

impl ProjectedGrid {
    pub fn new(projection: Projection, x: Vec<f64>, y: Vec<f64>) -> Self {
        let (nx, ny) = (x.len(), y.len());
        let n = nx * ny;
        let mut grid = Self {
            projection,
            latitude: Vec::with_capacity(n),
            longitude: Vec::with_capacity(n),
            map_factor: Vec::with_capacity(n),
            east_cos: Vec::with_capacity(n),
            east_sin: Vec::with_capacity(n),
            inverse_scale_x: Vec::with_capacity(n),
            inverse_scale_y: Vec::with_capacity(n),
            gradient_coefficients: GridCache::default(),
            balanced_coefficients: GridCache::default(),
            x,
            y,
        };
        let radius = grid.projection.radius();
        for j in 0..ny {
            for i in 0..nx {
                let (lat, lon) = grid.projection.inverse(grid.x[i], grid.y[j]);
                let angle = grid.projection.east_angle(lat, lon);
                let (sx, sy, m) = if grid.projection.is_angular() {
                    // A latitude-longitude grid on the rotated sphere: d/dx =
                    // 1/(a cos lat') d/dlon', d/dy = 1/a d/dlat' (field guide);
                    // NaN at the rotated poles.
                    let c = grid.y[j].to_radians().cos();
                    let sx = if c.abs() < 1e-12 { f64::NAN } else { 1.0 / (radius * c) };
                    (sx, 1.0 / radius, 1.0 / c)
                } else {
                    let m = grid.projection.map_factor(lat, lon);
                    (m, m, m)
                };
                grid.latitude.push(lat);
                grid.longitude.push(lon);
                grid.map_factor.push(m);
                grid.east_cos.push(angle.cos());
                grid.east_sin.push(angle.sin());
                grid.inverse_scale_x.push(sx);
                grid.inverse_scale_y.push(sy);
            }
        }
        grid
    }

    pub fn shape(&self) -> (usize, usize) {
        (self.y.len(), self.x.len())
    }

    /// Grid coordinates in the units the derivative stencils use: metres, or
    /// radians for a rotated grid.
    pub fn stencil_coordinates(&self) -> (Vec<f64>, Vec<f64>) {
        if self.projection.is_angular() {
            (self.x.iter().map(|v| v.to_radians()).collect(), self.y.iter().map(|v| v.to_radians()).collect())
        } else {
            (self.x.clone(), self.y.clone())
        }
    }

    /// Rotates grid-relative components to eastward and northward in place,
    /// on [slice, y, x] data flattened (slices one after another).
    pub fn rotate_to_earth(&self, along_x: &mut [f32], along_y: &mut [f32]) {
        let n = self.east_cos.len().max(1);
        for (k, (u, v)) in along_x.iter_mut().zip(along_y.iter_mut()).enumerate() {
            let (c, s) = (self.east_cos[k % n], self.east_sin[k % n]);
            let (gx, gy) = (*u as f64, *v as f64);
            *u = (gx * c + gy * s) as f32;
            *v = (-gx * s + gy * c) as f32;
        }
    }

    /// Rotates eastward and northward components to grid-relative in place
    /// (the inverse of `rotate_to_earth`).
    pub fn rotate_to_grid(&self, eastward: &mut [f32], northward: &mut [f32]) {
        let n = self.east_cos.len().max(1);
        for (k, (u, v)) in eastward.iter_mut().zip(northward.iter_mut()).enumerate() {
            let (c, s) = (self.east_cos[k % n], self.east_sin[k % n]);
            let (e, nn) = (*u as f64, *v as f64);
            *u = (e * c - nn * s) as f32;
            *v = (e * s + nn * c) as f32;
        }
    }

    /// The grid cell nearest a point given in degrees: (row, column), or
    /// None when the point falls outside the grid by more than half a cell.
    pub fn nearest_cell(&self, latitude: f64, longitude: f64) -> Option<(usize, usize)> {
        let (x, y) = self.projection.forward(latitude, longitude);
        Some((nearest_index(&self.y, y)?, nearest_index(&self.x, x)?))
    }

    /// Rows and columns of the cells whose centres lie inside a
    /// latitude-longitude box (south, north, west, east in degrees; west may
    /// exceed east across the date line). Empty when none do.
    pub fn cells_in_box(&self, south: f64, north: f64, west: f64, east: f64) -> Vec<(usize, usize)> {
        let (ny, nx) = self.shape();
        let mut out = Vec::new();
        for j in 0..ny {
            for i in 0..nx {
                let k = j * nx + i;
                let (lat, lon) = (self.latitude[k], self.longitude[k]);
                if lat < south || lat > north {
                    continue;
                }
                let from_west = (lon - west).rem_euclid(360.0);
                let width = (east - west).rem_euclid(360.0);
                let width = if width == 0.0 && east != west { 360.0 } else { width };
                if from_west <= width + 1e-9 {
                    out.push((j, i));
                }
            }
        }
        out
    }
}

fn nearest_index(axis: &[f64], value: f64) -> Option<usize> {
    if axis.is_empty() || !value.is_finite() {
        return None;
    }
    let (k, distance) = axis
        .iter()
        .enumerate()
        .map(|(k, &a)| (k, (a - value).abs()))
        .fold((0, f64::INFINITY), |best, c| if c.1 < best.1 { c } else { best });
    let spacing = if axis.len() > 1 { (axis[axis.len() - 1] - axis[0]).abs() / (axis.len() - 1) as f64 } else { f64::INFINITY };
    (distance <= 0.5 * spacing + 1e-9).then_some(k)
}

#[cfg(test)]
mod tests {
    use super::*;

    const R: f64 = 6_371_000.0;

    fn lcc2() -> Projection {
        Projection::LambertConformal(LambertConformal::new((33.0, 45.0), -97.0, 40.0, 0.0, 0.0, R).unwrap())
    }

    fn all() -> Vec<Projection> {
        vec![
            lcc2(),
            Projection::LambertConformal(LambertConformal::new((50.0, 50.0), 10.0, 50.0, 1000.0, -2000.0, R).unwrap()),
            Projection::LambertConformal(LambertConformal::new((-30.0, -60.0), 140.0, -45.0, 0.0, 0.0, R).unwrap()),
            Projection::PolarStereographic(PolarStereographic::with_standard_parallel(Pole::North, -105.0, 60.0, 0.0, 0.0, R).unwrap()),
            Projection::PolarStereographic(PolarStereographic::with_scale_factor(Pole::South, 0.0, 0.97, 5e5, 5e5, R).unwrap()),
            Projection::RotatedPole(RotatedPole::new(40.0, -170.0, 0.0, R).unwrap()),
        ]
    }

    fn points(p: &Projection) -> Vec<(f64, f64)> {
        let lats: &[f64] = match p {
            Projection::PolarStereographic(ps) if ps.pole == Pole::South => &[-80.0, -65.0, -50.0, -30.0],
            Projection::LambertConformal(l) if l.cone_constant < 0.0 => &[-70.0, -50.0, -30.0, -10.0],
            _ => &[20.0, 35.0, 50.0, 65.0, 80.0],
        };
        let mut out = Vec::new();
        for &lat in lats {
            for dl in [-50.0, -20.0, 0.0, 15.0, 45.0] {
                let centre = match p {
                    Projection::LambertConformal(l) => l.central_meridian,
                    Projection::PolarStereographic(s) => s.straight_vertical_longitude,
                    Projection::RotatedPole(_) => 10.0,
                };
                out.push((lat, centre + dl));
            }
        }
        out
    }

    #[test]
    fn inverse_undoes_forward() {
        // A projection and its inverse must compose to the identity (Snyder's
        // forward and inverse equations are exact inverses).
        for p in all() {
            for (lat, lon) in points(&p) {
                let (x, y) = p.forward(lat, lon);
                let (lat2, lon2) = p.inverse(x, y);
                assert!((lat - lat2).abs() < 1e-9, "{}: lat {lat} -> {lat2}", p.cf_name());
                let dl = (lon - lon2 + 540.0).rem_euclid(360.0) - 180.0;
                assert!(dl.abs() < 1e-9, "{}: lon {lon} -> {lon2}", p.cf_name());
            }
        }
    }

    #[test]
    fn snyder_worked_example_lambert() {
        // Snyder (1987), numerical example for the Lambert conformal conic on
        // the sphere: R = 1, phi1 = 33 N, phi2 = 45 N, phi0 = 23 N, lambda0 =
        // 96 W; the point 35 N, 75 W gives n = 0.6304777, x = 0.2966785,
        // y = 0.2462112, k = 0.9970040 (values from memory of the worked
        // example; pyproj checks the same formulas in
        // tests/python/test_projection_pyproj.py). The constructor refuses
        // radii below 1 m, so the unit sphere is scaled.
        let scale = 1.0e6;
        let p = LambertConformal::new((33.0, 45.0), -96.0, 23.0, 0.0, 0.0, scale).unwrap();
        assert!((p.cone_constant - 0.6304777).abs() < 1e-7);
        let (x, y) = p.forward(35.0, -75.0);
        assert!((x / scale - 0.2966785).abs() < 1e-7, "x {}", x / scale);
        assert!((y / scale - 0.2462112).abs() < 1e-7, "y {}", y / scale);
        assert!((p.map_factor(35.0) - 0.9970040).abs() < 1e-7);
    }

    #[test]
    fn snyder_worked_example_polar_stereographic() {
        // Snyder (1987) eqs. (21-5) to (21-7), north polar aspect on the
        // sphere, evaluated by hand: rho = 2 R k0 tan(45 - phi/2),
        // x = rho sin(lambda - lambda0), y = -rho cos(lambda - lambda0).
        let k0 = 0.994;
        let p = PolarStereographic::with_scale_factor(Pole::North, -100.0, k0, 0.0, 0.0, 1.0e6).unwrap();
        let (x, y) = p.forward(60.0, -70.0);
        let rho = 2.0 * 1.0e6 * k0 * (15.0f64).to_radians().tan();
        assert!((x - rho * 30f64.to_radians().sin()).abs() < 1e-6);
        assert!((y + rho * 30f64.to_radians().cos()).abs() < 1e-6);
        // True scale at 60 N when k0 = (1 + sin 60)/2.
        let q = PolarStereographic::with_standard_parallel(Pole::North, 0.0, 60.0, 0.0, 0.0, R).unwrap();
        assert!((q.map_factor(60.0) - 1.0).abs() < 1e-12);
    }

    #[test]
    fn east_angle_of_lambert_is_cone_constant_times_longitude_offset() {
        // Snyder eq. (15-1): theta = n (lambda - lambda0) is the angle between
        // the meridian and the grid's y axis; east is the x axis turned by it.
        for p in [lcc2(), all()[1].clone(), all()[2].clone()] {
            let Projection::LambertConformal(l) = &p else { unreachable!() };
            for (lat, lon) in points(&p) {
                let expected = l.cone_constant * (lon - l.central_meridian).to_radians();
                let got = p.east_angle(lat, lon);
                assert!((got - expected).abs() < 1e-8, "lat {lat} lon {lon}: {got} vs {expected}");
            }
        }
    }

    #[test]
    fn east_angle_of_polar_stereographic_is_the_longitude_offset() {
        // From eqs. (21-5) to (21-7): east is the x axis turned by
        // (lambda - lambda0) at the north pole and by -(lambda - lambda0) at the south.
        let north = &all()[3];
        let south = &all()[4];
        for (p, sign) in [(north, 1.0), (south, -1.0)] {
            let Projection::PolarStereographic(s) = p else { unreachable!() };
            for (lat, lon) in points(p) {
                let expected = wrap_pi(sign * (lon - s.straight_vertical_longitude).to_radians());
                assert!((p.east_angle(lat, lon) - expected).abs() < 1e-8);
            }
        }
    }

    #[test]
    fn rotation_preserves_speed_and_round_trips() {
        let p = lcc2();
        let x: Vec<f64> = (0..5).map(|i| -1.0e6 + 5.0e5 * i as f64).collect();
        let y: Vec<f64> = (0..4).map(|j| -5.0e5 + 5.0e5 * j as f64).collect();
        let g = ProjectedGrid::new(p, x, y);
        let mut u: Vec<f32> = (0..20).map(|k| 10.0 + k as f32).collect();
        let mut v: Vec<f32> = (0..20).map(|k| 5.0 - k as f32).collect();
        let (u0, v0) = (u.clone(), v.clone());
        g.rotate_to_earth(&mut u, &mut v);
        for k in 0..20 {
            assert!((u[k].hypot(v[k]) - u0[k].hypot(v0[k])).abs() < 1e-4);
        }
        g.rotate_to_grid(&mut u, &mut v);
        for k in 0..20 {
            assert!((u[k] - u0[k]).abs() < 1e-4 && (v[k] - v0[k]).abs() < 1e-4);
        }
    }

    #[test]
    fn missing_parameters_are_named() {
        let attrs = |pairs: Vec<(&'static str, Vec<f64>)>| move |name: &str| pairs.iter().find(|(n, _)| *n == name).map(|(_, v)| v.clone());
        let err = Projection::from_cf("lambert_conformal_conic", &attrs(vec![("standard_parallel", vec![30.0, 60.0])]), R).unwrap_err();
        assert!(err.0.contains("longitude_of_central_meridian"), "{err}");
        let err = Projection::from_cf("polar_stereographic", &attrs(vec![("latitude_of_projection_origin", vec![90.0]), ("straight_vertical_longitude_from_pole", vec![0.0])]), R)
            .unwrap_err();
        assert!(err.0.contains("standard_parallel") && err.0.contains("scale_factor_at_projection_origin"), "{err}");
        let err = Projection::from_cf("transverse_mercator", &attrs(vec![]), R).unwrap_err();
        assert!(err.0.contains("not supported"), "{err}");
        let err = Projection::from_cf("rotated_latitude_longitude", &attrs(vec![("grid_north_pole_latitude", vec![40.0])]), R).unwrap_err();
        assert!(err.0.contains("grid_north_pole_longitude"), "{err}");
        let (p, notes) = Projection::from_cf(
            "lambert_conformal_conic",
            &attrs(vec![("standard_parallel", vec![45.0]), ("longitude_of_central_meridian", vec![0.0]), ("latitude_of_projection_origin", vec![45.0])]),
            R,
        )
        .unwrap();
        assert_eq!(p.radius(), R);
        assert_eq!(notes.len(), 1);
        // cf_attributes is the inverse of from_cf.
        for q in all() {
            let a = q.cf_attributes();
            let look = |name: &str| a.iter().find(|(n, _)| *n == name).map(|(_, v)| v.clone());
            let (back, _) = Projection::from_cf(q.cf_name(), &look, 1.0e6).unwrap();
            assert_eq!(back, q);
        }
    }

    #[test]
    fn point_and_box_select_cells_by_inverse_projection() {
        let p = lcc2();
        let x: Vec<f64> = (0..41).map(|i| -1.0e6 + 5.0e4 * i as f64).collect();
        let y: Vec<f64> = (0..41).map(|j| -1.0e6 + 5.0e4 * j as f64).collect();
        let g = ProjectedGrid::new(p.clone(), x, y);
        let (lat, lon) = p.inverse(g.x[7], g.y[30]);
        assert_eq!(g.nearest_cell(lat, lon), Some((30, 7)));
        assert_eq!(g.nearest_cell(-60.0, 20.0), None);
        let cells = g.cells_in_box(38.0, 42.0, -99.0, -95.0);
        assert!(!cells.is_empty());
        for (j, i) in cells {
            let k = j * 41 + i;
            assert!(g.latitude[k] >= 38.0 && g.latitude[k] <= 42.0 && g.longitude[k] >= -99.0 && g.longitude[k] <= -95.0);
        }
    }
}
