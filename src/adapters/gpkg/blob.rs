//! GeoPackageBinary: the geometry BLOB of a GeoPackage feature table.
//!
//! Layout (OGC GeoPackage 1.3, clause 2.1.3 "Geometry Encoding", table
//! "GeoPackage SQL Geometry Binary Format"):
//!
//! ```text
//! magic 'G' 'P' | version u8 (0 = version 1) | flags u8 | srs_id i32 | envelope f64[0|4|6|8] | WKB
//! flags bits 7..0 = R R X Y E E E B
//!   X  0 = StandardGeoPackageBinary, 1 = ExtendedGeoPackageBinary
//!   Y  1 = empty geometry
//!   EEE envelope contents: 0 none, 1 [minx, maxx, miny, maxy], 2 + [minz, maxz],
//!       3 + [minm, maxm], 4 + [minz, maxz, minm, maxm]; 5-7 invalid
//!   B  byte order of srs_id and envelope: 0 big-endian, 1 little-endian
//! ```
//!
//! The body is ISO WKB (OGC 06-103r4, clause 8.2; Z, M and ZM types are the
//! 1000, 2000 and 3000 offsets). Before a body is handed to geozero it is walked
//! once by [`walk_wkb`], which checks every count against the bytes that are
//! left: a truncated or corrupt blob is then a clear error naming the row,
//! never a huge allocation inside the decoder. The same walk yields the
//! envelope when the header has none (GDAL omits it for points).
//!
//! Extended blobs (user-defined geometry types, extension
//! `gpkg_geom_<type>`) are refused: geofold cannot read what is inside them.

use std::fmt;

/// Bytes before the envelope: magic, version, flags, srs_id.
const FIXED_HEADER: usize = 8;

/// Deepest nesting of collections accepted (a collection of collections of…).
const MAX_DEPTH: u32 = 32;

/// What the header of a GeoPackageBinary blob says.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Header {
    /// The SRS id written in the blob.
    pub srs_id: i32,
    /// The empty-geometry flag.
    pub empty: bool,
    /// The XY envelope `[min_x, max_x, min_y, max_y]`, when the blob has one.
    pub envelope: Option<[f64; 4]>,
    /// Where the WKB body starts.
    pub wkb_offset: usize,
}

/// Why a blob cannot be read.
#[derive(Debug, Clone, PartialEq)]
pub enum BlobError {
    /// Shorter than the 8-byte fixed header.
    TooShort(usize),
    /// The first two bytes are not `GP`.
    BadMagic([u8; 2]),
    /// A version byte other than 0.
    Version(u8),
    /// The X flag: ExtendedGeoPackageBinary.
    Extended,
    /// Envelope contents indicator 5, 6 or 7.
    EnvelopeCode(u8),
    /// The envelope runs past the end of the blob.
    TruncatedEnvelope {
        /// Bytes the header and envelope need.
        needed: usize,
        /// Bytes the blob has.
        length: usize,
    },
    /// The WKB body is malformed.
    Wkb(WkbError),
}

impl fmt::Display for BlobError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            BlobError::TooShort(length) => write!(
                f,
                "geometry blob of {length} bytes is shorter than the 8-byte GeoPackageBinary header"
            ),
            BlobError::BadMagic(bytes) => write!(
                f,
                "geometry blob does not start with the GeoPackageBinary magic 'GP' (0x47 0x50) but with 0x{:02x} 0x{:02x}",
                bytes[0], bytes[1]
            ),
            BlobError::Version(version) => write!(
                f,
                "GeoPackageBinary version byte is {version}; only 0 (version 1) is defined"
            ),
            BlobError::Extended => write!(
                f,
                "geometry is an ExtendedGeoPackageBinary (user-defined type), which geofold cannot read"
            ),
            BlobError::EnvelopeCode(code) => write!(
                f,
                "GeoPackageBinary envelope code {code} is invalid (0 to 4 are defined)"
            ),
            BlobError::TruncatedEnvelope { needed, length } => write!(
                f,
                "geometry blob is truncated: its header and envelope need {needed} bytes, the blob has {length}"
            ),
            BlobError::Wkb(error) => write!(f, "{error}"),
        }
    }
}

impl std::error::Error for BlobError {}

/// Why a WKB body is malformed.
#[derive(Debug, Clone, PartialEq)]
pub enum WkbError {
    /// The body ends before the geometry does.
    Truncated {
        /// Offset (in the body) where more bytes were needed.
        at: usize,
        /// Bytes needed from there.
        needed: usize,
        /// Length of the body.
        length: usize,
    },
    /// A byte-order byte other than 0 or 1.
    ByteOrder {
        /// Offset in the body.
        at: usize,
        /// The byte.
        value: u8,
    },
    /// A geometry type geofold does not read (curves, surfaces, unknown codes).
    UnsupportedType {
        /// Offset in the body.
        at: usize,
        /// The type code.
        code: u32,
    },
    /// A collection nested deeper than geofold follows.
    TooDeep,
    /// Bytes left over after the geometry.
    Trailing {
        /// Bytes left.
        extra: usize,
    },
}

impl fmt::Display for WkbError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            WkbError::Truncated { at, needed, length } => write!(
                f,
                "WKB is truncated: {needed} more bytes needed at byte {at} of {length}"
            ),
            WkbError::ByteOrder { at, value } => write!(
                f,
                "WKB byte-order byte at byte {at} is {value}; it must be 0 or 1"
            ),
            WkbError::UnsupportedType { at, code } => write!(
                f,
                "WKB geometry type {code} at byte {at} is not a Point, LineString, Polygon, Multi* or GeometryCollection"
            ),
            WkbError::TooDeep => write!(
                f,
                "WKB collections are nested more than {MAX_DEPTH} deep"
            ),
            WkbError::Trailing { extra } => {
                write!(f, "WKB has {extra} bytes after the end of the geometry")
            }
        }
    }
}

impl std::error::Error for WkbError {}

/// Parses the header of a GeoPackageBinary blob.
///
/// # Errors
/// Bad magic, version, flags, or an envelope longer than the blob.
pub fn parse_header(blob: &[u8]) -> Result<Header, BlobError> {
    if blob.len() < FIXED_HEADER {
        return Err(BlobError::TooShort(blob.len()));
    }
    if &blob[0..2] != b"GP" {
        return Err(BlobError::BadMagic([blob[0], blob[1]]));
    }
    if blob[2] != 0 {
        return Err(BlobError::Version(blob[2]));
    }
    let flags = blob[3];
    if flags & 0b0010_0000 != 0 {
        return Err(BlobError::Extended);
    }
    let empty = flags & 0b0001_0000 != 0;
    let code = (flags >> 1) & 0b111;
    let doubles = match code {
        0 => 0,
        1 => 4,
        2 | 3 => 6,
        4 => 8,
        _ => return Err(BlobError::EnvelopeCode(code)),
    };
    let little = flags & 1 == 1;
    let wkb_offset = FIXED_HEADER + doubles * 8;
    if blob.len() < wkb_offset {
        return Err(BlobError::TruncatedEnvelope {
            needed: wkb_offset,
            length: blob.len(),
        });
    }
    let srs_bytes = [blob[4], blob[5], blob[6], blob[7]];
    let srs_id = if little {
        i32::from_le_bytes(srs_bytes)
    } else {
        i32::from_be_bytes(srs_bytes)
    };
    let envelope = (doubles > 0).then(|| {
        let mut values = [0.0; 4];
        for (index, value) in values.iter_mut().enumerate() {
            let start = FIXED_HEADER + index * 8;
            let mut bytes = [0u8; 8];
            bytes.copy_from_slice(&blob[start..start + 8]);
            *value = if little {
                f64::from_le_bytes(bytes)
            } else {
                f64::from_be_bytes(bytes)
            };
        }
        values
    });
    Ok(Header {
        srs_id,
        empty,
        envelope,
        wkb_offset,
    })
}

/// Parses the header and checks the WKB body; returns the header.
///
/// # Errors
/// Any [`BlobError`], including a malformed body.
pub fn check(blob: &[u8]) -> Result<Header, BlobError> {
    let header = parse_header(blob)?;
    walk_wkb(&blob[header.wkb_offset..], None).map_err(BlobError::Wkb)?;
    Ok(header)
}

/// The XY envelope `[min_x, max_x, min_y, max_y]` of a blob: the header's, or
/// computed from the WKB. `None` for an empty geometry.
///
/// # Errors
/// Any [`BlobError`].
pub fn envelope(blob: &[u8]) -> Result<Option<[f64; 4]>, BlobError> {
    let header = parse_header(blob)?;
    if header.empty {
        return Ok(None);
    }
    if let Some(envelope) = header.envelope {
        return Ok(Some(envelope));
    }
    let mut bounds = Bounds::default();
    walk_wkb(&blob[header.wkb_offset..], Some(&mut bounds)).map_err(BlobError::Wkb)?;
    Ok(bounds.envelope())
}

/// The geometry of a blob, its body checked by [`walk_wkb`] before geozero
/// decodes it; `None` for an empty geometry.
///
/// # Errors
/// Any [`BlobError`], or the decoder's complaint, as text.
pub fn to_geometry(blob: &[u8]) -> Result<Option<geo_types::Geometry<f64>>, String> {
    use geozero::ToGeo;
    let header = check(blob).map_err(|e| e.to_string())?;
    if header.empty {
        return Ok(None);
    }
    geozero::wkb::Wkb(&blob[header.wkb_offset..])
        .to_geo()
        .map(Some)
        .map_err(|e| format!("geometry cannot be decoded: {e}"))
}

/// Wraps a WKB body in a little-endian StandardGeoPackageBinary header with
/// an XY envelope (envelope code 1); an empty geometry (`envelope` None) gets
/// the empty flag and no envelope.
pub fn encode(srs_id: i32, envelope: Option<[f64; 4]>, wkb: &[u8]) -> Vec<u8> {
    let mut out = Vec::with_capacity(FIXED_HEADER + 32 + wkb.len());
    out.extend_from_slice(b"GP");
    out.push(0);
    match envelope {
        Some(values) => {
            out.push(0b0000_0011);
            out.extend_from_slice(&srs_id.to_le_bytes());
            for value in values {
                out.extend_from_slice(&value.to_le_bytes());
            }
        }
        None => {
            out.push(0b0001_0001);
            out.extend_from_slice(&srs_id.to_le_bytes());
        }
    }
    out.extend_from_slice(wkb);
    out
}

/// Wraps a WKB body, computing its envelope.
///
/// # Errors
/// A malformed body.
pub fn encode_wkb(srs_id: i32, wkb: &[u8]) -> Result<Vec<u8>, WkbError> {
    let mut bounds = Bounds::default();
    walk_wkb(wkb, Some(&mut bounds))?;
    Ok(encode(srs_id, bounds.envelope(), wkb))
}

/// A running XY bounding box; NaN coordinates (empty points) are ignored.
#[derive(Debug, Clone, Copy)]
pub struct Bounds {
    min_x: f64,
    max_x: f64,
    min_y: f64,
    max_y: f64,
}

impl Default for Bounds {
    fn default() -> Bounds {
        Bounds {
            min_x: f64::INFINITY,
            max_x: f64::NEG_INFINITY,
            min_y: f64::INFINITY,
            max_y: f64::NEG_INFINITY,
        }
    }
}

impl Bounds {
    fn add(&mut self, x: f64, y: f64) {
        if x.is_nan() || y.is_nan() {
            return;
        }
        self.min_x = self.min_x.min(x);
        self.max_x = self.max_x.max(x);
        self.min_y = self.min_y.min(y);
        self.max_y = self.max_y.max(y);
    }

    /// Extends by an envelope `[min_x, max_x, min_y, max_y]`.
    pub fn add_envelope(&mut self, envelope: [f64; 4]) {
        self.add(envelope[0], envelope[2]);
        self.add(envelope[1], envelope[3]);
    }

    /// `[min_x, max_x, min_y, max_y]`, or None when nothing was added.
    pub fn envelope(&self) -> Option<[f64; 4]> {
        (self.min_x <= self.max_x && self.min_y <= self.max_y)
            .then_some([self.min_x, self.max_x, self.min_y, self.max_y])
    }
}

/// A cursor over a WKB body that checks every read against the length.
struct Cursor<'a> {
    bytes: &'a [u8],
    at: usize,
}

impl Cursor<'_> {
    fn need(&self, count: usize) -> Result<(), WkbError> {
        if self.bytes.len() - self.at < count {
            return Err(WkbError::Truncated {
                at: self.at,
                needed: count,
                length: self.bytes.len(),
            });
        }
        Ok(())
    }

    fn u8(&mut self) -> Result<u8, WkbError> {
        self.need(1)?;
        self.at += 1;
        Ok(self.bytes[self.at - 1])
    }

    fn u32(&mut self, little: bool) -> Result<u32, WkbError> {
        self.need(4)?;
        let mut word = [0u8; 4];
        word.copy_from_slice(&self.bytes[self.at..self.at + 4]);
        self.at += 4;
        Ok(if little {
            u32::from_le_bytes(word)
        } else {
            u32::from_be_bytes(word)
        })
    }

    fn f64_at(&self, offset: usize, little: bool) -> f64 {
        let mut word = [0u8; 8];
        word.copy_from_slice(&self.bytes[offset..offset + 8]);
        if little {
            f64::from_le_bytes(word)
        } else {
            f64::from_be_bytes(word)
        }
    }

    /// Skips `count` points of `dims` doubles each, adding their XY to `bounds`.
    fn points(
        &mut self,
        count: u32,
        dims: usize,
        little: bool,
        bounds: &mut Option<&mut Bounds>,
    ) -> Result<(), WkbError> {
        let size = (count as usize).saturating_mul(dims * 8);
        self.need(size)?;
        if let Some(bounds) = bounds {
            for index in 0..count as usize {
                let start = self.at + index * dims * 8;
                bounds.add(self.f64_at(start, little), self.f64_at(start + 8, little));
            }
        }
        self.at += size;
        Ok(())
    }
}

/// Walks a WKB body, checking its structure and, with `bounds`, collecting
/// the XY envelope.
///
/// # Errors
/// Truncation, a bad byte-order byte, an unsupported type, trailing bytes.
pub fn walk_wkb(wkb: &[u8], mut bounds: Option<&mut Bounds>) -> Result<(), WkbError> {
    let mut cursor = Cursor { bytes: wkb, at: 0 };
    walk_geometry(&mut cursor, &mut bounds, 0)?;
    if cursor.at != wkb.len() {
        return Err(WkbError::Trailing {
            extra: wkb.len() - cursor.at,
        });
    }
    Ok(())
}

fn walk_geometry(
    cursor: &mut Cursor<'_>,
    bounds: &mut Option<&mut Bounds>,
    depth: u32,
) -> Result<(), WkbError> {
    if depth > MAX_DEPTH {
        return Err(WkbError::TooDeep);
    }
    let start = cursor.at;
    let little = match cursor.u8()? {
        0 => false,
        1 => true,
        value => return Err(WkbError::ByteOrder { at: start, value }),
    };
    let type_at = cursor.at;
    let code = cursor.u32(little)?;
    let dims = match code / 1000 {
        0 => 2,
        1 | 2 => 3,
        3 => 4,
        _ => return Err(WkbError::UnsupportedType { at: type_at, code }),
    };
    match code % 1000 {
        1 => cursor.points(1, dims, little, bounds),
        2 => {
            let count = cursor.u32(little)?;
            cursor.points(count, dims, little, bounds)
        }
        3 => {
            let rings = cursor.u32(little)?;
            // Each ring needs at least its 4-byte count: reject absurd counts
            // before looping over them.
            cursor.need((rings as usize).saturating_mul(4))?;
            for _ in 0..rings {
                let count = cursor.u32(little)?;
                cursor.points(count, dims, little, bounds)?;
            }
            Ok(())
        }
        4..=7 => {
            let parts = cursor.u32(little)?;
            // Each part needs at least a 5-byte header.
            cursor.need((parts as usize).saturating_mul(5))?;
            for _ in 0..parts {
                walk_geometry(cursor, bounds, depth + 1)?;
            }
            Ok(())
        }
        _ => Err(WkbError::UnsupportedType { at: type_at, code }),
    }
}

#[cfg(test)]
mod tests;
