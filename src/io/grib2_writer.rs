//! A small GRIB2 writer: one field per message, simple packing (template
//! 5.0), grid templates 3.0 (latitude-longitude) and 3.30 (Lambert
//! conformal), product template 4.0 on isobaric, hybrid (with their
//! vertical coordinate values) or ground-surface levels. Enough for demo
//! cases and for tests that need no outside tool; layouts follow WMO-No. 306
//! Volume I.2, FM 92 GRIB edition 2 (sections 0 to 8).
//!
//! Values are given in the grid's scan order. NaN values are written as
//! missing through a bitmap (section 6). Precision: with `bits` bits per
//! value and no decimal scaling, a value is off by at most half of
//! 2^E, the smallest power of two with (max - min) / 2^E < 2^bits.

use std::path::Path;

use super::grib2::{GridDefinition, LambertConformal, LatLonGrid};

/// The level of a message (code table 4.5).
#[derive(Debug, Clone, PartialEq)]
pub enum Level {
    /// An isobaric surface, in Pa (type 100).
    Isobaric(f64),
    /// A hybrid model level by number (type 105), with the vertical
    /// coordinate values (a coefficients of the half levels, then b).
    Hybrid { number: u32, pv: Vec<f64> },
    /// The ground or water surface (type 1).
    Ground,
}

/// One field to write.
#[derive(Debug, Clone)]
pub struct Message<'a> {
    /// Discipline, parameter category and number (code tables 0.0, 4.1, 4.2).
    pub discipline: u8,
    pub category: u8,
    pub number: u8,
    /// Reference time, seconds since 1970-01-01 00:00:00 UTC.
    pub reference_time: i64,
    /// Forecast time in hours (time unit code 1 of table 4.4).
    pub forecast_hours: u32,
    pub level: Level,
    pub grid: &'a GridDefinition,
    /// Values in the grid's scan order; NaN is missing.
    pub values: &'a [f32],
    /// Bits per packed value, 1 to 32 (16 is plenty for most fields).
    pub bits: u8,
}

struct Sink(Vec<u8>);

impl Sink {
    fn u8(&mut self, v: u8) -> &mut Self {
        self.0.push(v);
        self
    }
    fn u16(&mut self, v: u16) -> &mut Self {
        self.0.extend_from_slice(&v.to_be_bytes());
        self
    }
    fn u32(&mut self, v: u32) -> &mut Self {
        self.0.extend_from_slice(&v.to_be_bytes());
        self
    }
    /// Sign and magnitude (WMO-No. 306 regulation 92.1.5).
    fn i32(&mut self, v: i64) -> &mut Self {
        let magnitude = (v.unsigned_abs() as u32) & 0x7fff_ffff;
        self.u32(if v < 0 { magnitude | 0x8000_0000 } else { magnitude })
    }
    fn i16(&mut self, v: i32) -> &mut Self {
        let magnitude = (v.unsigned_abs() as u16) & 0x7fff;
        self.u16(if v < 0 { magnitude | 0x8000 } else { magnitude })
    }
    fn f32(&mut self, v: f32) -> &mut Self {
        self.u32(v.to_bits())
    }
    fn micro_degrees(&mut self, degrees: f64) -> &mut Self {
        self.i32((degrees * 1e6).round() as i64)
    }
    /// Longitudes go out in 0 to 360 degrees.
    fn longitude(&mut self, degrees: f64) -> &mut Self {
        self.u32((degrees.rem_euclid(360.0) * 1e6).round() as u32 % 360_000_000)
    }
    /// A section: its length and number first.
    fn section(&mut self, number: u8, body: impl FnOnce(&mut Sink)) {
        let start = self.0.len();
        self.u32(0).u8(number);
        body(self);
        let length = (self.0.len() - start) as u32;
        self.0[start..start + 4].copy_from_slice(&length.to_be_bytes());
    }
}

fn earth(s: &mut Sink) {
    // Shape 6: a sphere of radius 6,371,229 m (code table 3.2); the radius
    // and axes fields are then missing.
    s.u8(6).u8(0xff).u32(0xffff_ffff).u8(0xff).u32(0xffff_ffff).u8(0xff).u32(0xffff_ffff);
}

fn latlon(s: &mut Sink, g: &LatLonGrid) {
    earth(s);
    s.u32(g.ni as u32).u32(g.nj as u32).u32(0).u32(0xffff_ffff);
    s.micro_degrees(g.first_latitude).longitude(g.first_longitude).u8(g.resolution_flags | 0x30);
    s.micro_degrees(g.last_latitude).longitude(g.last_longitude);
    let increment = |v: Option<f64>| v.map_or(0xffff_ffff, |d| (d.abs() * 1e6).round() as u32);
    s.u32(increment(g.i_increment)).u32(increment(g.j_increment)).u8(g.scanning_mode);
}

fn lambert(s: &mut Sink, g: &LambertConformal) {
    earth(s);
    s.u32(g.nx as u32).u32(g.ny as u32).micro_degrees(g.first_latitude).longitude(g.first_longitude).u8(g.resolution_flags);
    s.micro_degrees(g.true_scale_latitude).longitude(g.orientation_longitude);
    s.u32((g.dx_metres * 1e3).round() as u32).u32((g.dy_metres * 1e3).round() as u32);
    s.u8(g.projection_centre_flag).u8(g.scanning_mode);
    s.micro_degrees(g.first_standard_parallel).micro_degrees(g.second_standard_parallel);
    s.micro_degrees(g.south_pole_latitude).longitude(g.south_pole_longitude);
}

/// Simple packing of the present values: reference value R, binary scale E
/// and the packed integers X, with value = R + X * 2^E (template 5.0,
/// decimal scale 0).
fn pack(values: &[f32], bits: u8) -> (f32, i32, u8, Vec<u8>) {
    let present: Vec<f64> = values.iter().filter(|v| !v.is_nan()).map(|&v| v as f64).collect();
    let (min, max) = present.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
    if present.is_empty() || max == min {
        // A constant field: zero bits per value, every value is R.
        return (if present.is_empty() { 0.0 } else { min as f32 }, 0, 0, Vec::new());
    }
    // R must not exceed the minimum once stored as f32.
    let mut reference = min as f32;
    if reference as f64 > min {
        reference = f32::from_bits(if reference > 0.0 { reference.to_bits() - 1 } else { reference.to_bits() + 1 });
    }
    let largest = ((1u64 << bits) - 1) as f64;
    let range = max - reference as f64;
    let mut scale = (range / largest).log2().ceil() as i32;
    while range / 2f64.powi(scale) > largest {
        scale += 1;
    }
    let step = 2f64.powi(scale);
    let mut packed = vec![0u8; (present.len() * bits as usize).div_ceil(8)];
    let mut bit = 0usize;
    for v in present {
        let x = (((v - reference as f64) / step).round() as u64).min(largest as u64);
        for b in (0..bits).rev() {
            if x >> b & 1 == 1 {
                packed[bit / 8] |= 0x80 >> (bit % 8);
            }
            bit += 1;
        }
    }
    (reference, scale, bits, packed)
}

/// Encodes one message. Fails on a grid template the writer does not
/// write, a value count that does not match the grid, or bits outside 1..=32.
pub fn encode(message: &Message) -> Result<Vec<u8>, String> {
    if !(1..=32).contains(&message.bits) {
        return Err(format!("bits per value must be 1 to 32, not {}", message.bits));
    }
    let points = message.grid.points();
    if message.values.len() != points {
        return Err(format!("{} values given for a grid of {points} points", message.values.len()));
    }
    let mut s = Sink(Vec::new());
    s.0.extend_from_slice(b"GRIB");
    s.u16(0).u8(message.discipline).u8(2).u32(0).u32(0);
    let days = message.reference_time.div_euclid(86400);
    let rest = message.reference_time.rem_euclid(86400);
    let (year, month, day) = super::grib2::civil_from_days(days);
    s.section(1, |s| {
        // Centre missing, master tables version 4, no local tables, the
        // reference time is the start of the forecast, research product,
        // forecast (code tables 1.0 to 1.4).
        s.u16(0xffff).u16(0).u8(4).u8(0).u8(1);
        s.u16(year as u16).u8(month as u8).u8(day as u8).u8((rest / 3600) as u8).u8((rest % 3600 / 60) as u8).u8((rest % 60) as u8);
        s.u8(2).u8(1);
    });
    let template = match message.grid {
        GridDefinition::LatLon(_) => 0u16,
        GridDefinition::LambertConformal(_) => 30,
        other => return Err(format!("the writer writes grid templates 3.0 and 3.30, not 3.{} ({})", other.template(), other.name())),
    };
    s.section(3, |s| {
        s.u8(0).u32(points as u32).u8(0).u8(0).u16(template);
        match message.grid {
            GridDefinition::LatLon(g) => latlon(s, g),
            GridDefinition::LambertConformal(g) => lambert(s, g),
            _ => unreachable!("refused above"),
        }
    });
    let pv: &[f64] = match &message.level {
        Level::Hybrid { pv, .. } => pv,
        _ => &[],
    };
    s.section(4, |s| {
        s.u16(pv.len() as u16).u16(0).u8(message.category).u8(message.number);
        // Forecast, no background or process identifiers, no cut-off.
        s.u8(2).u8(0xff).u8(0xff).u16(0).u8(0).u8(1).u32(message.forecast_hours);
        match &message.level {
            Level::Isobaric(pa) => s.u8(100).u8(0).i32(pa.round() as i64),
            Level::Hybrid { number, .. } => s.u8(105).u8(0).i32(*number as i64),
            Level::Ground => s.u8(1).u8(0xff).u32(0xffff_ffff),
        };
        s.u8(0xff).u8(0xff).u32(0xffff_ffff);
        for &c in pv {
            s.f32(c as f32);
        }
    });
    let present = message.values.iter().filter(|v| !v.is_nan()).count();
    let (reference, scale, bits, packed) = pack(message.values, message.bits);
    s.section(5, |s| {
        s.u32(present as u32).u16(0).f32(reference).i16(scale).i16(0).u8(bits).u8(0);
    });
    s.section(6, |s| {
        if present == points {
            s.u8(255);
        } else {
            s.u8(0);
            let mut map = vec![0u8; points.div_ceil(8)];
            for (k, v) in message.values.iter().enumerate() {
                if !v.is_nan() {
                    map[k / 8] |= 0x80 >> (k % 8);
                }
            }
            s.0.extend_from_slice(&map);
        }
    });
    s.section(7, |s| s.0.extend_from_slice(&packed));
    s.0.extend_from_slice(b"7777");
    let total = s.0.len() as u64;
    s.0[8..16].copy_from_slice(&total.to_be_bytes());
    Ok(s.0)
}

/// Writes messages to one file, atomically (`atomic::write`).
pub fn write_file(path: &Path, messages: &[Message]) -> Result<(), String> {
    let mut bytes = Vec::new();
    for m in messages {
        bytes.extend(encode(m)?);
    }
    crate::atomic::write(path, &bytes).map_err(|e| format!("cannot write {}: {e}", path.display()))
}

#[cfg(test)]
mod tests {
    use super::super::grib2::{self, Earth};
    use super::super::grib2_source::GribSource;
    use super::*;
    use crate::io::{DataSource, Selection};

    fn earth() -> Earth {
        Earth { shape: 6, radius: None, major_axis: None, minor_axis: None }
    }

    fn latlon_grid(scanning_mode: u8) -> GridDefinition {
        // 5 latitudes 40..60 N and 7 longitudes 350..20 E (across the
        // meridian), 5-degree spacing.
        let (first_latitude, last_latitude) = if scanning_mode & 0x40 != 0 { (40.0, 60.0) } else { (60.0, 40.0) };
        let (first_longitude, last_longitude) = if scanning_mode & 0x80 != 0 { (20.0, 350.0) } else { (350.0, 20.0) };
        GridDefinition::LatLon(LatLonGrid {
            ni: 7,
            nj: 5,
            first_latitude,
            first_longitude,
            last_latitude,
            last_longitude,
            i_increment: Some(5.0),
            j_increment: Some(5.0),
            resolution_flags: 0x30,
            scanning_mode,
            earth: earth(),
        })
    }

    #[test]
    fn written_fields_read_back_in_every_scan_direction() {
        let dir = tempfile::tempdir().unwrap();
        for mode in [0x00u8, 0x40, 0x80, 0xc0, 0x20, 0x60] {
            let grid = latlon_grid(mode);
            let GridDefinition::LatLon(g) = &grid else { unreachable!() };
            // A value that encodes latitude and longitude, placed in scan order.
            let mut values = Vec::new();
            let (ni, nj) = (g.ni, g.nj);
            let lat_of = |j: usize| if mode & 0x40 != 0 { 40.0 + 5.0 * j as f64 } else { 60.0 - 5.0 * j as f64 };
            let lon_of = |i: usize| if mode & 0x80 != 0 { 20.0 - 5.0 * i as f64 } else { -10.0 + 5.0 * i as f64 };
            let value = |lat: f64, lon: f64| (lat * 10.0 + lon) as f32;
            for p in 0..ni * nj {
                let (j, i) = if mode & 0x20 != 0 { (p % nj, p / nj) } else { (p / ni, p % ni) };
                let lon = lon_of(i);
                values.push(value(lat_of(j), if lon > 180.0 { lon - 360.0 } else { lon }));
            }
            values[3] = f32::NAN;
            let path = dir.path().join(format!("scan{mode}.grib2"));
            let message = Message {
                discipline: 0,
                category: 0,
                number: 0,
                reference_time: grib2::days_from_civil(2031, 4, 12) * 86400 + 6 * 3600,
                forecast_hours: 12,
                level: Level::Isobaric(50000.0),
                grid: &grid,
                values: &values,
                bits: 24,
            };
            write_file(&path, &[message]).unwrap();
            let source = GribSource::open(&[&path]).unwrap();
            let field = source.read("t", &Selection::default()).unwrap();
            assert_eq!(field.levels, Some(vec![50000.0]));
            assert_eq!(field.times.as_ref().unwrap().units, "hours since 2031-04-12 18:00:00");
            let lons = &field.grid.longitudes;
            assert!(lons.windows(2).all(|w| w[1] > w[0]), "west to east: {lons:?}");
            let mut nan = 0;
            for (j, &lat) in field.grid.latitudes.iter().enumerate() {
                for (i, &lon) in lons.iter().enumerate() {
                    let got = field.data[[0, 0, j, i]];
                    if got.is_nan() {
                        nan += 1;
                        continue;
                    }
                    let lon = if lon > 180.0 { lon - 360.0 } else { lon };
                    assert!((got - value(lat, lon)).abs() < 1e-3, "mode {mode:#x} at {lat},{lon}: {got}");
                }
            }
            assert_eq!(nan, 1, "the bitmap's one missing value is NaN");
        }
    }

    #[test]
    fn lambert_and_hybrid_metadata_survive_a_round_trip() {
        let grid = GridDefinition::LambertConformal(LambertConformal {
            nx: 4,
            ny: 3,
            first_latitude: 35.5,
            first_longitude: -8.25,
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
            earth: earth(),
        });
        let values: Vec<f32> = (0..12).map(|k| 280.0 + k as f32).collect();
        let pv = vec![0.0, 2000.0, 0.0, 0.0, 0.25, 1.0];
        let bytes = encode(&Message {
            discipline: 0,
            category: 0,
            number: 0,
            reference_time: 0,
            forecast_hours: 0,
            level: Level::Hybrid { number: 2, pv: pv.clone() },
            grid: &grid,
            values: &values,
            bits: 16,
        })
        .unwrap();
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("lcc.grib2");
        std::fs::write(&path, &bytes).unwrap();
        let fields = grib2::index_file(&path).unwrap();
        let GridDefinition::LambertConformal(back) = &fields[0].grid else { panic!("not Lambert") };
        let GridDefinition::LambertConformal(sent) = &grid else { unreachable!() };
        // Longitudes go out in 0..360 (WMO-No. 306 template 3.30 note).
        assert_eq!(back.first_longitude, 351.75);
        assert_eq!(LambertConformal { first_longitude: -8.25, ..back.clone() }, sent.clone());
        assert_eq!(fields[0].product.first_surface, grib2::Surface { kind: 105, value: Some(2.0) });
        assert_eq!(fields[0].product.pv, pv);
        // The grid is read as a projected grid of 4 x 3 points.
        let source = GribSource::open(&[&path]).unwrap();
        let grid = &source.variables()[0].grid;
        assert_eq!(grid.projection.as_ref().expect("projected").shape(), (3, 4));
    }

    #[test]
    fn packing_error_stays_within_half_a_step() {
        let values: Vec<f32> = (0..1000).map(|k| 220.0 + (k as f32 * 0.37).sin() * 60.0).collect();
        let (reference, scale, bits, packed) = pack(&values, 12);
        assert_eq!(bits, 12);
        assert!(reference <= 160.0 + 1e-3);
        // Unpack by hand: value = R + X * 2^E.
        let step = 2f64.powi(scale);
        for (k, v) in values.iter().enumerate() {
            let mut x = 0u64;
            for b in 0..12 {
                let bit = k * 12 + b;
                x = x << 1 | ((packed[bit / 8] >> (7 - bit % 8)) & 1) as u64;
            }
            let back = reference as f64 + x as f64 * step;
            assert!((back - *v as f64).abs() <= step / 2.0 + 1e-4, "{back} vs {v}");
        }
        assert!(step < 120.0 / 2048.0 * 2.0);
    }
}
