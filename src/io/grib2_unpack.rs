//! Baroc's own GRIB2 unpackers: data representation templates 5.0 (simple
//! packing), 5.2 (complex packing), 5.3 (complex packing with spatial
//! differencing of order 1 or 2) and 5.42 (CCSDS), with the bitmap of
//! section 6. Plain functions on the bytes of sections 5, 6 and 7, writing
//! into a slice the caller owns; the little scratch they need (group
//! descriptors) lives in a `Scratch` the caller reuses across messages.
//!
//! Sources: WMO Manual on Codes, WMO-No. 306, Volume I.2, FM 92 GRIB
//! edition 2: templates 5.0, 5.2, 5.3 and 5.42 (section 5), 6.0 (bitmap),
//! 7.0, 7.2, 7.3 and 7.42 (section 7), and regulation 92.9.4 for the
//! value of a packed datum, Y = (R + X 2^E) / 10^D, with R the reference
//! value (IEEE single precision), E the binary and D the decimal scale
//! factor (16-bit, sign and magnitude, regulation 92.1.5). Template 5.42
//! packs with the Lossless Data Compression recommendation CCSDS 121.0-B-3
//! (Consultative Committee for Space Data Systems, "Lossless Data
//! Compression", Blue Book, 2020): adaptive entropy coding of blocks
//! (section 3: fundamental sequence, split-sample options, second
//! extension, zero-block runs, no compression) after the unit-delay
//! predictor preprocessor (section 4), with a reference sample opening each
//! reference sample interval. The CCSDS options flags of octet 22 are the
//! ones of libaec, which GRIB2 producers use (signed 1, 3-byte 2, MSB 4,
//! preprocessor 8, restricted 16, padded intervals 32, not enforced 64).
//!
//! The arithmetic follows what the ecCodes library does, so decoded values
//! match its double-precision decode to f32 rounding: X as an integer, then
//! (X 2^E + R) 10^-D in f64, 10^-D formed by repeated division by ten.
//!
//! Nothing here panics on damaged input: a section that ends early or
//! contradicts itself is an `UnpackError::Damaged`; a combination these
//! unpackers do not implement is `UnpackError::Unsupported`, so the caller
//! can hand the message to another decoder or name what is missing.

use std::fmt;

/// Why a message could not be unpacked.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum UnpackError {
    /// A combination these unpackers do not implement (another decoder
    /// may); the text says which.
    Unsupported(String),
    /// The sections end early or contradict themselves.
    Damaged(String),
}

impl fmt::Display for UnpackError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            UnpackError::Unsupported(m) | UnpackError::Damaged(m) => f.write_str(m),
        }
    }
}

fn damaged<T>(message: impl Into<String>) -> Result<T, UnpackError> {
    Err(UnpackError::Damaged(message.into()))
}

fn unsupported<T>(message: impl Into<String>) -> Result<T, UnpackError> {
    Err(UnpackError::Unsupported(message.into()))
}

/// Whether `unpack` implements a data representation template (code table
/// 5.0): 0, 2, 3 and 42.
pub fn covers(template: u16) -> bool {
    matches!(template, 0 | 2 | 3 | 42)
}

/// Buffers reused from message to message (one per thread).
#[derive(Debug, Default)]
pub struct Scratch {
    groups: Vec<Group>,
}

#[derive(Debug, Clone, Copy, Default)]
struct Group {
    reference: u32,
    width: u32,
    length: u32,
}

// ---------------------------------------------------------------------------
// Octets of a section, numbered from 1 as in the Manual.

fn octet(section: &[u8], number: usize) -> Result<u8, UnpackError> {
    section.get(number - 1).copied().ok_or_else(|| {
        UnpackError::Damaged(format!("section {} is {} octets long, too short for octet {number} of its template", section.get(4).copied().unwrap_or(0), section.len()))
    })
}

fn unsigned(section: &[u8], number: usize, count: usize) -> Result<u64, UnpackError> {
    let mut value = 0u64;
    for k in 0..count {
        value = (value << 8) | octet(section, number + k)? as u64;
    }
    Ok(value)
}

/// A signed number of `count` octets: the first bit is the sign, the rest
/// the magnitude (WMO-No. 306, regulation 92.1.5).
fn sign_magnitude(bytes: &[u8]) -> i64 {
    let Some((&first, rest)) = bytes.split_first() else { return 0 };
    let mut magnitude = (first & 0x7f) as i64;
    for &b in rest {
        magnitude = (magnitude << 8) | b as i64;
    }
    if first & 0x80 != 0 {
        -magnitude
    } else {
        magnitude
    }
}

// ---------------------------------------------------------------------------
// Scaling: regulation 92.9.4, in ecCodes' order of operations.

#[derive(Debug, Clone, Copy)]
struct Scale {
    reference: f64,
    binary: f64,
    decimal: f64,
}

impl Scale {
    fn new(reference: f32, binary_scale: i32, decimal_scale: i32) -> Self {
        Self { reference: reference as f64, binary: power(binary_scale, 2.0), decimal: power(-decimal_scale, 10.0) }
    }

    #[inline(always)]
    fn apply(self, x: f64) -> f32 {
        ((x * self.binary + self.reference) * self.decimal) as f32
    }
}

/// base^exponent by repeated multiplication or division, one rounding per
/// step, as ecCodes forms its scale factors (so that the decoded doubles
/// are the same).
fn power(exponent: i32, base: f64) -> f64 {
    let mut value = 1.0f64;
    if exponent < 0 {
        for _ in 0..exponent.unsigned_abs() {
            value /= base;
        }
    } else {
        for _ in 0..exponent {
            value *= base;
        }
    }
    value
}

/// Octets 12 to 21, common to templates 5.0, 5.2, 5.3 and 5.42.
#[derive(Debug, Clone, Copy)]
struct Simple {
    values: usize,
    scale: Scale,
    bits: u32,
}

fn simple_parameters(section5: &[u8]) -> Result<Simple, UnpackError> {
    let values = unsigned(section5, 6, 4)? as usize;
    let reference = f32::from_bits(unsigned(section5, 12, 4)? as u32);
    let binary = sign_magnitude(section5.get(15..17).unwrap_or(&[])) as i32;
    let decimal = sign_magnitude(section5.get(17..19).unwrap_or(&[])) as i32;
    let bits = octet(section5, 20)? as u32;
    if !reference.is_finite() {
        return damaged(format!("its reference value (template 5.0 octets 12-15) is {reference}"));
    }
    if bits > 32 {
        return unsupported(format!("it packs values in {bits} bits (octet 20 of section 5); Baroc's unpackers read up to 32"));
    }
    Ok(Simple { values, scale: Scale::new(reference, binary, decimal), bits })
}

// ---------------------------------------------------------------------------
// Reading bits, most significant first (WMO-No. 306 regulation 92.1.6).

/// Eight bytes big-endian from `at`, zeros past the end.
#[inline(always)]
fn load_be_u64(data: &[u8], at: usize) -> u64 {
    match data.get(at..at + 8) {
        Some(b) => u64::from_be_bytes(b.try_into().expect("eight bytes")),
        None => {
            let mut buffer = [0u8; 8];
            if at < data.len() {
                let tail = &data[at..];
                buffer[..tail.len()].copy_from_slice(tail);
            }
            u64::from_be_bytes(buffer)
        }
    }
}

/// `width` bits (1 to 32) starting `bit` bits into `data`.
#[inline(always)]
fn bits_at(data: &[u8], bit: usize, width: u32) -> u32 {
    let word = load_be_u64(data, bit >> 3);
    ((word << (bit & 7)) >> (64 - width)) as u32
}

/// A sequential reader holding up to 64 bits, left-aligned, refilled a
/// word at a time. Reading past the end yields zero bits and is noticed
/// by `overrun`.
struct BitReader<'a> {
    data: &'a [u8],
    /// Next byte to load.
    next: usize,
    /// Bits, left-aligned; bits past `have` are the following bits of the
    /// data (or zero), so refilling may OR them in again.
    window: u64,
    have: u32,
}

impl<'a> BitReader<'a> {
    fn new(data: &'a [u8]) -> Self {
        let mut reader = Self { data, next: 0, window: 0, have: 0 };
        reader.refill();
        reader
    }

    /// Tops the window up to at least 56 bits.
    #[inline(always)]
    fn refill(&mut self) {
        if self.have > 56 {
            return;
        }
        if let Some(b) = self.data.get(self.next..self.next + 8) {
            let word = u64::from_be_bytes(b.try_into().expect("eight bytes"));
            self.window |= word >> self.have;
            let bytes = (63 - self.have) >> 3;
            self.next += bytes as usize;
            self.have += bytes * 8;
        } else {
            while self.have <= 56 {
                let byte = self.data.get(self.next).copied().unwrap_or(0);
                self.window |= (byte as u64) << (56 - self.have);
                self.next += 1;
                self.have += 8;
            }
        }
    }

    /// Bits consumed so far.
    #[inline(always)]
    fn position(&self) -> usize {
        self.next * 8 - self.have as usize
    }

    fn overrun(&self) -> bool {
        self.position() > self.data.len() * 8
    }

    /// `count` bits (0 to 32).
    #[inline(always)]
    fn read(&mut self, count: u32) -> u32 {
        if count == 0 {
            return 0;
        }
        if self.have < count {
            self.refill();
        }
        let value = (self.window >> (64 - count)) as u32;
        self.window <<= count;
        self.have -= count;
        value
    }

    /// A fundamental sequence codeword (CCSDS 121.0-B-3, 3.2.2): the number
    /// of zeros before the next one bit. Fails when the zeros run past the
    /// end of the data.
    #[inline(always)]
    fn fundamental_sequence(&mut self) -> Result<u32, UnpackError> {
        let zeros = self.window.leading_zeros();
        if zeros < self.have {
            // Shift in two steps: zeros + 1 may be 64.
            self.window = (self.window << zeros) << 1;
            self.have -= zeros + 1;
            return Ok(zeros);
        }
        self.fundamental_sequence_slow()
    }

    #[cold]
    fn fundamental_sequence_slow(&mut self) -> Result<u32, UnpackError> {
        let mut count = 0u32;
        loop {
            if self.have == 0 || self.window.leading_zeros() >= self.have {
                count = count.saturating_add(self.have);
                self.window = 0;
                self.have = 0;
                if self.next > self.data.len() {
                    return damaged("its CCSDS data end inside a fundamental sequence codeword");
                }
                self.refill();
                continue;
            }
            let zeros = self.window.leading_zeros();
            self.window = (self.window << zeros) << 1;
            self.have -= zeros + 1;
            return Ok(count.saturating_add(zeros));
        }
    }

    /// Moves to `bit` bits from the start.
    fn seek(&mut self, bit: usize) {
        self.next = bit >> 3;
        self.window = 0;
        self.have = 0;
        self.refill();
        let skip = (bit & 7) as u32;
        self.window <<= skip;
        self.have -= skip;
    }

    /// Skips to the next byte boundary.
    fn align(&mut self) {
        let skip = self.have % 8;
        self.window <<= skip;
        self.have -= skip;
    }
}

// ---------------------------------------------------------------------------
// Entry point.

/// Unpacks one field: `section5`, `section6` and `section7` are the whole
/// sections (headers included; section 6 the bitmap in force, which may be
/// an earlier one of the message), `out` one value per grid point in scan
/// order. Points the bitmap marks absent, and values complex packing marks
/// missing, become NaN.
pub fn unpack(section5: &[u8], section6: &[u8], section7: &[u8], out: &mut [f32], scratch: &mut Scratch) -> Result<(), UnpackError> {
    let template = unsigned(section5, 10, 2)? as u16;
    let simple = simple_parameters(section5)?;
    let points = out.len();
    let indicator = octet(section6, 6)?;
    let bitmap = match indicator {
        0 => Some(section6.get(6..).unwrap_or(&[])),
        255 => None,
        other => return unsupported(format!("its bitmap indicator is {other} (code table 6.0); Baroc's unpackers read 0 and 255")),
    };
    let values = simple.values;
    match bitmap {
        None if values != points => {
            return damaged(format!("section 5 says it holds {values} values, but the grid has {points} points and there is no bitmap"));
        }
        Some(bits) => {
            if bits.len() * 8 < points {
                return damaged(format!("its bitmap holds {} bits for a grid of {points} points", bits.len() * 8));
            }
            let present = count_present(bits, points);
            if present != values {
                return damaged(format!("its bitmap marks {present} points present, but section 5 says it holds {values} values"));
            }
        }
        None => {}
    }
    let payload = section7.get(5..).unwrap_or(&[]);
    let target = &mut out[..values];
    match template {
        0 => unpack_simple(&simple, payload, target)?,
        2 | 3 => unpack_complex(template, &simple, section5, payload, target, scratch)?,
        42 => unpack_ccsds(&simple, section5, payload, target)?,
        other => return unsupported(format!("Baroc's unpackers do not read data representation template 5.{other}")),
    }
    if let Some(bits) = bitmap {
        spread_over_bitmap(bits, out, values);
    }
    Ok(())
}

fn count_present(bits: &[u8], points: usize) -> usize {
    let whole = points / 8;
    let mut count: usize = bits[..whole].iter().map(|b| b.count_ones() as usize).sum();
    let rest = points % 8;
    if rest > 0 {
        count += (bits[whole] >> (8 - rest)).count_ones() as usize;
    }
    count
}

/// Moves the `values` packed values at the front of `out` to the points
/// the bitmap marks present (bit set, most significant first), from the
/// last point backwards so nothing is overwritten before it is moved; the
/// other points become NaN.
fn spread_over_bitmap(bits: &[u8], out: &mut [f32], values: usize) {
    let mut k = values;
    for p in (0..out.len()).rev() {
        if bits[p >> 3] & (0x80 >> (p & 7)) != 0 {
            k -= 1;
            out[p] = out[k];
        } else {
            out[p] = f32::NAN;
        }
    }
}

// ---------------------------------------------------------------------------
// Template 5.0 / 7.0: simple packing.

fn unpack_simple(simple: &Simple, payload: &[u8], out: &mut [f32]) -> Result<(), UnpackError> {
    let Simple { scale, bits, .. } = *simple;
    if bits == 0 {
        // A constant field: nothing is packed in section 7 and every value
        // is the reference value R itself, unscaled. Regulation 92.9.4
        // would give R / 10^D, but ecCodes writes a constant field as R =
        // the value whatever D says, and reads it back as R; Baroc reads
        // such files as ecCodes does (checked in
        // tests/python/test_grib2_eccodes.py with D = 3).
        out.fill(scale.reference as f32);
        return Ok(());
    }
    let needed = (out.len() * bits as usize).div_ceil(8);
    if payload.len() < needed {
        return damaged(format!(
            "section 7 holds {} octets of packed values, but {} values of {bits} bits need {needed}",
            payload.len(),
            out.len()
        ));
    }
    match bits {
        8 => out.iter_mut().zip(payload).for_each(|(o, &b)| *o = scale.apply(b as f64)),
        16 => out.iter_mut().zip(payload.chunks_exact(2)).for_each(|(o, b)| *o = scale.apply(u16::from_be_bytes([b[0], b[1]]) as f64)),
        _ => {
            for (i, o) in out.iter_mut().enumerate() {
                *o = scale.apply(bits_at(payload, i * bits as usize, bits) as f64);
            }
        }
    }
    Ok(())
}

// ---------------------------------------------------------------------------
// Templates 5.2 / 7.2 and 5.3 / 7.3: complex packing, with spatial
// differencing.

fn unpack_complex(template: u16, simple: &Simple, section5: &[u8], payload: &[u8], out: &mut [f32], scratch: &mut Scratch) -> Result<(), UnpackError> {
    let missing_management = octet(section5, 23)?;
    let groups = unsigned(section5, 32, 4)? as usize;
    let width_reference = octet(section5, 36)? as u32;
    let width_bits = octet(section5, 37)? as u32;
    let length_reference = unsigned(section5, 38, 4)? as u32;
    let length_increment = octet(section5, 42)? as u32;
    let last_length = unsigned(section5, 43, 4)? as u32;
    let length_bits = octet(section5, 47)? as u32;
    let bits = simple.bits;
    if missing_management > 2 {
        return unsupported(format!("its missing value management is {missing_management} (code table 5.5 defines 0, 1 and 2)"));
    }
    if width_bits > 32 || length_bits > 32 {
        return damaged(format!("its group widths take {width_bits} bits and group lengths {length_bits} bits (at most 32)"));
    }
    let (order, descriptor_octets) = if template == 3 { (octet(section5, 48)? as usize, octet(section5, 49)? as usize) } else { (0, 0) };
    if template == 3 && !(order == 1 || order == 2) {
        return unsupported(format!("its order of spatial differencing is {order} (template 5.3 octet 48); Baroc's unpackers read orders 1 and 2"));
    }
    if template == 3 && !(1..=8).contains(&descriptor_octets) {
        return damaged(format!("its extra descriptors of spatial differencing take {descriptor_octets} octets each (template 5.3 octet 49)"));
    }
    let values = out.len();
    if values == 0 {
        return Ok(());
    }
    if groups == 0 {
        return damaged(format!("section 5 says it packs {values} values in 0 groups"));
    }
    if groups > values {
        return damaged(format!("section 5 says it packs {values} values in {groups} groups"));
    }

    // Section 7 (template 7.3): the first value(s) and the overall minimum
    // of the differences, then group references, widths and lengths, each
    // list padded to a whole octet, then the packed values.
    let mut at = 0usize;
    let mut descriptor = || -> Result<i64, UnpackError> {
        let bytes = payload.get(at..at + descriptor_octets).ok_or_else(|| UnpackError::Damaged("section 7 ends inside its spatial differencing descriptors".into()))?;
        at += descriptor_octets;
        Ok(sign_magnitude(bytes))
    };
    let (first, second, minimum) = match order {
        1 => (descriptor()?, 0, descriptor()?),
        2 => (descriptor()?, descriptor()?, descriptor()?),
        _ => (0, 0, 0),
    };
    let list_octets = |count: usize, width: u32| (count * width as usize).div_ceil(8);
    let references_at = at;
    let widths_at = references_at + list_octets(groups, bits);
    let lengths_at = widths_at + list_octets(groups, width_bits);
    let data_at = lengths_at + list_octets(groups, length_bits);
    if payload.len() < data_at {
        return damaged(format!("section 7 holds {} octets, but the descriptors of its {groups} groups need {data_at}", payload.len()));
    }
    let read_list = |start: usize, index: usize, width: u32| if width == 0 { 0 } else { bits_at(&payload[start..], index * width as usize, width) };
    let list = &mut scratch.groups;
    list.clear();
    list.reserve(groups);
    let mut total_values = 0u64;
    let mut total_bits = 0u64;
    for g in 0..groups {
        let reference = read_list(references_at, g, bits);
        let width = width_reference.wrapping_add(read_list(widths_at, g, width_bits));
        let length = if g + 1 == groups {
            last_length
        } else {
            length_reference.wrapping_add(read_list(lengths_at, g, length_bits).wrapping_mul(length_increment))
        };
        if width > 32 {
            return damaged(format!("group {} of {groups} packs its values in {width} bits (at most 32)", g + 1));
        }
        total_values += length as u64;
        total_bits += length as u64 * width as u64;
        list.push(Group { reference, width, length });
    }
    if total_values != values as u64 {
        return damaged(format!("its {groups} groups hold {total_values} values, but section 5 says {values}"));
    }
    let data = &payload[data_at..];
    if (data.len() as u64) * 8 < total_bits {
        return damaged(format!("section 7 holds {} octets of packed values, but its groups need {}", data.len(), total_bits.div_ceil(8)));
    }

    let scale = simple.scale;
    // Missing values (code table 5.5): all ones of the group's width is the
    // primary missing value, all ones less one the secondary; in a group
    // of width 0, the same of the group reference.
    let reference_primary = if bits == 0 { 0 } else { u32::MAX >> (32 - bits) };
    let missing = |value: u32, all_ones: u32| -> bool {
        match missing_management {
            1 => value == all_ones,
            2 => value == all_ones || value == all_ones.wrapping_sub(1),
            _ => false,
        }
    };
    match order {
        0 => {
            let mut k = 0usize;
            let mut bit = 0usize;
            for group in list.iter() {
                let slots = &mut out[k..k + group.length as usize];
                k += group.length as usize;
                if group.width == 0 {
                    let v = if missing_management != 0 && bits > 0 && missing(group.reference, reference_primary) { f32::NAN } else { scale.apply(group.reference as f64) };
                    slots.fill(v);
                    continue;
                }
                let all_ones = u32::MAX >> (32 - group.width);
                let reference = group.reference as u64;
                for slot in slots.iter_mut() {
                    let packed = bits_at(data, bit, group.width);
                    bit += group.width as usize;
                    *slot = if missing_management != 0 && missing(packed, all_ones) { f32::NAN } else { scale.apply((reference + packed as u64) as f64) };
                }
            }
        }
        _ => {
            // Spatial differencing (template 5.3 notes; regulation as in
            // ecCodes): the stored values are differences less their
            // minimum; the first value (two for order 2) is given in the
            // descriptors; missing values are skipped by the recursion.
            let mut seen = 0usize;
            let (mut previous, mut before) = (0i64, 0i64);
            let mut k = 0usize;
            let mut bit = 0usize;
            let mut emit = |slot: &mut f32, stored: i64| {
                let x = if seen >= order {
                    if order == 1 {
                        stored.wrapping_add(minimum).wrapping_add(previous)
                    } else {
                        stored.wrapping_add(minimum).wrapping_add(previous.wrapping_mul(2)).wrapping_sub(before)
                    }
                } else if seen == 0 {
                    first
                } else {
                    second
                };
                seen += 1;
                before = previous;
                previous = x;
                *slot = scale.apply(x as f64);
            };
            for group in list.iter() {
                let slots = &mut out[k..k + group.length as usize];
                k += group.length as usize;
                if group.width == 0 {
                    let is_missing = missing_management != 0 && bits > 0 && missing(group.reference, reference_primary);
                    for slot in slots.iter_mut() {
                        if is_missing {
                            *slot = f32::NAN;
                        } else {
                            emit(slot, group.reference as i64);
                        }
                    }
                    continue;
                }
                let all_ones = u32::MAX >> (32 - group.width);
                let reference = group.reference as i64;
                for slot in slots.iter_mut() {
                    let packed = bits_at(data, bit, group.width);
                    bit += group.width as usize;
                    if missing_management != 0 && missing(packed, all_ones) {
                        *slot = f32::NAN;
                    } else {
                        emit(slot, reference + packed as i64);
                    }
                }
            }
        }
    }
    Ok(())
}

// ---------------------------------------------------------------------------
// Template 5.42 / 7.42: CCSDS 121.0-B adaptive entropy coding.

/// libaec's option flags as carried in template 5.42 octet 22.
const CCSDS_SIGNED: u8 = 1;
const CCSDS_PREPROCESS: u8 = 8;
const CCSDS_RESTRICTED: u8 = 16;
const CCSDS_PAD_RSI: u8 = 32;
const CCSDS_NOT_ENFORCE: u8 = 64;

/// Zero-block count meaning "to the end of the segment" (CCSDS 121.0-B-3,
/// 3.4, table 3-2).
const REMAINDER_OF_SEGMENT: u32 = 5;

/// Second-extension codeword m to the sum of its pair and the codeword of
/// the pair (sum, 0): gamma = beta (beta + 1) / 2 + delta2 (CCSDS
/// 121.0-B-3, 3.3.3), for beta up to 12 as the coder produces.
const SECOND_EXTENSION: [(u8, u8); 91] = {
    let mut table = [(0u8, 0u8); 91];
    let mut beta = 0;
    let mut m = 0;
    while beta <= 12 {
        let start = m;
        let mut d = 0;
        while d <= beta {
            table[m] = (beta as u8, start as u8);
            m += 1;
            d += 1;
        }
        beta += 1;
    }
    table
};

fn unpack_ccsds(simple: &Simple, section5: &[u8], payload: &[u8], out: &mut [f32]) -> Result<(), UnpackError> {
    let Simple { scale, bits, .. } = *simple;
    let flags = octet(section5, 22)?;
    let block_size = octet(section5, 23)? as usize;
    let interval = unsigned(section5, 24, 2)? as usize;
    if bits == 0 {
        // A constant field; nothing is coded, the value is R (as for
        // simple packing, and as ecCodes reads it).
        out.fill(scale.reference as f32);
        return Ok(());
    }
    if out.is_empty() {
        return Ok(());
    }
    if flags & CCSDS_SIGNED != 0 {
        return unsupported(format!("its CCSDS flags {flags:#04x} mark the samples signed, which Baroc's unpacker does not read"));
    }
    let block_ok = if flags & CCSDS_NOT_ENFORCE != 0 { block_size > 0 && block_size % 2 == 0 } else { matches!(block_size, 8 | 16 | 32 | 64) };
    if !block_ok {
        return damaged(format!("its CCSDS block size is {block_size} (template 5.42 octet 23; 8, 16, 32 or 64)"));
    }
    if !(1..=4096).contains(&interval) {
        return damaged(format!("its CCSDS reference sample interval is {interval} blocks (template 5.42 octets 24-25; 1 to 4096)"));
    }
    let preprocess = flags & CCSDS_PREPROCESS != 0;
    let restricted = flags & CCSDS_RESTRICTED != 0;
    let id_bits = option_id_bits(bits, restricted);
    let no_compression = (1u32 << id_bits) - 1;
    let largest = if bits == 32 { u32::MAX } else { (1u32 << bits) - 1 };
    let mut reader = BitReader::new(payload);
    let mut residuals = [0u32; 256];
    let mut done = 0usize;
    let total = out.len();
    // The predictor's last sample (preprocessing) and the block within the
    // current reference sample interval.
    let mut last = 0u32;
    let mut block_in_interval = 0usize;
    // A sample or mapped prediction error above the largest sample: the
    // data are damaged (checked once per block).
    let mut out_of_range = false;
    while done < total {
        let reference = preprocess && block_in_interval == 0;
        if reader.have < 40 {
            reader.refill();
        }
        let id = reader.read(id_bits);
        // Blocks this codeword fills (a zero-block run fills several).
        let mut blocks = 1usize;
        let mut zero_run = false;
        let mut first = 0usize;
        if id == 0 {
            let second_extension = reader.read(1) == 1;
            if reference {
                residuals[0] = reader.read(bits);
                first = 1;
            }
            if second_extension {
                let mut i = first;
                while i < block_size {
                    if reader.have < 32 {
                        reader.refill();
                    }
                    let m = reader.fundamental_sequence()? as usize;
                    let Some(&(beta, start)) = SECOND_EXTENSION.get(m) else {
                        return damaged(format!("its CCSDS second-extension codeword {m} is out of range (sample {})", done + i));
                    };
                    let second = (m - start as usize) as u32;
                    if i % 2 == 0 {
                        residuals[i] = beta as u32 - second;
                        i += 1;
                    }
                    residuals[i] = second;
                    i += 1;
                }
            } else {
                let mut count = reader.fundamental_sequence()?.saturating_add(1);
                if count == REMAINDER_OF_SEGMENT {
                    // To the end of the 64-block segment or of the
                    // reference sample interval, whichever comes first.
                    count = (interval - block_in_interval).min(64 - block_in_interval % 64) as u32;
                } else if count > REMAINDER_OF_SEGMENT {
                    count -= 1;
                }
                if block_in_interval + count as usize > interval {
                    return damaged(format!(
                        "its CCSDS zero-block run of {count} blocks passes the end of the reference sample interval (sample {done})"
                    ));
                }
                blocks = count as usize;
                zero_run = true;
            }
        } else if id == no_compression {
            for r in residuals[..block_size].iter_mut() {
                *r = reader.read(bits);
            }
        } else {
            let k = id - 1;
            if reference {
                residuals[0] = reader.read(bits);
                first = 1;
            }
            // Refilled only when a codeword runs past the window (the
            // slow path), not checked per sample.
            reader.refill();
            for r in residuals[first..block_size].iter_mut() {
                *r = reader.fundamental_sequence()?;
            }
            if k > 0 {
                // The k low bits of each sample follow one another: read
                // each from its own offset (no chain through the reader).
                let start = reader.position();
                for (i, r) in residuals[first..block_size].iter_mut().enumerate() {
                    *r = (*r << k) | bits_at(payload, start + i * k as usize, k);
                }
                reader.seek(start + (block_size - first) * k as usize);
            }
        }
        if reader.overrun() {
            return damaged(format!("its CCSDS data end inside the block at sample {done} of {total}"));
        }
        // Samples into values.
        let span = (blocks * block_size).min(total - done);
        let slots = &mut out[done..done + span];
        if zero_run {
            // Zero residuals: the samples repeat the prediction (or are
            // zero without the preprocessor); the first keeps its reference.
            let mut rest = 0;
            if reference {
                last = residuals[0];
                if let Some(slot) = slots.first_mut() {
                    *slot = scale.apply(last as f64);
                }
                rest = 1.min(span);
            }
            let value = if preprocess { last } else { 0 };
            slots[rest..].fill(scale.apply(value as f64));
        } else if preprocess {
            let mut i = 0;
            if reference {
                last = residuals[0];
                slots[0] = scale.apply(last as f64);
                i = 1;
            }
            for (slot, &delta) in slots[i..].iter_mut().zip(&residuals[i..span]) {
                last = unmap(last, delta, largest, &mut out_of_range);
                *slot = scale.apply(last as f64);
            }
        } else {
            for (slot, &x) in slots.iter_mut().zip(&residuals[..span]) {
                out_of_range |= x > largest;
                *slot = scale.apply(x as f64);
            }
        }
        if out_of_range {
            return damaged(format!("its CCSDS data decode to a sample wider than {bits} bits in the block at sample {done} (damaged data)"));
        }
        done += span;
        block_in_interval += blocks;
        if block_in_interval >= interval {
            block_in_interval = 0;
            if flags & CCSDS_PAD_RSI != 0 {
                reader.align();
            }
        }
    }
    Ok(())
}

/// Undoes the preprocessor's mapping of a prediction error `delta` (CCSDS
/// 121.0-B-3, 4.3): the unit-delay prediction is the previous sample;
/// errors within reach of both ends alternate in sign (even up, odd down),
/// larger ones run away from the nearer end. A `delta` above the largest
/// sample cannot come from the coder and marks damaged data.
#[inline(always)]
fn unmap(previous: u32, delta: u32, largest: u32, out_of_range: &mut bool) -> u32 {
    let half = (delta >> 1) + (delta & 1);
    let above = largest.wrapping_sub(previous);
    if half <= previous.min(above) {
        let negative = (delta & 1).wrapping_neg();
        previous.wrapping_add((half ^ negative).wrapping_sub(negative))
    } else {
        *out_of_range |= delta > largest;
        if previous <= above {
            delta
        } else {
            largest.wrapping_sub(delta)
        }
    }
}

/// The length of a CCSDS block's option identifier: CCSDS 121.0-B-3 table
/// 5-1, with the restricted set for sample widths up to 4 bits (section
/// 5.1.2).
fn option_id_bits(bits: u32, restricted: bool) -> u32 {
    if bits > 16 {
        5
    } else if bits > 8 {
        4
    } else if restricted && bits <= 4 {
        if bits <= 2 {
            1
        } else {
            2
        }
    } else {
        3
    }
}

#[cfg(test)]
mod tests {
    //! Hand-built sections (layouts from WMO-No. 306, templates 5.0, 5.2,
    //! 5.3, 5.42, 6.0 and 7.x; CCSDS 121.0-B-3 for the coded blocks), each
    //! checked against values worked by hand and against the `grib` crate's
    //! own decoder of the same bytes (an independent implementation, whose
    //! CCSDS part is the rust-aec port of libaec).
    use super::*;

    /// Most significant bit first, as GRIB2 and CCSDS pack.
    #[derive(Default)]
    struct BitWriter {
        bytes: Vec<u8>,
        bits: usize,
    }

    impl BitWriter {
        fn put(&mut self, value: u64, count: u32) {
            for i in (0..count).rev() {
                if self.bits % 8 == 0 {
                    self.bytes.push(0);
                }
                if (value >> i) & 1 == 1 {
                    *self.bytes.last_mut().unwrap() |= 0x80 >> (self.bits % 8);
                }
                self.bits += 1;
            }
        }
        fn align(&mut self) {
            self.bits = self.bytes.len() * 8;
        }
        /// A fundamental sequence codeword: `n` zeros, then a one.
        fn fs(&mut self, n: u32) {
            for _ in 0..n {
                self.put(0, 1);
            }
            self.put(1, 1);
        }
    }

    /// A small deterministic generator (64-bit LCG, Knuth's MMIX constants).
    struct Lcg(u64);
    impl Lcg {
        fn next(&mut self) -> u64 {
            self.0 = self.0.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
            self.0 >> 33
        }
        fn below(&mut self, n: u64) -> u64 {
            self.next() % n.max(1)
        }
    }

    fn signed16(v: i32) -> [u8; 2] {
        let m = v.unsigned_abs() as u16;
        (if v < 0 { m | 0x8000 } else { m }).to_be_bytes()
    }

    fn section(number: u8, body: &[u8]) -> Vec<u8> {
        let mut s = ((body.len() + 5) as u32).to_be_bytes().to_vec();
        s.push(number);
        s.extend_from_slice(body);
        s
    }

    /// Section 5: octets 6 to 21, then the template's own octets.
    fn section5(template: u16, values: usize, reference: f32, binary: i32, decimal: i32, bits: u8, rest: &[u8]) -> Vec<u8> {
        let mut body = (values as u32).to_be_bytes().to_vec();
        body.extend_from_slice(&template.to_be_bytes());
        body.extend_from_slice(&reference.to_bits().to_be_bytes());
        body.extend_from_slice(&signed16(binary));
        body.extend_from_slice(&signed16(decimal));
        body.push(bits);
        body.push(0);
        body.extend_from_slice(rest);
        section(5, &body)
    }

    fn no_bitmap() -> Vec<u8> {
        section(6, &[255])
    }

    fn bitmap(present: &[bool]) -> Vec<u8> {
        let mut w = BitWriter::default();
        w.put(0, 8);
        for &p in present {
            w.put(p as u64, 1);
        }
        section(6, &w.bytes)
    }

    fn ours(s5: &[u8], s6: &[u8], s7: &[u8], points: usize) -> Result<Vec<f32>, UnpackError> {
        let mut out = vec![-1.0f32; points];
        unpack(s5, s6, s7, &mut out, &mut Scratch::default())?;
        Ok(out)
    }

    fn crate_decode(s5: &[u8], s6: &[u8], s7: &[u8], points: usize) -> Vec<f32> {
        let decoder = grib::Grib2SubmessageDecoder::new(points, s5.to_vec(), s6.to_vec(), s7.to_vec()).expect("the grib crate accepts the sections");
        decoder.dispatch().expect("the grib crate decodes").collect()
    }

    fn same(a: &[f32], b: &[f32]) -> bool {
        a.len() == b.len() && a.iter().zip(b).all(|(x, y)| x.to_bits() == y.to_bits() || (x.is_nan() && y.is_nan()))
    }

    #[test]
    fn simple_packing_scales_by_regulation_92_9_4_at_every_width() {
        // Y = (R + X 2^E) / 10^D: R = 1.5, E = -1, D = 1, X = 0..: by hand
        // X = 3 gives (1.5 + 1.5) / 10 = 0.3.
        let mut rng = Lcg(7);
        for bits in [1u8, 7, 8, 12, 16, 17, 24, 25, 31, 32] {
            let n = 37;
            let xs: Vec<u64> = (0..n).map(|_| rng.next() & ((1u64 << bits) - 1)).collect();
            let mut w = BitWriter::default();
            xs.iter().for_each(|&x| w.put(x, bits as u32));
            let s5 = section5(0, n, 1.5, -1, 1, bits, &[]);
            let s7 = section(7, &w.bytes);
            let got = ours(&s5, &no_bitmap(), &s7, n).unwrap();
            let want: Vec<f32> = xs.iter().map(|&x| ((x as f64 * 0.5 + 1.5) * 0.1) as f32).collect();
            assert!(same(&got, &want), "{bits} bits: {got:?} {want:?}");
            if bits <= 24 {
                let reference = crate_decode(&s5, &no_bitmap(), &s7, n);
                let close = got.iter().zip(&reference).all(|(a, b)| (a - b).abs() <= 1e-6 * b.abs().max(1.0));
                assert!(close, "{bits} bits against the grib crate");
            }
        }
        // X = 3 by hand.
        let s7 = section(7, &[3]);
        assert_eq!(ours(&section5(0, 1, 1.5, -1, 1, 8, &[]), &no_bitmap(), &s7, 1).unwrap(), vec![0.3f32]);
    }

    #[test]
    fn constant_fields_and_bitmaps_give_the_reference_and_nan() {
        // Bits 0: every value is R itself, as ecCodes reads it (see
        // `unpack_simple`), even with D set.
        let present = [true, false, true, true, false, false, true, true, true, false, true];
        let n = present.iter().filter(|&&p| p).count();
        let s5 = section5(0, n, 273.15, 0, 2, 0, &[]);
        let got = ours(&s5, &bitmap(&present), &section(7, &[]), present.len()).unwrap();
        for (g, &p) in got.iter().zip(&present) {
            assert!(if p { *g == 273.15f32 } else { g.is_nan() });
        }
        // 8-bit values 1, 2, 3... land on the present points in order.
        let s5 = section5(0, n, 0.0, 0, 0, 8, &[]);
        let s7 = section(7, &(1..=n as u8).collect::<Vec<_>>());
        let got = ours(&s5, &bitmap(&present), &s7, present.len()).unwrap();
        let want = [1.0, f32::NAN, 2.0, 3.0, f32::NAN, f32::NAN, 4.0, 5.0, 6.0, f32::NAN, 7.0];
        assert!(same(&got, &want), "{got:?}");
        assert!(same(&got, &crate_decode(&s5, &bitmap(&present), &s7, present.len())));
        // A bitmap counting other than section 5's number of values.
        let s5 = section5(0, n + 1, 0.0, 0, 0, 8, &[]);
        assert!(matches!(ours(&s5, &bitmap(&present), &s7, present.len()), Err(UnpackError::Damaged(m)) if m.contains("bitmap marks 7 points")));
    }

    /// Complex packing sections for values split into groups of the given
    /// lengths (the last group's length given separately, as 5.2 does).
    fn complex(xs: &[Option<u64>], lengths: &[usize], order: u8, missing: u8, bits: u8) -> (Vec<u8>, Vec<u8>) {
        // The stored values: differences of the given order, less their
        // minimum (template 5.3 notes), missing ones kept as all ones.
        let present: Vec<i64> = xs.iter().flatten().map(|&x| x as i64).collect();
        let mut stored: Vec<i64> = present.clone();
        let (mut first, mut second, mut minimum) = (0, 0, 0);
        if order >= 1 {
            first = present[0];
            let mut d: Vec<i64> = present.windows(2).map(|w| w[1] - w[0]).collect();
            if order == 2 {
                second = present[1];
                d = d.windows(2).map(|w| w[1] - w[0]).collect();
            }
            minimum = *d.iter().min().unwrap();
            stored = vec![0; order as usize];
            stored.extend(d.iter().map(|v| v - minimum));
        }
        let mut stream = Vec::new();
        let mut k = 0;
        for x in xs {
            stream.push(if x.is_some() {
                k += 1;
                Some(stored[k - 1])
            } else {
                None
            });
        }
        let mut w = BitWriter::default();
        let octets = 3usize;
        let descriptor = |w: &mut BitWriter, v: i64| {
            w.put((v < 0) as u64, 1);
            w.put(v.unsigned_abs(), octets as u32 * 8 - 1);
        };
        if order >= 1 {
            descriptor(&mut w, first);
            if order == 2 {
                descriptor(&mut w, second);
            }
            descriptor(&mut w, minimum);
        }
        // Groups: reference = minimum of the group's values, width enough
        // for the rest and the missing code.
        let mut groups = Vec::new();
        let mut at = 0;
        for &len in lengths {
            let part = &stream[at..at + len];
            at += len;
            let values: Vec<i64> = part.iter().flatten().copied().collect();
            let (reference, width) = if values.is_empty() {
                ((1i64 << bits) - 1, 0u32)
            } else {
                let lo = *values.iter().min().unwrap();
                let hi = *values.iter().max().unwrap();
                let span = (hi - lo) as u64 + if part.iter().any(|v| v.is_none()) { 1 + (missing == 2) as u64 } else { 0 };
                let width = if span == 0 { 0 } else { 64 - span.leading_zeros() + (missing > 0) as u32 };
                (lo, width)
            };
            groups.push((reference, width, part.to_vec()));
        }
        for (r, _, _) in &groups {
            w.put(*r as u64, bits as u32);
        }
        w.align();
        let width_bits = 6u8;
        for (_, width, _) in &groups {
            w.put(*width as u64, width_bits as u32);
        }
        w.align();
        let length_bits = 8u8;
        for &len in lengths {
            w.put(len as u64, length_bits as u32);
        }
        w.align();
        for (r, width, part) in &groups {
            for v in part {
                let packed = match v {
                    Some(v) => (v - r) as u64,
                    None => (1u64 << width) - 1,
                };
                w.put(packed, *width);
            }
        }
        let mut rest = vec![1u8, missing];
        rest.extend_from_slice(&[0; 8]);
        rest.extend_from_slice(&(groups.len() as u32).to_be_bytes());
        rest.push(0);
        rest.push(width_bits);
        rest.extend_from_slice(&0u32.to_be_bytes());
        rest.push(1);
        rest.extend_from_slice(&(*lengths.last().unwrap() as u32).to_be_bytes());
        rest.push(length_bits);
        let template = if order > 0 {
            rest.push(order);
            rest.push(octets as u8);
            3
        } else {
            2
        };
        (section5(template, xs.len(), 10.0, 1, 1, bits, &rest), section(7, &w.bytes))
    }

    #[test]
    fn complex_packing_with_and_without_spatial_differencing() {
        // A smooth series with noise: values from a ramp and a wiggle.
        let mut rng = Lcg(11);
        let xs: Vec<Option<u64>> = (0..203).map(|i| Some(500 + 3 * i as u64 + rng.below(9))).collect();
        let lengths = [17, 1, 40, 0, 33, 12, 100];
        assert_eq!(lengths.iter().sum::<usize>(), xs.len());
        let lengths: Vec<usize> = lengths.iter().copied().filter(|&l| l > 0).collect();
        // Y = (R + X 2^E) / 10^D with R = 10, E = 1, D = 1.
        let want: Vec<f32> = xs.iter().map(|x| ((x.unwrap() as f64 * 2.0 + 10.0) / 10.0) as f32).collect();
        for order in [0u8, 1, 2] {
            let (s5, s7) = complex(&xs, &lengths, order, 0, 12);
            let got = ours(&s5, &no_bitmap(), &s7, xs.len()).unwrap();
            let close = got.iter().zip(&want).all(|(a, b)| (a - b).abs() <= 1e-6 * b.abs());
            assert!(close, "order {order}: {got:?}");
            let reference = crate_decode(&s5, &no_bitmap(), &s7, xs.len());
            // The grib crate scales in f32: equal within one f32 rounding.
            let close = got.iter().zip(&reference).all(|(a, b)| (a - b).abs() <= f32::EPSILON * b.abs());
            assert!(close && got.len() == reference.len(), "order {order} against the grib crate");
        }
    }

    #[test]
    fn complex_packing_missing_values_are_nan_and_skipped_by_the_differencing() {
        // Code table 5.5: 1 primary missing values, 2 primary and secondary.
        let mut rng = Lcg(3);
        let xs: Vec<Option<u64>> = (0..90).map(|i| if i % 7 == 3 || (40..52).contains(&i) { None } else { Some(1000 + rng.below(50)) }).collect();
        let lengths = [10, 30, 12, 38];
        for missing in [1u8, 2] {
            for order in [0u8, 1, 2] {
                let (s5, s7) = complex(&xs, &lengths, order, missing, 16);
                let got = ours(&s5, &no_bitmap(), &s7, xs.len()).unwrap();
                for (g, x) in got.iter().zip(&xs) {
                    match x {
                        None => assert!(g.is_nan(), "order {order}"),
                        Some(x) => assert_eq!(*g, ((*x as f64 * 2.0 + 10.0) / 10.0) as f32, "order {order} missing {missing}"),
                    }
                }
            }
        }
    }

    /// A CCSDS stream for `total` samples (CCSDS 121.0-B-3 section 5 coded
    /// data set), blocks coded with every option at random: zero-block runs
    /// (including "to the end of the segment" and runs across the first
    /// block of an interval), second extension, split samples at several k,
    /// no compression; returns the stream.
    fn ccsds_stream(rng: &mut Lcg, bits: u32, block: usize, interval: usize, flags: u8, total: usize) -> Vec<u8> {
        let preprocess = flags & CCSDS_PREPROCESS != 0;
        let restricted = flags & CCSDS_RESTRICTED != 0;
        let id_bits = option_id_bits(bits, restricted);
        let largest = if bits == 32 { u32::MAX as u64 } else { (1u64 << bits) - 1 };
        let blocks = total.div_ceil(block);
        let mut w = BitWriter::default();
        let mut b = 0;
        while b < blocks {
            let in_interval = b % interval;
            let reference = preprocess && in_interval == 0;
            let put_reference = |w: &mut BitWriter, rng: &mut Lcg| {
                if reference {
                    w.put(rng.next() & largest, bits);
                }
            };
            let first = reference as usize;
            let choice = rng.below(6);
            let max_split = ((1u64 << id_bits) - 3).min(bits as u64 - 1);
            match choice {
                0 => {
                    // Zero blocks: a run up to the end of the interval.
                    let room = interval - in_interval;
                    let segment = (room).min(64 - in_interval % 64);
                    // "To the end of the segment" only with the preprocessor:
                    // without it the grib crate's decoder (rust-aec 0.1)
                    // stops counting blocks of the interval, unlike libaec,
                    // and the cross-check would fail on its side.
                    let to_end = preprocess && rng.below(3) == 0;
                    let count = if to_end { segment } else { 1 + rng.below(room.min(9) as u64) as usize };
                    w.put(0, id_bits);
                    w.put(0, 1);
                    put_reference(&mut w, rng);
                    if to_end {
                        w.fs(4);
                    } else if count < 5 {
                        w.fs(count as u32 - 1);
                    } else {
                        w.fs(count as u32);
                    }
                    b += count;
                    if b % interval == 0 && flags & CCSDS_PAD_RSI != 0 {
                        w.align();
                    }
                    continue;
                }
                1 => {
                    // Second extension: pairs summing to at most 12.
                    w.put(0, id_bits);
                    w.put(1, 1);
                    put_reference(&mut w, rng);
                    let mut i = first;
                    while i < block {
                        let small = |rng: &mut Lcg, n: u64| rng.below(n.min(largest + 1));
                        let (d1, d2) = if i % 2 == 0 { (small(rng, 7), small(rng, 6)) } else { (0, small(rng, 12)) };
                        let beta = d1 + d2;
                        w.fs((beta * (beta + 1) / 2 + d2) as u32);
                        i += if i % 2 == 0 { 2 } else { 1 };
                    }
                }
                2 if !(restricted && bits <= 2) => {
                    // No compression.
                    w.put((1 << id_bits) - 1, id_bits);
                    for _ in 0..block {
                        w.put(rng.next() & largest, bits);
                    }
                }
                _ if !(restricted && bits <= 2) => {
                    let k = rng.below(max_split + 1) as u32;
                    w.put(k as u64 + 1, id_bits);
                    put_reference(&mut w, rng);
                    let residuals: Vec<u64> = (first..block).map(|_| (rng.below(5) << k | (rng.next() & ((1 << k) - 1))).min(largest)).collect();
                    residuals.iter().for_each(|&r| w.fs((r >> k) as u32));
                    residuals.iter().for_each(|&r| w.put(r & ((1 << k) - 1), k));
                }
                _ => {
                    w.put(0, id_bits);
                    w.put(0, 1);
                    put_reference(&mut w, rng);
                    w.fs(0);
                }
            }
            b += 1;
            if b % interval == 0 && flags & CCSDS_PAD_RSI != 0 {
                w.align();
            }
        }
        w.bytes
    }

    fn ccsds_sections(bits: u32, block: usize, interval: usize, flags: u8, total: usize, stream: &[u8]) -> (Vec<u8>, Vec<u8>) {
        let mut rest = vec![flags, block as u8];
        rest.extend_from_slice(&(interval as u16).to_be_bytes());
        (section5(42, total, 0.0, 0, 0, bits as u8, &rest), section(7, stream))
    }

    #[test]
    fn ccsds_decodes_as_the_grib_crate_for_every_option_block_size_and_interval() {
        let mut rng = Lcg(42);
        let mut cases = 0;
        for bits in [1u32, 3, 5, 8, 9, 12, 16, 17, 20, 24] {
            for (block, interval) in [(8, 1), (16, 3), (32, 128), (64, 2), (32, 70), (8, 4096)] {
                for flags in [14u8, 14 | CCSDS_RESTRICTED, 6, 14 | CCSDS_PAD_RSI] {
                    // A last partial block, and several intervals.
                    let total = block * (interval.min(80) * 2 + 3) - rng.below(block as u64) as usize;
                    let stream = ccsds_stream(&mut rng, bits, block, interval, flags, total);
                    let (s5, s7) = ccsds_sections(bits, block, interval, flags, total, &stream);
                    let got = ours(&s5, &no_bitmap(), &s7, total).unwrap_or_else(|e| panic!("{bits} bits, J {block}, rsi {interval}, flags {flags}: {e}"));
                    let want = crate_decode(&s5, &no_bitmap(), &s7, total);
                    assert!(same(&got, &want), "{bits} bits, J {block}, rsi {interval}, flags {flags}: first difference at {:?}", got.iter().zip(&want).position(|(a, b)| a != b));
                    cases += 1;
                }
            }
        }
        assert_eq!(cases, 240);
    }

    #[test]
    fn ccsds_by_hand_zero_run_to_the_end_of_the_interval_then_a_split_block() {
        // 4 bits, J = 8, interval 2 blocks, preprocessor on (flags 8),
        // 3 bits of option id (CCSDS 121.0-B-3 table 5-1).
        // Interval 1: id 000, selector 0, reference 0101 (5), FS 0001 (the
        // remainder of the segment: both blocks): 16 samples of 5.
        // Interval 2: id 010 (split, k = 1), reference 0011 (3), seven FS
        // codes of residuals 2 4 1 0 3 6 2 (quotients 1 2 0 0 1 3 1, then
        // low bits 0 0 1 0 1 0 0): unmapped from 3: +1 -> 4, +2 -> 6,
        // -1 -> 5, 0 -> 5, -2 -> 3, +3 -> 6, +1 -> 7; only 5 of the 8
        // samples are wanted (a last partial block).
        let mut w = BitWriter::default();
        w.put(0, 3);
        w.put(0, 1);
        w.put(5, 4);
        w.fs(4);
        w.put(2, 3);
        w.put(3, 4);
        for q in [1, 2, 0, 0, 1, 3, 1] {
            w.fs(q);
        }
        for r in [0, 0, 1, 0, 1, 0, 0] {
            w.put(r, 1);
        }
        let (s5, s7) = ccsds_sections(4, 8, 2, 8, 21, &w.bytes);
        let got = ours(&s5, &no_bitmap(), &s7, 21).unwrap();
        let mut want = vec![5.0f32; 16];
        want.extend([3.0, 4.0, 6.0, 5.0, 5.0]);
        assert_eq!(got, want);
        assert!(same(&got, &crate_decode(&s5, &no_bitmap(), &s7, 21)));
    }

    #[test]
    fn ccsds_wide_samples_up_to_32_bits() {
        // No compression at 25 to 32 bits: samples read as they are, and
        // scaled in f64 (ecCodes' arithmetic); checked against the formula.
        for bits in [25u32, 31, 32] {
            let mut w = BitWriter::default();
            let xs: Vec<u64> = (0..16u64).map(|i| ((1u64 << bits) - 1) - i * 12345).collect();
            w.put(31, 5);
            xs.iter().take(8).for_each(|&x| w.put(x, bits));
            w.put(31, 5);
            xs.iter().skip(8).for_each(|&x| w.put(x, bits));
            let mut rest = vec![4u8, 8];
            rest.extend_from_slice(&4u16.to_be_bytes());
            let s5 = section5(42, 16, -3.0, -8, 2, bits as u8, &rest);
            let got = ours(&s5, &no_bitmap(), &section(7, &w.bytes), 16).unwrap();
            let want: Vec<f32> = xs.iter().map(|&x| ((x as f64 / 256.0 - 3.0) / 10.0 / 10.0) as f32).collect();
            assert!(same(&got, &want), "{bits}");
        }
    }

    #[test]
    fn truncated_and_damaged_sections_are_errors_not_panics() {
        let mut rng = Lcg(5);
        let n = 300;
        let xs: Vec<Option<u64>> = (0..n).map(|i| Some(2000 + 5 * i as u64 + rng.below(30))).collect();
        let (c5, c7) = complex(&xs, &[100, 100, 100], 2, 0, 14);
        let mut w = BitWriter::default();
        (0..n).for_each(|i| w.put(i as u64, 12));
        let (s5, s7) = (section5(0, n, 0.0, 0, 0, 12, &[]), section(7, &w.bytes));
        let stream = ccsds_stream(&mut rng, 16, 32, 4, 14, n);
        let (a5, a7) = ccsds_sections(16, 32, 4, 14, n, &stream);
        for (name, s5, s7) in [("simple", &s5, &s7), ("complex", &c5, &c7), ("ccsds", &a5, &a7)] {
            assert!(ours(s5, &no_bitmap(), s7, n).is_ok(), "{name} intact");
            // Cut short: section 7 loses its end.
            for keep in [5, 6, 9, s7.len() / 2, s7.len() - 1] {
                let cut = &s7[..keep];
                assert!(matches!(ours(s5, &no_bitmap(), cut, n), Err(UnpackError::Damaged(_))), "{name} cut to {keep} octets");
            }
            // Section 5 cut short.
            assert!(ours(&s5[..19], &no_bitmap(), s7, n).is_err(), "{name} section 5 short");
            // Random damage: any octet changed; never a panic (an error or
            // different numbers are both possible for damaged bits).
            for _ in 0..300 {
                let mut bad5 = s5.clone();
                let mut bad7 = s7.clone();
                if rng.below(2) == 0 {
                    let at = 5 + rng.below(bad5.len() as u64 - 5) as usize;
                    bad5[at] = rng.next() as u8;
                } else {
                    let at = 5 + rng.below(bad7.len() as u64 - 5) as usize;
                    bad7[at] = rng.next() as u8;
                }
                let _ = ours(&bad5, &no_bitmap(), &bad7, n);
            }
        }
        // Unsupported, not damaged: spatial differencing of order 3.
        let mut bad = c5.clone();
        bad[47] = 3;
        assert!(matches!(ours(&bad, &no_bitmap(), &c7, n), Err(UnpackError::Unsupported(m)) if m.contains("order of spatial differencing is 3")));
    }
}
