//! Telling what is wrong with a file the netCDF library will not read, in
//! words the user can act on: empty, truncated (a NetCDF-4/HDF5 file whose
//! superblock says it ends past the file's end, or a classic file whose
//! header describes more bytes than there are), a classic header that is
//! damaged, or not a NetCDF or GRIB2 file at all (with its first bytes and,
//! for a few common kinds, what it is). The library's own message stays on
//! a second line for experts.
//!
//! Sources: the NetCDF classic format specification (NetCDF Users Guide,
//! "File Format Specifications": CDF-1, CDF-2, CDF-5 headers) and the HDF5
//! file format specification (superblock versions 0 to 3, "End of File
//! Address" relative to the base address).

use std::io::Read;
use std::path::Path;

/// The HDF5 format signature (HDF5 file format specification, 2.1).
/// The HDF5 format signature (HDF5 File Format Specification, "Format
/// Signature"): the first bytes of every netCDF-4 file without a user block.
pub(crate) const HDF5_SIGNATURE: [u8; 8] = [0x89, b'H', b'D', b'F', b'\r', b'\n', 0x1a, b'\n'];

/// A problem found by looking at the file's bytes.
#[derive(Debug, Clone, PartialEq)]
pub enum Finding {
    Missing,
    Folder,
    Empty,
    /// The file has `size` bytes; its header says it has `expected`.
    Truncated { format: &'static str, size: u64, expected: u64 },
    /// A classic header that cannot be read: where and what.
    DamagedHeader { at: u64, what: String },
    /// Neither NetCDF nor GRIB: what it starts with, and what it looks like.
    Foreign { start: String, looks_like: Option<&'static str> },
}

impl Finding {
    /// The finding in the user's words.
    pub fn explain(&self) -> String {
        match self {
            Finding::Empty => "the file is empty (0 bytes)".into(),
            Finding::Truncated { format, size, expected } => format!(
                "the file looks truncated ({size} bytes, but its {format} header says it holds {expected}; {}): copy or download it again",
                if format.contains("HDF5") { "a NetCDF-4/HDF5 file cannot be read past its end" } else { "Baroc will not read the missing part as zeros" }
            ),
            Finding::Missing => "there is no such file".into(),
            Finding::Folder => "it is a folder, not a file".into(),
            Finding::DamagedHeader { at, what } => format!("the file starts as NetCDF classic, but its header is damaged at byte {at}: {what}"),
            Finding::Foreign { start, looks_like } => match looks_like {
                Some(kind) => format!("this is not a NetCDF or GRIB2 file: it looks like {kind} (it starts with {start})"),
                None => format!("this is not a NetCDF or GRIB2 file (it starts with {start})"),
            },
        }
    }
}

fn read_head(path: &Path, limit: usize) -> std::io::Result<(Vec<u8>, u64)> {
    let mut file = std::fs::File::open(path)?;
    let size = file.metadata()?.len();
    let mut head = Vec::with_capacity(limit.min(size as usize));
    file.by_ref().take(limit as u64).read_to_end(&mut head)?;
    Ok((head, size))
}

/// Looks at a file before the netCDF library opens it: only a classic
/// file whose header describes more bytes than the file has is refused
/// here (the library would read the missing part as zeros). A header that
/// cannot be parsed is left to the library.
pub fn before_open(path: &Path) -> Option<Finding> {
    let (head, size) = read_head(path, 4).ok()?;
    if head.len() < 4 || &head[..3] != b"CDF" {
        return None;
    }
    match classic_extent_of_file(path, size) {
        Ok(Some(expected)) if expected > size => Some(Finding::Truncated { format: "NetCDF classic", size, expected }),
        _ => None,
    }
}

/// `classic_extent` of a file, reading only as much of it as the header
/// needs: 64 KiB first, more only when the header goes on (at most 64 MiB:
/// a damaged length must not make Baroc read a whole large file).
fn classic_extent_of_file(path: &Path, size: u64) -> Result<Option<u64>, Finding> {
    let mut limit = 1usize << 16;
    loop {
        let bytes = read_head(path, limit).map_err(|e| Finding::DamagedHeader { at: 0, what: e.to_string() })?.0;
        match classic_extent(&bytes, size) {
            Err(Finding::DamagedHeader { .. }) if (bytes.len() as u64) < size && limit < 64 << 20 => limit *= 16,
            other => return other,
        }
    }
}

/// Explains why the library could not open `path` (its message is
/// `library`): what the bytes show, then the library's message on a second
/// line. When the bytes show nothing wrong, the library's message alone.
pub fn explain_open_failure(path: &Path, library: &str) -> String {
    match after_failure(path) {
        // Nothing to add for experts when there is no file to read.
        Some(finding @ (Finding::Missing | Finding::Folder)) => finding.explain(),
        Some(finding) => format!("{}\n  (the netCDF library said: {library})", finding.explain()),
        None => library.to_string(),
    }
}

/// What the bytes of a file the library would not open show.
pub fn after_failure(path: &Path) -> Option<Finding> {
    // A URL (OPeNDAP) is the library's to explain.
    if path.to_string_lossy().contains("://") {
        return None;
    }
    if path.is_dir() {
        return Some(Finding::Folder);
    }
    if std::fs::symlink_metadata(path).is_err() {
        return Some(Finding::Missing);
    }
    let (head, size) = read_head(path, 1 << 16).ok()?;
    if size == 0 {
        return Some(Finding::Empty);
    }
    if let Some(found) = hdf5_extent(&head) {
        return match found {
            Some(expected) if expected > size => Some(Finding::Truncated { format: "NetCDF-4/HDF5", size, expected }),
            _ => None,
        };
    }
    if head.len() >= 4 && &head[..3] == b"CDF" && matches!(head[3], 1 | 2 | 5) {
        return match classic_extent_of_file(path, size) {
            Ok(Some(expected)) if expected > size => Some(Finding::Truncated { format: "NetCDF classic", size, expected }),
            Ok(_) => None,
            Err(damage) => Some(damage),
        };
    }
    Some(Finding::Foreign { start: quoted_start(&head), looks_like: looks_like(&head) })
}

/// The first bytes as text a user can compare: printable ASCII as it is,
/// other bytes as \xNN, at most 16 bytes.
fn quoted_start(head: &[u8]) -> String {
    let mut text = String::new();
    for &b in head.iter().take(16) {
        if (0x20..0x7f).contains(&b) {
            text.push(b as char);
        } else {
            text.push_str(&format!("\\x{b:02X}"));
        }
    }
    format!("`{text}`{}", if head.len() > 16 { "…" } else { "" })
}

/// A few kinds of file often given by mistake, by their first bytes
/// (their published signatures).
fn looks_like(head: &[u8]) -> Option<&'static str> {
    let starts = |p: &[u8]| head.starts_with(p);
    let text = String::from_utf8_lossy(&head[..head.len().min(64)]).trim_start().to_ascii_lowercase();
    Some(if starts(&[0x1f, 0x8b]) {
        "a gzip-compressed file: decompress it first (gunzip)"
    } else if starts(b"BZh") {
        "a bzip2-compressed file: decompress it first (bunzip2)"
    } else if starts(&[0xfd, b'7', b'z', b'X', b'Z', 0]) {
        "an xz-compressed file: decompress it first (unxz)"
    } else if starts(&[0x28, 0xb5, 0x2f, 0xfd]) {
        "a zstd-compressed file: decompress it first (unzstd)"
    } else if starts(b"PK\x03\x04") {
        "a zip archive: extract the data file from it first"
    } else if starts(&[0x0e, 0x03, 0x13, 0x01]) {
        "an HDF4 file, which Baroc does not read (it reads NetCDF classic, NetCDF-4 and GRIB2)"
    } else if starts(b"GRIB") {
        "a GRIB file of an edition Baroc does not read"
    } else if text.starts_with("netcdf ") {
        "NetCDF in text form (CDL): make a binary NetCDF file of it with ncgen"
    } else if text.starts_with("<!doctype html") || text.starts_with("<html") || text.starts_with("<?xml") {
        "an HTML or XML page (a download that returned a web page instead of the data?)"
    } else if starts(b"%PDF") {
        "a PDF document"
    } else {
        return None;
    })
}

/// Little-endian unsigned integer of `width` bytes at `at`.
fn little_endian(bytes: &[u8], at: usize, width: usize) -> Option<u64> {
    let slice = bytes.get(at..at + width)?;
    Some(slice.iter().rev().fold(0u64, |acc, &b| (acc << 8) | b as u64))
}

/// If the bytes hold an HDF5 superblock (at 0, 512, 1024, ... within what
/// was read): Some(end of file address + base address), or Some(None) when
/// the superblock cannot say (an undefined address, an unknown version).
/// None when there is no HDF5 signature.
fn hdf5_extent(head: &[u8]) -> Option<Option<u64>> {
    let mut position = 0usize;
    let start = loop {
        if head.get(position..position + 8)? == HDF5_SIGNATURE {
            break position;
        }
        position = if position == 0 { 512 } else { position * 2 };
    };
    let version = *head.get(start + 8)?;
    let (offsets_size, base_at) = match version {
        // Versions 0 and 1: size of offsets at byte 13; the base address
        // follows the fixed fields (24 bytes, 28 with version 1's extra K).
        0 => (*head.get(start + 13)? as usize, start + 24),
        1 => (*head.get(start + 13)? as usize, start + 28),
        // Versions 2 and 3: size of offsets at byte 9, base address at 12.
        2 | 3 => (*head.get(start + 9)? as usize, start + 12),
        _ => return Some(None),
    };
    if !matches!(offsets_size, 2 | 4 | 8) {
        return Some(None);
    }
    let undefined = if offsets_size == 8 { u64::MAX } else { (1u64 << (8 * offsets_size)) - 1 };
    let base = little_endian(head, base_at, offsets_size)?;
    // Versions 0/1: base, free-space address, end of file. Versions 2/3:
    // base, superblock extension address, end of file.
    let end = little_endian(head, base_at + 2 * offsets_size, offsets_size)?;
    if end == undefined || base == undefined {
        return Some(None);
    }
    Some(base.checked_add(end))
}

/// A reader of a classic header (CDF-1, CDF-2 "64-bit offset", CDF-5
/// "64-bit data"), big-endian throughout.
struct Classic<'a> {
    bytes: &'a [u8],
    at: usize,
    version: u8,
    size: u64,
}

const NC_DIMENSION: u64 = 0x0A;
const NC_VARIABLE: u64 = 0x0B;
const NC_ATTRIBUTE: u64 = 0x0C;
const STREAMING: u64 = 0xFFFF_FFFF;

impl Classic<'_> {
    fn damaged(&self, what: impl Into<String>) -> Finding {
        Finding::DamagedHeader { at: self.at as u64, what: what.into() }
    }

    fn number(&mut self, width: usize) -> Result<u64, Finding> {
        let slice = self.bytes.get(self.at..self.at + width).ok_or_else(|| self.damaged(format!("the header runs past the end of the file ({} bytes)", self.size)))?;
        self.at += width;
        Ok(slice.iter().fold(0u64, |acc, &b| (acc << 8) | b as u64))
    }

    /// NON_NEG and nelems: 4 bytes, 8 in CDF-5.
    fn count(&mut self) -> Result<u64, Finding> {
        self.number(if self.version == 5 { 8 } else { 4 })
    }

    fn skip_padded(&mut self, length: u64, what: &str) -> Result<(), Finding> {
        let padded = length.checked_add(3).map(|n| n & !3).filter(|&n| self.at as u64 + n <= self.bytes.len() as u64);
        match padded {
            Some(n) => {
                self.at += n as usize;
                Ok(())
            }
            None => Err(self.damaged(format!("{what} {length} bytes long, past the end of the file ({} bytes)", self.size))),
        }
    }

    fn name(&mut self) -> Result<(), Finding> {
        let length = self.count()?;
        self.skip_padded(length, "a name")
    }

    /// A list: ABSENT (two zeros) or its tag and element count.
    fn list(&mut self, tag: u64, what: &str) -> Result<u64, Finding> {
        let at = self.at;
        let found = self.number(4)?;
        let count = self.count()?;
        if found == 0 && count == 0 {
            return Ok(0);
        }
        if found != tag {
            self.at = at;
            return Err(self.damaged(format!("expected the {what} list (tag {tag:#04x}), found {found:#010x}")));
        }
        Ok(count)
    }

    fn attributes(&mut self) -> Result<(), Finding> {
        let count = self.list(NC_ATTRIBUTE, "attribute")?;
        for _ in 0..count {
            self.name()?;
            let kind = self.number(4)?;
            let width = type_size(kind).ok_or_else(|| self.damaged(format!("an attribute of unknown type {kind}")))?;
            let values = self.count()?;
            self.skip_padded(values.saturating_mul(width), "attribute values")?;
        }
        Ok(())
    }
}

/// Bytes of one value of a classic type (NC_BYTE 1 ... NC_UINT64 11).
fn type_size(kind: u64) -> Option<u64> {
    Some(match kind {
        1 | 2 | 7 => 1,
        3 | 8 => 2,
        4 | 5 | 9 => 4,
        6 | 10 | 11 => 8,
        _ => return None,
    })
}

/// The number of bytes a classic file's header describes (the end of its
/// last variable's data), Ok(None) for a streamed file whose record count
/// is not written, or what is damaged.
fn classic_extent(bytes: &[u8], size: u64) -> Result<Option<u64>, Finding> {
    let version = *bytes.get(3).unwrap_or(&0);
    let mut header = Classic { bytes, at: 4, version, size };
    if !matches!(version, 1 | 2 | 5) {
        return Err(Finding::DamagedHeader { at: 3, what: format!("unknown classic format version {version}") });
    }
    let records = header.count()?;
    let dimension_count = header.list(NC_DIMENSION, "dimension")?;
    let mut dimensions = Vec::new();
    for _ in 0..dimension_count.min(1 << 20) {
        header.name()?;
        dimensions.push(header.count()?);
    }
    header.attributes()?;
    let variable_count = header.list(NC_VARIABLE, "variable")?;
    // (begin, bytes of the data or of one record, is a record variable)
    let mut variables = Vec::new();
    for _ in 0..variable_count.min(1 << 20) {
        header.name()?;
        let rank = header.count()?;
        let mut is_record = false;
        let mut values: u64 = 1;
        for k in 0..rank.min(1024) {
            let id = header.count()?;
            let length = *dimensions.get(id as usize).ok_or_else(|| header.damaged(format!("a variable names dimension {id}, but there are {}", dimensions.len())))?;
            if k == 0 && length == 0 {
                is_record = true;
            } else {
                values = values.saturating_mul(length);
            }
        }
        header.attributes()?;
        let kind = header.number(4)?;
        let width = type_size(kind).ok_or_else(|| header.damaged(format!("a variable of unknown type {kind}")))?;
        let _vsize = header.count()?;
        let begin = header.number(if version == 1 { 4 } else { 8 })?;
        variables.push((begin, values.saturating_mul(width), is_record));
    }
    // Record variables take turns within each record; a record holds each
    // one's slab padded to 4 bytes (unpadded when there is only one).
    let record_variables: Vec<&(u64, u64, bool)> = variables.iter().filter(|v| v.2).collect();
    let record_size: u64 = if record_variables.len() == 1 { record_variables[0].1 } else { record_variables.iter().map(|v| (v.1 + 3) & !3).sum() };
    let mut end = header.at as u64;
    for &(begin, bytes, is_record) in &variables {
        let last = if is_record {
            if records == STREAMING {
                return Ok(None);
            }
            if records == 0 {
                continue;
            }
            begin.saturating_add((records - 1).saturating_mul(record_size)).saturating_add(bytes)
        } else {
            begin.saturating_add(bytes)
        };
        end = end.max(last);
    }
    Ok(Some(end))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A CDF-1 header written by hand after the classic format
    /// specification: one dimension `x` of 3, no attributes, one NC_SHORT
    /// variable `v(x)` starting right after the header.
    fn small_classic() -> Vec<u8> {
        let mut b = b"CDF\x01".to_vec();
        let word = |b: &mut Vec<u8>, n: u32| b.extend_from_slice(&n.to_be_bytes());
        word(&mut b, 0); // numrecs
        word(&mut b, 0x0A); // NC_DIMENSION
        word(&mut b, 1);
        word(&mut b, 1);
        b.extend_from_slice(b"x\0\0\0");
        word(&mut b, 3);
        word(&mut b, 0); // gatt_list ABSENT
        word(&mut b, 0);
        word(&mut b, 0x0B); // NC_VARIABLE
        word(&mut b, 1);
        word(&mut b, 1);
        b.extend_from_slice(b"v\0\0\0");
        word(&mut b, 1); // rank
        word(&mut b, 0); // dimension 0
        word(&mut b, 0); // vatt_list ABSENT
        word(&mut b, 0);
        word(&mut b, 3); // NC_SHORT
        word(&mut b, 8); // vsize, padded
        let begin = b.len() as u32 + 4;
        word(&mut b, begin);
        b.extend_from_slice(&[0, 1, 0, 2, 0, 3]);
        b
    }

    #[test]
    fn a_classic_header_gives_the_file_s_extent() {
        let bytes = small_classic();
        assert_eq!(classic_extent(&bytes, bytes.len() as u64), Ok(Some(bytes.len() as u64)));
        let cut = &bytes[..bytes.len() - 2];
        assert_eq!(classic_extent(cut, cut.len() as u64), Ok(Some(bytes.len() as u64)));
    }

    #[test]
    fn a_damaged_classic_header_is_located() {
        let mut bytes = small_classic();
        bytes[11] = 0x7f; // the dimension tag
        match classic_extent(&bytes, bytes.len() as u64) {
            Err(Finding::DamagedHeader { at: 8, what }) => assert!(what.contains("dimension list"), "{what}"),
            other => panic!("{other:?}"),
        }
        let mut bytes = small_classic();
        bytes[19] = 0xff; // the name length of `x`
        assert!(matches!(classic_extent(&bytes, bytes.len() as u64), Err(Finding::DamagedHeader { at: 20, .. })));
    }

    #[test]
    fn an_hdf5_superblock_gives_its_end_of_file_address() {
        // Version 2 superblock (HDF5 file format specification, II.A):
        // signature, version 2, 8-byte offsets and lengths, flags, then
        // base address 0, extension address undefined, end of file 4096.
        let mut b = HDF5_SIGNATURE.to_vec();
        b.extend_from_slice(&[2, 8, 8, 0]);
        b.extend_from_slice(&0u64.to_le_bytes());
        b.extend_from_slice(&u64::MAX.to_le_bytes());
        b.extend_from_slice(&4096u64.to_le_bytes());
        assert_eq!(hdf5_extent(&b), Some(Some(4096)));
        // Version 0: size of offsets at byte 13, base address at 24.
        let mut b = HDF5_SIGNATURE.to_vec();
        b.extend_from_slice(&[0, 0, 0, 0, 0, 8, 8, 0, 4, 0, 16, 0, 0, 0, 0, 0]);
        b.extend_from_slice(&0u64.to_le_bytes());
        b.extend_from_slice(&u64::MAX.to_le_bytes());
        b.extend_from_slice(&123_456u64.to_le_bytes());
        assert_eq!(hdf5_extent(&b), Some(Some(123_456)));
        assert_eq!(hdf5_extent(b"CDF\x01...."), None);
    }

    #[test]
    fn foreign_files_are_named_by_their_first_bytes() {
        assert_eq!(quoted_start(b"%PDF-1.4\n\x00"), "`%PDF-1.4\\x0A\\x00`");
        assert_eq!(looks_like(&[0x1f, 0x8b, 8, 0]), Some("a gzip-compressed file: decompress it first (gunzip)"));
        assert!(looks_like(b"netcdf case {\ndimensions:").unwrap().contains("CDL"));
        assert_eq!(looks_like(b"random bytes"), None);
    }
}
