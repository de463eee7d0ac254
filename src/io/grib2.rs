//! GRIB edition 2: finding the messages of a file and reading their
//! metadata sections (WMO Manual on Codes, WMO-No. 306, Volume I.2, FM 92
//! GRIB edition 2: sections 0 to 8, grid templates 3.0, 3.1, 3.20 and 3.30,
//! product templates 4.0 to 4.15, code tables 4.2, 4.4 and 4.5).
//!
//! Only metadata are read here, once, by offset: the sections that hold the
//! packed values (5, 6, 7) are located, not read, so that a source can later
//! decode exactly the messages asked for (`grib2_source`). Unpacking itself
//! is left to the `grib` crate.
//!
//! Every failure names the file and the message number (1-based, in file
//! order; a message with several fields counts its fields as `message N
//! field K`). Nothing here panics on a malformed file: every read of the
//! input is bounds-checked.

use std::fs::File;
use std::io::{Read, Seek, SeekFrom};
use std::path::Path;

use super::DataError;

/// What the first bytes of a file say it is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FileKind {
    Grib2,
    Grib1,
    Other,
}

/// Looks at the first eight bytes: "GRIB" then the edition number in octet 8
/// (GRIB1 and GRIB2 both keep the edition there; WMO-No. 306, section 0).
pub fn file_kind(path: &Path) -> FileKind {
    let mut head = [0u8; 8];
    let Ok(mut file) = File::open(path) else { return FileKind::Other };
    if file.read_exact(&mut head).is_err() || &head[..4] != b"GRIB" {
        return FileKind::Other;
    }
    match head[7] {
        2 => FileKind::Grib2,
        1 => FileKind::Grib1,
        _ => FileKind::Other,
    }
}

/// A byte range of the file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Span {
    pub offset: u64,
    pub length: u64,
}

/// The shape of the earth (code table 3.2) with its radius or axes, in m.
#[derive(Debug, Clone, PartialEq)]
pub struct Earth {
    pub shape: u8,
    pub radius: Option<f64>,
    pub major_axis: Option<f64>,
    pub minor_axis: Option<f64>,
}

/// Grid template 3.0 (and the lat-lon part of 3.1): degrees, in scan order.
#[derive(Debug, Clone, PartialEq)]
pub struct LatLonGrid {
    pub ni: usize,
    pub nj: usize,
    pub first_latitude: f64,
    pub first_longitude: f64,
    pub last_latitude: f64,
    pub last_longitude: f64,
    /// None when the increments are not given (flag table 3.3 bits 3 and 4).
    pub i_increment: Option<f64>,
    pub j_increment: Option<f64>,
    pub resolution_flags: u8,
    pub scanning_mode: u8,
    pub earth: Earth,
}

/// Grid template 3.20, polar stereographic.
#[derive(Debug, Clone, PartialEq)]
pub struct PolarStereographic {
    pub nx: usize,
    pub ny: usize,
    pub first_latitude: f64,
    pub first_longitude: f64,
    /// Latitude where Dx and Dy are true (LaD), degrees.
    pub true_scale_latitude: f64,
    /// Orientation of the grid: the meridian parallel to the y axis (LoV).
    pub orientation_longitude: f64,
    pub dx_metres: f64,
    pub dy_metres: f64,
    /// Projection centre flag (flag table 3.5): bit 1 set means the south pole.
    pub projection_centre_flag: u8,
    pub resolution_flags: u8,
    pub scanning_mode: u8,
    pub earth: Earth,
}

/// Grid template 3.30, Lambert conformal.
#[derive(Debug, Clone, PartialEq)]
pub struct LambertConformal {
    pub nx: usize,
    pub ny: usize,
    pub first_latitude: f64,
    pub first_longitude: f64,
    pub true_scale_latitude: f64,
    pub orientation_longitude: f64,
    pub dx_metres: f64,
    pub dy_metres: f64,
    pub projection_centre_flag: u8,
    pub resolution_flags: u8,
    pub scanning_mode: u8,
    /// The two secant latitudes (equal for the tangent case).
    pub first_standard_parallel: f64,
    pub second_standard_parallel: f64,
    pub south_pole_latitude: f64,
    pub south_pole_longitude: f64,
    pub earth: Earth,
}

/// A grid definition (section 3), as parsed; only `LatLon` maps onto
/// `grid::Grid` until projected grids are supported.
#[derive(Debug, Clone, PartialEq)]
pub enum GridDefinition {
    LatLon(LatLonGrid),
    /// Template 3.1: a lat-lon grid on a rotated sphere.
    RotatedLatLon { grid: LatLonGrid, south_pole_latitude: f64, south_pole_longitude: f64, rotation_angle: f64 },
    PolarStereographic(PolarStereographic),
    LambertConformal(LambertConformal),
}

impl GridDefinition {
    pub fn template(&self) -> u16 {
        match self {
            GridDefinition::LatLon(_) => 0,
            GridDefinition::RotatedLatLon { .. } => 1,
            GridDefinition::PolarStereographic(_) => 20,
            GridDefinition::LambertConformal(_) => 30,
        }
    }

    pub fn name(&self) -> &'static str {
        match self {
            GridDefinition::LatLon(_) => "latitude-longitude",
            GridDefinition::RotatedLatLon { .. } => "rotated latitude-longitude",
            GridDefinition::PolarStereographic(_) => "polar stereographic",
            GridDefinition::LambertConformal(_) => "Lambert conformal",
        }
    }

    /// Number of points the grid holds.
    pub fn points(&self) -> usize {
        match self {
            GridDefinition::LatLon(g) | GridDefinition::RotatedLatLon { grid: g, .. } => g.ni * g.nj,
            GridDefinition::PolarStereographic(g) => g.nx * g.ny,
            GridDefinition::LambertConformal(g) => g.nx * g.ny,
        }
    }

    /// The parameters as `key=value` pairs (degrees, metres), for messages
    /// and for the cross-check against a reference decoder.
    pub fn parameters(&self) -> String {
        let earth = |e: &Earth| format!("earth_shape={}", e.shape);
        match self {
            GridDefinition::LatLon(g) => latlon_parameters(g),
            GridDefinition::RotatedLatLon { grid, south_pole_latitude, south_pole_longitude, rotation_angle } => format!(
                "{} south_pole_latitude={south_pole_latitude} south_pole_longitude={south_pole_longitude} rotation_angle={rotation_angle}",
                latlon_parameters(grid)
            ),
            GridDefinition::PolarStereographic(g) => format!(
                "nx={} ny={} first_latitude={} first_longitude={} true_scale_latitude={} orientation_longitude={} dx_metres={} dy_metres={} projection_centre_flag={} scanning_mode={} resolution_flags={} {}",
                g.nx, g.ny, g.first_latitude, g.first_longitude, g.true_scale_latitude, g.orientation_longitude, g.dx_metres, g.dy_metres,
                g.projection_centre_flag, g.scanning_mode, g.resolution_flags, earth(&g.earth)
            ),
            GridDefinition::LambertConformal(g) => format!(
                "nx={} ny={} first_latitude={} first_longitude={} true_scale_latitude={} orientation_longitude={} dx_metres={} dy_metres={} projection_centre_flag={} scanning_mode={} first_standard_parallel={} second_standard_parallel={} south_pole_latitude={} south_pole_longitude={} resolution_flags={} {}",
                g.nx, g.ny, g.first_latitude, g.first_longitude, g.true_scale_latitude, g.orientation_longitude, g.dx_metres, g.dy_metres,
                g.projection_centre_flag, g.scanning_mode, g.first_standard_parallel, g.second_standard_parallel, g.south_pole_latitude,
                g.south_pole_longitude, g.resolution_flags, earth(&g.earth)
            ),
        }
    }
}

fn latlon_parameters(g: &LatLonGrid) -> String {
    format!(
        "ni={} nj={} first_latitude={} first_longitude={} last_latitude={} last_longitude={} i_increment={} j_increment={} scanning_mode={} resolution_flags={} earth_shape={}",
        g.ni,
        g.nj,
        g.first_latitude,
        g.first_longitude,
        g.last_latitude,
        g.last_longitude,
        g.i_increment.map_or("missing".into(), |v| v.to_string()),
        g.j_increment.map_or("missing".into(), |v| v.to_string()),
        g.scanning_mode,
        g.resolution_flags,
        g.earth.shape
    )
}

/// A fixed surface (code table 4.5) with its value in the surface's units
/// (Pa for isobaric surfaces, the level number for hybrid levels).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Surface {
    pub kind: u8,
    pub value: Option<f64>,
}

/// Fixed-surface types Baroc names (code table 4.5).
pub const SURFACE_GROUND: u8 = 1;
pub const SURFACE_ISOBARIC: u8 = 100;
pub const SURFACE_MEAN_SEA_LEVEL: u8 = 101;
pub const SURFACE_HEIGHT_ABOVE_GROUND: u8 = 103;
pub const SURFACE_HYBRID: u8 = 105;

/// The product definition (section 4) fields Baroc uses.
#[derive(Debug, Clone, PartialEq)]
pub struct Product {
    pub template: u16,
    pub category: u8,
    pub number: u8,
    /// Indicator of unit of time range (code table 4.4).
    pub time_unit: u8,
    pub forecast_time: i64,
    pub first_surface: Surface,
    pub second_surface: Surface,
    /// Vertical coordinate values (for hybrid levels: the a and b
    /// coefficients of the half levels, a first), from the end of section 4.
    pub pv: Vec<f64>,
}

/// One field of a GRIB2 file, located but not decoded.
#[derive(Debug, Clone)]
pub struct FieldIndex {
    /// 1-based message number in the file.
    pub message: usize,
    /// 1-based field number within the message (1 for most files).
    pub field: usize,
    pub discipline: u8,
    /// Reference time (section 1) as seconds since 1970-01-01 00:00:00 UTC.
    pub reference_time: i64,
    pub grid: GridDefinition,
    pub product: Product,
    /// Data representation template number (code table 5.0).
    pub packing: u16,
    pub section5: Span,
    pub section6: Span,
    pub section7: Span,
}

impl FieldIndex {
    /// "message 3" or "message 3 field 2".
    pub fn label(&self) -> String {
        if self.field == 1 {
            format!("message {}", self.message)
        } else {
            format!("message {} field {}", self.message, self.field)
        }
    }

    /// Valid time: reference time plus forecast time, in seconds since 1970.
    pub fn valid_time(&self) -> Result<i64, String> {
        let seconds = time_unit_seconds(self.product.time_unit).ok_or_else(|| {
            format!(
                "the unit of its forecast time is code {} of code table 4.4, which Baroc does not read (it reads minutes, hours, days, 3, 6 and 12 hours, and seconds)",
                self.product.time_unit
            )
        })?;
        Ok(self.reference_time + self.product.forecast_time * seconds)
    }
}

/// Seconds per unit of code table 4.4 (months and years vary, so are not
/// accepted).
pub fn time_unit_seconds(code: u8) -> Option<i64> {
    Some(match code {
        0 => 60,
        1 => 3600,
        2 => 86400,
        10 => 3 * 3600,
        11 => 6 * 3600,
        12 => 12 * 3600,
        13 => 1,
        _ => return None,
    })
}

/// Packings that the decoder unpacks (code table 5.0).
pub fn packing_name(template: u16) -> Option<&'static str> {
    Some(match template {
        0 => "simple packing",
        2 => "complex packing",
        3 => "complex packing with spatial differencing",
        40 => "JPEG 2000",
        41 => "PNG",
        42 => "CCSDS",
        200 => "run-length packing",
        _ => return None,
    })
}

/// Days from 1970-01-01 to a date of the proleptic Gregorian calendar
/// (the days-from-civil algorithm; H. Hinnant, "chrono-Compatible Low-Level
/// Date Algorithms").
pub fn days_from_civil(year: i64, month: i64, day: i64) -> i64 {
    let y = if month <= 2 { year - 1 } else { year };
    let era = (if y >= 0 { y } else { y - 399 }) / 400;
    let yoe = y - era * 400;
    let mp = (month + 9) % 12;
    let doy = (153 * mp + 2) / 5 + day - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146097 + doe - 719468
}

/// The inverse of `days_from_civil`: (year, month, day).
pub fn civil_from_days(days: i64) -> (i64, i64, i64) {
    let z = days + 719468;
    let era = (if z >= 0 { z } else { z - 146096 }) / 146097;
    let doe = z - era * 146097;
    let yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let day = doy - (153 * mp + 2) / 5 + 1;
    let month = if mp < 10 { mp + 3 } else { mp - 9 };
    (if month <= 2 { yoe + era * 400 + 1 } else { yoe + era * 400 }, month, day)
}

/// "YYYY-MM-DD HH:MM:SS" of seconds since 1970.
pub fn format_time(seconds: i64) -> String {
    let days = seconds.div_euclid(86400);
    let rest = seconds.rem_euclid(86400);
    let (y, m, d) = civil_from_days(days);
    format!("{y:04}-{m:02}-{d:02} {:02}:{:02}:{:02}", rest / 3600, rest % 3600 / 60, rest % 60)
}

// Reading big-endian numbers from a section, octets numbered from 1 as in
// the WMO tables. Signed numbers are sign and magnitude (WMO-No. 306,
// GRIB2 regulation 92.1.5), not two's complement.
struct Octets<'a>(&'a [u8]);

impl Octets<'_> {
    fn get(&self, octet: usize, count: usize) -> Result<u64, String> {
        let start = octet.checked_sub(1).ok_or("octet 0")?;
        let bytes = self.0.get(start..start + count).ok_or_else(|| format!("section too short (needs octet {})", octet + count - 1))?;
        Ok(bytes.iter().fold(0u64, |acc, &b| (acc << 8) | b as u64))
    }
    fn u8(&self, octet: usize) -> Result<u8, String> {
        Ok(self.get(octet, 1)? as u8)
    }
    fn u16(&self, octet: usize) -> Result<u16, String> {
        Ok(self.get(octet, 2)? as u16)
    }
    fn u32(&self, octet: usize) -> Result<u32, String> {
        Ok(self.get(octet, 4)? as u32)
    }
    fn i8(&self, octet: usize) -> Result<i8, String> {
        let v = self.u8(octet)?;
        Ok(if v & 0x80 != 0 { -((v & 0x7f) as i8) } else { v as i8 })
    }
    fn i32(&self, octet: usize) -> Result<i64, String> {
        let v = self.u32(octet)?;
        Ok(if v & 0x8000_0000 != 0 { -((v & 0x7fff_ffff) as i64) } else { v as i64 })
    }
    /// A signed angle in micro-degrees (the unit when the basic angle is 0
    /// or missing, template 3.0 note 1).
    fn micro_degrees(&self, octet: usize) -> Result<f64, String> {
        Ok(self.i32(octet)? as f64 * 1e-6)
    }
    fn f32(&self, octet: usize) -> Result<f32, String> {
        Ok(f32::from_bits(self.u32(octet)?))
    }
    /// A scale factor and scaled value pair (value = scaled * 10^-factor);
    /// None when either is missing (all bits set).
    fn scaled(&self, octet: usize) -> Result<Option<f64>, String> {
        let factor = self.u8(octet)?;
        let value = self.u32(octet + 1)?;
        if factor == 0xff || value == 0xffff_ffff {
            return Ok(None);
        }
        Ok(Some(self.i32(octet + 1)? as f64 * 10f64.powi(-(self.i8(octet)? as i32))))
    }
}

fn parse_earth(s: &Octets) -> Result<Earth, String> {
    // Octets 15 to 30 of every grid template used here (code table 3.2).
    let radius = s.scaled(16)?;
    let major_axis = s.scaled(21)?;
    let minor_axis = s.scaled(26)?;
    Ok(Earth { shape: s.u8(15)?, radius, major_axis, minor_axis })
}

fn parse_latlon(s: &Octets) -> Result<LatLonGrid, String> {
    // Template 3.0, octets 31 to 72.
    let ni = s.u32(31)? as usize;
    let nj = s.u32(35)? as usize;
    let basic = s.u32(39)?;
    let subdivisions = s.u32(43)?;
    // Angles are in micro-degrees unless a basic angle and subdivisions are
    // given (template 3.0 notes 1 and 2).
    let unit = if basic == 0 || basic == 0xffff_ffff || subdivisions == 0 || subdivisions == 0xffff_ffff {
        1e-6
    } else {
        basic as f64 / subdivisions as f64
    };
    let angle = |octet: usize| -> Result<f64, String> { Ok(s.i32(octet)? as f64 * unit) };
    let flags = s.u8(55)?;
    let increment = |octet: usize, bit: u8| -> Result<Option<f64>, String> {
        let raw = s.u32(octet)?;
        Ok((flags & bit != 0 && raw != 0xffff_ffff).then_some(raw as f64 * unit))
    };
    Ok(LatLonGrid {
        ni,
        nj,
        first_latitude: angle(47)?,
        first_longitude: angle(51)?,
        last_latitude: angle(56)?,
        last_longitude: angle(60)?,
        // Flag table 3.3: bit 3 (0x20) i increment given, bit 4 (0x10) j.
        i_increment: increment(64, 0x20)?,
        j_increment: increment(68, 0x10)?,
        resolution_flags: flags,
        scanning_mode: s.u8(72)?,
        earth: parse_earth(s)?,
    })
}

/// Parses section 3 (the whole section, header included).
pub fn parse_grid(section: &[u8]) -> Result<GridDefinition, String> {
    let s = Octets(section);
    let template = s.u16(13)?;
    if s.u8(6)? != 0 {
        return Err("its grid is not defined by a grid template (section 3, octet 6 is not 0)".into());
    }
    if s.u8(11)? != 0 {
        return Err("its grid has a list of numbers of points per row (a reduced grid), which Baroc does not read".into());
    }
    Ok(match template {
        0 => GridDefinition::LatLon(parse_latlon(&s)?),
        1 => GridDefinition::RotatedLatLon {
            grid: parse_latlon(&s)?,
            south_pole_latitude: s.micro_degrees(73)?,
            south_pole_longitude: s.micro_degrees(77)?,
            rotation_angle: s.f32(81)? as f64,
        },
        20 => GridDefinition::PolarStereographic(PolarStereographic {
            nx: s.u32(31)? as usize,
            ny: s.u32(35)? as usize,
            first_latitude: s.micro_degrees(39)?,
            first_longitude: s.micro_degrees(43)?,
            resolution_flags: s.u8(47)?,
            true_scale_latitude: s.micro_degrees(48)?,
            orientation_longitude: s.micro_degrees(52)?,
            // Dx and Dy are in millimetres (template 3.20 octets 56 to 63).
            dx_metres: s.u32(56)? as f64 * 1e-3,
            dy_metres: s.u32(60)? as f64 * 1e-3,
            projection_centre_flag: s.u8(64)?,
            scanning_mode: s.u8(65)?,
            earth: parse_earth(&s)?,
        }),
        30 => GridDefinition::LambertConformal(LambertConformal {
            nx: s.u32(31)? as usize,
            ny: s.u32(35)? as usize,
            first_latitude: s.micro_degrees(39)?,
            first_longitude: s.micro_degrees(43)?,
            resolution_flags: s.u8(47)?,
            true_scale_latitude: s.micro_degrees(48)?,
            orientation_longitude: s.micro_degrees(52)?,
            dx_metres: s.u32(56)? as f64 * 1e-3,
            dy_metres: s.u32(60)? as f64 * 1e-3,
            projection_centre_flag: s.u8(64)?,
            scanning_mode: s.u8(65)?,
            first_standard_parallel: s.micro_degrees(66)?,
            second_standard_parallel: s.micro_degrees(70)?,
            south_pole_latitude: s.micro_degrees(74)?,
            south_pole_longitude: s.micro_degrees(78)?,
            earth: parse_earth(&s)?,
        }),
        other => {
            return Err(format!(
                "its grid definition template 3.{other} is not supported (Baroc reads 3.0 latitude-longitude; it recognises 3.1, 3.20 and 3.30)"
            ))
        }
    })
}

/// Product templates whose octets 10 to 34 share the layout of template
/// 4.0 (analysis or forecast at a point in time, ensemble and derived
/// forecasts, and their statistically processed forms 4.8, 4.11, 4.12).
const PRODUCT_TEMPLATES: [u16; 7] = [0, 1, 2, 8, 11, 12, 15];

/// Parses section 4 (the whole section, header included).
pub fn parse_product(section: &[u8]) -> Result<Product, String> {
    let s = Octets(section);
    let coordinate_count = s.u16(6)? as usize;
    let template = s.u16(8)?;
    if !PRODUCT_TEMPLATES.contains(&template) {
        return Err(format!(
            "its product definition template 4.{template} is not supported (Baroc reads 4.{})",
            PRODUCT_TEMPLATES.iter().map(|t| t.to_string()).collect::<Vec<_>>().join(", 4.")
        ));
    }
    let surface = |octet: usize| -> Result<Surface, String> { Ok(Surface { kind: s.u8(octet)?, value: s.scaled(octet + 1)? }) };
    // The vertical coordinate values close the section, 4 octets each
    // (IEEE single precision).
    let start = section.len().checked_sub(4 * coordinate_count).filter(|&st| st >= 34).ok_or("section 4 is shorter than its list of vertical coordinate values")?;
    let pv = (0..coordinate_count).map(|k| s.f32(start + 1 + 4 * k).map(|v| v as f64)).collect::<Result<Vec<_>, _>>()?;
    Ok(Product {
        template,
        category: s.u8(10)?,
        number: s.u8(11)?,
        time_unit: s.u8(18)?,
        forecast_time: s.i32(19)?,
        first_surface: surface(23)?,
        second_surface: surface(29)?,
        pv,
    })
}

/// Reference time of section 1 as seconds since 1970.
fn parse_reference_time(section: &[u8]) -> Result<i64, String> {
    let s = Octets(section);
    let (year, month, day) = (s.u16(13)? as i64, s.u8(15)? as i64, s.u8(16)? as i64);
    let (hour, minute, second) = (s.u8(17)? as i64, s.u8(18)? as i64, s.u8(19)? as i64);
    if !(1..=12).contains(&month) || !(1..=31).contains(&day) || hour > 23 || minute > 59 || second > 60 {
        return Err(format!("its reference time {year:04}-{month:02}-{day:02} {hour:02}:{minute:02}:{second:02} is not a valid date"));
    }
    Ok(days_from_civil(year, month, day) * 86400 + hour * 3600 + minute * 60 + second)
}

/// Indexes every field of a GRIB2 file: reads sections 0, 1, 3, 4 and the
/// headers of 5, 6 and 7 (section 6 only for its indicator), and locates
/// the rest. Fails with the file and message number on anything it cannot
/// read: a truncated message, another edition, an unsupported template.
pub fn index_file(path: &Path) -> Result<Vec<FieldIndex>, DataError> {
    let label = path.display().to_string();
    let fail = |message: String| DataError::Invalid(format!("{label}: {message}"));
    let mut file = File::open(path).map_err(|e| DataError::Open { path: label.clone(), message: e.to_string() })?;
    let size = file.metadata().map_err(|e| fail(e.to_string()))?.len();
    let mut fields = Vec::new();
    let mut offset = 0u64;
    let mut message = 0usize;
    let read_at = |file: &mut File, at: u64, buffer: &mut [u8]| -> std::io::Result<()> {
        file.seek(SeekFrom::Start(at))?;
        file.read_exact(buffer)
    };
    while offset < size {
        message += 1;
        let here = format!("message {message} (byte {offset})");
        let mut head = [0u8; 16];
        if size - offset < 16 || read_at(&mut file, offset, &mut head).is_err() {
            return Err(fail(format!("{here} is truncated: the file ends inside its indicator section")));
        }
        if &head[..4] != b"GRIB" {
            if message == 1 {
                return Err(fail("is not a GRIB file (it does not start with \"GRIB\")".into()));
            }
            // Padding after the last message is tolerated only if it is all
            // zero bytes; anything else is reported.
            let mut rest = vec![0u8; (size - offset).min(1 << 16) as usize];
            let _ = read_at(&mut file, offset, &mut rest);
            if rest.iter().all(|&b| b == 0) {
                break;
            }
            return Err(fail(format!("{here} does not start with \"GRIB\"; the file holds something else after message {}", message - 1)));
        }
        if head[7] != 2 {
            return Err(fail(format!(
                "{here} is GRIB edition {}, which Baroc does not read (it reads GRIB edition 2 and CF NetCDF)",
                head[7]
            )));
        }
        let discipline = head[6];
        let total = u64::from_be_bytes(head[8..16].try_into().expect("eight bytes"));
        if total < 16 + 4 || offset + total > size {
            return Err(fail(format!(
                "{here} is truncated: it says it is {total} bytes long, but the file has {} bytes left",
                size - offset
            )));
        }
        let end = offset + total;
        let mut ending = [0u8; 4];
        read_at(&mut file, end - 4, &mut ending).map_err(|e| fail(e.to_string()))?;
        if &ending != b"7777" {
            return Err(fail(format!("{here} is damaged: it does not end with \"7777\" where its length says it should")));
        }
        // Walk the sections; sections 2 to 7 may repeat (several fields in
        // one message), each field closing with its section 7.
        let mut position = offset + 16;
        let mut reference_time = None;
        let mut grid: Option<GridDefinition> = None;
        let mut product: Option<Product> = None;
        let mut section5: Option<(Span, u16)> = None;
        let mut section6: Option<Span> = None;
        let mut last_bitmap: Option<Span> = None;
        let mut field = 0usize;
        while position < end - 4 {
            let mut header = [0u8; 5];
            if position + 5 > end - 4 || read_at(&mut file, position, &mut header).is_err() {
                return Err(fail(format!("{here} is damaged: a section header runs past the end of the message")));
            }
            let length = u32::from_be_bytes(header[..4].try_into().expect("four bytes")) as u64;
            let number = header[4];
            if length < 5 || position + length > end - 4 {
                return Err(fail(format!("{here} is damaged: section {number} says it is {length} bytes long, past the end of the message")));
            }
            let span = Span { offset: position, length };
            let read_section = |file: &mut File| -> Result<Vec<u8>, DataError> {
                let mut body = vec![0u8; length as usize];
                read_at(file, position, &mut body).map_err(|e| fail(e.to_string()))?;
                Ok(body)
            };
            let in_message = |e: String| fail(format!("{here}: {e}"));
            match number {
                1 => reference_time = Some(parse_reference_time(&read_section(&mut file)?).map_err(in_message)?),
                2 => {}
                3 => grid = Some(parse_grid(&read_section(&mut file)?).map_err(in_message)?),
                4 => product = Some(parse_product(&read_section(&mut file)?).map_err(in_message)?),
                5 => {
                    let body = read_section(&mut file)?;
                    let template = Octets(&body).u16(10).map_err(in_message)?;
                    section5 = Some((span, template));
                }
                6 => {
                    let mut indicator = [0u8; 6];
                    read_at(&mut file, position, &mut indicator).map_err(|e| fail(e.to_string()))?;
                    // Code table 6.0: 0 a bitmap follows, 254 the one
                    // defined before in this message, 255 none.
                    match indicator[5] {
                        0 => {
                            last_bitmap = Some(span);
                            section6 = Some(span);
                        }
                        254 => {
                            section6 = Some(last_bitmap.ok_or_else(|| {
                                in_message("its bitmap refers to an earlier bitmap (indicator 254), but the message defines none".into())
                            })?)
                        }
                        255 => section6 = Some(span),
                        other => {
                            return Err(in_message(format!(
                                "its bitmap indicator is {other} (a predefined bitmap), which Baroc does not read"
                            )))
                        }
                    }
                }
                7 => {
                    field += 1;
                    let missing = |what: &str| fail(format!("{here}: section 7 comes before {what}"));
                    let (section5, packing) = section5.ok_or_else(|| missing("section 5"))?;
                    fields.push(FieldIndex {
                        message,
                        field,
                        discipline,
                        reference_time: reference_time.ok_or_else(|| missing("section 1"))?,
                        grid: grid.clone().ok_or_else(|| missing("section 3"))?,
                        product: product.clone().ok_or_else(|| missing("section 4"))?,
                        packing,
                        section5,
                        section6: section6.ok_or_else(|| missing("section 6"))?,
                        section7: span,
                    });
                }
                other => return Err(fail(format!("{here} is damaged: it holds a section numbered {other}"))),
            }
            position += length;
        }
        if field == 0 {
            return Err(fail(format!("{here} holds no data section (section 7)")));
        }
        offset = end;
    }
    if fields.is_empty() {
        return Err(fail("holds no GRIB messages".into()));
    }
    Ok(fields)
}

/// How a message's parameter (discipline, category, number: code table 4.2)
/// appears in Baroc: a short name, units (udunits), a long name, and the CF
/// standard name where one fits.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Parameter {
    pub name: &'static str,
    pub units: &'static str,
    pub long_name: &'static str,
    pub standard_name: Option<&'static str>,
}

/// Code table 4.2 for discipline 0 (meteorological products), the
/// parameters Baroc's roles and diagnostics use.
pub fn parameter(discipline: u8, category: u8, number: u8) -> Option<Parameter> {
    let p = |name, units, long_name, standard_name| Some(Parameter { name, units, long_name, standard_name });
    match (discipline, category, number) {
        (0, 0, 0) => p("t", "K", "temperature", Some("air_temperature")),
        (0, 1, 0) => p("q", "kg kg-1", "specific humidity", Some("specific_humidity")),
        (0, 1, 1) => p("r", "%", "relative humidity", Some("relative_humidity")),
        (0, 2, 2) => p("u", "m s-1", "u-component of wind", Some("eastward_wind")),
        (0, 2, 3) => p("v", "m s-1", "v-component of wind", Some("northward_wind")),
        (0, 2, 8) => p("w", "Pa s-1", "vertical velocity (pressure)", Some("lagrangian_tendency_of_air_pressure")),
        (0, 3, 0) => p("pres", "Pa", "pressure", Some("air_pressure")),
        (0, 3, 1) => p("prmsl", "Pa", "pressure reduced to mean sea level", Some("air_pressure_at_mean_sea_level")),
        (0, 3, 4) => p("z", "m2 s-2", "geopotential", Some("geopotential")),
        (0, 3, 5) => p("gh", "m", "geopotential height", Some("geopotential_height")),
        // "Natural logarithm of pressure in Pa" (units "Numeric"); on the
        // ground or hybrid level 1 it is the log of surface pressure.
        (0, 3, 25) => p("lnsp", "1", "natural logarithm of surface pressure in Pa", None),
        // Discipline 2 (land surface products), category 0 (vegetation and
        // biomass), number 0: "land cover (1=land, 0=sea)".
        (2, 0, 0) => p("lsm", "1", "land cover (1=land, 0=sea)", Some("land_binary_mask")),
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn civil_dates_round_trip() {
        // 1970-01-01 is day 0; 2000-03-01 is day 11017 (the days-from-civil
        // algorithm's own check values).
        assert_eq!(days_from_civil(1970, 1, 1), 0);
        assert_eq!(days_from_civil(2000, 3, 1), 11017);
        for d in [-800_000, -1, 0, 59, 10_000, 20_000, 2_000_000] {
            let (y, m, dd) = civil_from_days(d);
            assert_eq!(days_from_civil(y, m, dd), d);
        }
        assert_eq!(format_time(86400 + 3600 + 61), "1970-01-02 01:01:01");
    }

    #[test]
    fn signed_octets_are_sign_and_magnitude() {
        // WMO-No. 306 regulation 92.1.5: the first bit is the sign.
        let bytes = [0x80, 0x00, 0x00, 0x05, 0x85];
        let s = Octets(&bytes);
        assert_eq!(s.i32(1).unwrap(), -5);
        assert_eq!(s.i8(5).unwrap(), -5);
        assert!(s.u32(3).is_err());
    }

    #[test]
    fn wind_and_temperature_follow_code_table_4_2() {
        // WMO code table 4.2, discipline 0: category 0 number 0 temperature,
        // category 2 numbers 2 and 3 the wind components, category 3
        // numbers 4 and 5 geopotential and geopotential height.
        assert_eq!(parameter(0, 0, 0).unwrap().standard_name, Some("air_temperature"));
        assert_eq!(parameter(0, 2, 2).unwrap().standard_name, Some("eastward_wind"));
        assert_eq!(parameter(0, 2, 3).unwrap().standard_name, Some("northward_wind"));
        assert_eq!(parameter(0, 3, 4).unwrap().units, "m2 s-2");
        assert_eq!(parameter(0, 3, 5).unwrap().units, "m");
        assert_eq!(parameter(10, 0, 0), None);
    }
}
