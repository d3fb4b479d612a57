//! PostgreSQL binary COPY, encoded and decoded by hand.
//!
//! Format (PostgreSQL documentation, "COPY", section "Binary Format"): the
//! 11-byte signature `PGCOPY\n\xff\r\n\0`, an i32 flags field, an i32 header
//! extension length and the extension; then per row an i16 field count and, per
//! field, an i32 length (-1 for NULL) and the value in the type's binary send
//! format; finally an i16 of -1. Hand-rolling it avoids a per-value `ToSql`
//! dispatch on million-row tables.

use bytes::{Buf, BufMut, Bytes, BytesMut};

use crate::error::Error;

const SIGNATURE: &[u8; 11] = b"PGCOPY\n\xff\r\n\0";

/// PostgreSQL's epoch (2000-01-01) minus the Unix epoch, in microseconds.
const POSTGRES_EPOCH_MICROS: i64 = 946_684_800_000_000;

/// Builds a binary COPY stream row by row.
pub struct CopyEncoder {
    buffer: BytesMut,
}

impl Default for CopyEncoder {
    fn default() -> Self {
        Self::new()
    }
}

impl CopyEncoder {
    /// A stream with its header written.
    pub fn new() -> CopyEncoder {
        let mut buffer = BytesMut::with_capacity(1 << 20);
        buffer.put_slice(SIGNATURE);
        buffer.put_i32(0);
        buffer.put_i32(0);
        CopyEncoder { buffer }
    }

    /// Starts a row of `fields` fields.
    pub fn row(&mut self, fields: i16) {
        self.buffer.put_i16(fields);
    }

    /// A NULL field.
    pub fn null(&mut self) {
        self.buffer.put_i32(-1);
    }

    /// An `int4` field.
    pub fn int4(&mut self, value: i32) {
        self.buffer.put_i32(4);
        self.buffer.put_i32(value);
    }

    /// An `int8` field.
    pub fn int8(&mut self, value: i64) {
        self.buffer.put_i32(8);
        self.buffer.put_i64(value);
    }

    /// A `float8` field; NaN is written as NULL, since results never store NaN.
    pub fn float8(&mut self, value: f64) {
        if value.is_nan() {
            self.null();
        } else {
            self.buffer.put_i32(8);
            self.buffer.put_f64(value);
        }
    }

    /// A `float8` field or NULL.
    pub fn float8_opt(&mut self, value: Option<f64>) {
        match value {
            Some(value) => self.float8(value),
            None => self.null(),
        }
    }

    /// A `text` field.
    pub fn text(&mut self, value: &str) {
        self.buffer.put_i32(value.len() as i32);
        self.buffer.put_slice(value.as_bytes());
    }

    /// A `uuid` field.
    pub fn uuid(&mut self, value: &uuid::Uuid) {
        self.buffer.put_i32(16);
        self.buffer.put_slice(value.as_bytes());
    }

    /// A unit id as a `text` field (integers in decimal, without allocating).
    pub fn unit_id(&mut self, id: &crate::core::units::UnitId) {
        match id {
            crate::core::units::UnitId::Int(value) => {
                let mut digits = itoa::Buffer::new();
                self.text(digits.format(*value));
            }
            crate::core::units::UnitId::Text(value) => self.text(value),
        }
    }

    /// One value of a results row, in the binary form of its column's type
    /// (`srid` for a geometry value: the EWKB carries it).
    pub fn value(
        &mut self,
        column: &crate::results::Column,
        value: &crate::results::rows::Value<'_>,
        srid: i32,
    ) {
        use crate::results::rows::Value;
        use crate::results::ColumnType;
        match value {
            Value::Null => self.null(),
            Value::Uuid(id) => self.uuid(id),
            // Binary jsonb is a version byte (1) and the text (PostgreSQL
            // jsonb_send).
            Value::Str(text) if column.ty == ColumnType::Json => {
                self.buffer.put_i32(text.len() as i32 + 1);
                self.buffer.put_u8(1);
                self.buffer.put_slice(text.as_bytes());
            }
            Value::Str(text) => self.text(text),
            Value::Id(id) => self.unit_id(id),
            Value::Int(number) => match column.ty {
                ColumnType::BigInt => self.int8(*number),
                _ => self.int4(*number as i32),
            },
            Value::Float(number) => self.float8(*number),
            Value::Geometry(shape) => {
                self.raw(&crate::adapters::wkb::multipolygon(shape, Some(srid)))
            }
            Value::Timestamp(micros) => self.timestamptz(*micros),
        }
    }

    /// A field already in its binary form (e.g. EWKB for `geometry`).
    pub fn raw(&mut self, bytes: &[u8]) {
        self.buffer.put_i32(bytes.len() as i32);
        self.buffer.put_slice(bytes);
    }

    /// A `timestamptz` field from Unix microseconds.
    pub fn timestamptz(&mut self, unix_micros: i64) {
        self.buffer.put_i32(8);
        self.buffer.put_i64(unix_micros - POSTGRES_EPOCH_MICROS);
    }

    /// Bytes ready to send once the buffer passes `threshold`; call often while writing.
    pub fn take_if_larger(&mut self, threshold: usize) -> Option<Bytes> {
        (self.buffer.len() >= threshold).then(|| self.buffer.split().freeze())
    }

    /// The trailer and whatever is left.
    pub fn finish(mut self) -> Bytes {
        self.buffer.put_i16(-1);
        self.buffer.freeze()
    }
}

/// Splits a binary COPY stream, arriving in arbitrary chunks, into rows.
pub struct CopyDecoder {
    buffer: BytesMut,
    header_done: bool,
    finished: bool,
    fields: Vec<Option<(usize, usize)>>,
}

impl Default for CopyDecoder {
    fn default() -> Self {
        Self::new()
    }
}

impl CopyDecoder {
    /// A decoder waiting for the header.
    pub fn new() -> CopyDecoder {
        CopyDecoder {
            buffer: BytesMut::new(),
            header_done: false,
            finished: false,
            fields: Vec::new(),
        }
    }

    /// Adds a chunk and calls `on_row` for each complete row, with the fields as
    /// byte slices (`None` for NULL).
    ///
    /// # Errors
    /// A malformed stream, or the error `on_row` returns.
    pub fn feed(
        &mut self,
        chunk: &[u8],
        mut on_row: impl FnMut(&[Option<&[u8]>]) -> Result<(), Error>,
    ) -> Result<(), Error> {
        self.buffer.extend_from_slice(chunk);
        if !self.header_done {
            if self.buffer.len() < 19 {
                return Ok(());
            }
            if &self.buffer[..11] != SIGNATURE {
                return Err(Error::Internal(
                    "COPY stream has no binary signature".into(),
                ));
            }
            let extension = i32::from_be_bytes([
                self.buffer[15],
                self.buffer[16],
                self.buffer[17],
                self.buffer[18],
            ]);
            let header = 19 + extension.max(0) as usize;
            if self.buffer.len() < header {
                return Ok(());
            }
            self.buffer.advance(header);
            self.header_done = true;
        }
        let buffer = &self.buffer[..];
        let fields = &mut self.fields;
        let mut slices: Vec<Option<&[u8]>> = Vec::new();
        let mut consumed = 0usize;
        while !self.finished && buffer.len() >= consumed + 2 {
            let rest = &buffer[consumed..];
            let count = i16::from_be_bytes([rest[0], rest[1]]);
            if count == -1 {
                self.finished = true;
                consumed = buffer.len();
                break;
            }
            fields.clear();
            let mut offset = 2;
            let mut complete = true;
            for _ in 0..count {
                if rest.len() < offset + 4 {
                    complete = false;
                    break;
                }
                let length = i32::from_be_bytes([
                    rest[offset],
                    rest[offset + 1],
                    rest[offset + 2],
                    rest[offset + 3],
                ]);
                offset += 4;
                if length < 0 {
                    fields.push(None);
                } else {
                    let length = length as usize;
                    if rest.len() < offset + length {
                        complete = false;
                        break;
                    }
                    fields.push(Some((offset, length)));
                    offset += length;
                }
            }
            if !complete {
                break;
            }
            slices.clear();
            slices.extend(
                fields
                    .iter()
                    .map(|f| f.map(|(start, length)| &rest[start..start + length])),
            );
            on_row(&slices)?;
            consumed += offset;
        }
        drop(slices);
        self.buffer.advance(consumed);
        Ok(())
    }

    /// True once the trailer was seen.
    pub fn is_finished(&self) -> bool {
        self.finished
    }
}

/// Reads a big-endian `int8` field.
pub fn read_int8(bytes: &[u8]) -> Option<i64> {
    Some(i64::from_be_bytes(bytes.try_into().ok()?))
}

/// Reads a big-endian `float8` field.
pub fn read_float8(bytes: &[u8]) -> Option<f64> {
    Some(f64::from_be_bytes(bytes.try_into().ok()?))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rows_survive_any_chunking() {
        let mut encoder = CopyEncoder::new();
        for i in 0..50i64 {
            encoder.row(3);
            encoder.int8(i);
            if i % 7 == 0 {
                encoder.null();
            } else {
                encoder.text(&format!("unit-{i}"));
            }
            encoder.float8(i as f64 / 3.0);
        }
        let stream = encoder.finish();
        for chunk_size in [1, 3, 17, 4096] {
            let mut decoder = CopyDecoder::new();
            let mut seen = Vec::new();
            for chunk in stream.chunks(chunk_size) {
                decoder
                    .feed(chunk, |fields| {
                        let id = read_int8(fields[0].unwrap()).unwrap();
                        let name = fields[1].map(|b| String::from_utf8(b.to_vec()).unwrap());
                        let value = read_float8(fields[2].unwrap()).unwrap();
                        seen.push((id, name, value));
                        Ok(())
                    })
                    .unwrap();
            }
            assert!(decoder.is_finished());
            assert_eq!(seen.len(), 50);
            assert_eq!(seen[7].1, None);
            assert_eq!(seen[8].1.as_deref(), Some("unit-8"));
            assert_eq!(seen[49].2, 49.0 / 3.0);
        }
    }
}
