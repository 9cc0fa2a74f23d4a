//! The encodings of a segment: numbers in its byte order, strings (u32 length, UTF-8),
//! property values by data type code, object paths; and the data type codes' names and sizes.

use super::at;
use super::TdmsError;
use std::io::Read;
use std::io::Seek;
use std::io::SeekFrom;

/// A property value.
#[derive(Debug, Clone, PartialEq)]
pub enum Value {
    /// Signed integer (int8..int64).
    Int(i64),
    /// Unsigned integer (uint8..uint64).
    UInt(u64),
    /// Floating point (float32, float64, with or without unit).
    Float(f64),
    /// Text (UTF-8).
    Text(String),
    /// Boolean.
    Bool(bool),
    /// Timestamp: whole seconds since 1904-01-01 00:00 UTC and the fraction in 2^-64 s.
    Time {
        /// Seconds since 1904-01-01 00:00 UTC.
        seconds: i64,
        /// Fraction of a second in units of 2^-64 s.
        fraction: u64,
    },
    /// Complex number (real, imaginary).
    Complex(f64, f64),
}

impl Value {
    /// The value as a number (integers and floats), None for the other kinds.
    pub fn as_f64(&self) -> Option<f64> {
        match *self {
            Value::Int(v) => Some(v as f64),
            Value::UInt(v) => Some(v as f64),
            Value::Float(v) => Some(v),
            _ => None,
        }
    }

    /// The value as text, None for the other kinds.
    pub fn as_text(&self) -> Option<&str> {
        match self {
            Value::Text(t) => Some(t),
            _ => None,
        }
    }
}

impl std::fmt::Display for Value {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Value::Int(v) => write!(f, "{v}"),
            Value::UInt(v) => write!(f, "{v}"),
            Value::Float(v) => write!(f, "{v}"),
            Value::Text(t) => write!(f, "{t}"),
            Value::Bool(b) => write!(f, "{b}"),
            Value::Time { seconds, fraction } => {
                write!(f, "{} s after 1904-01-01 UTC", *seconds as f64 + *fraction as f64 / 2f64.powi(64))
            }
            Value::Complex(re, im) => write!(f, "{re}{im:+}i"),
        }
    }
}

/// A short name of a TDMS data type code.
pub(crate) fn type_name(code: u32) -> String {
    match code {
        0 => "void".into(),
        1 => "int8".into(),
        2 => "int16".into(),
        3 => "int32".into(),
        4 => "int64".into(),
        5 => "uint8".into(),
        6 => "uint16".into(),
        7 => "uint32".into(),
        8 => "uint64".into(),
        9 => "float32".into(),
        10 => "float64".into(),
        11 => "extended float".into(),
        0x19 => "float32 with unit".into(),
        0x1A => "float64 with unit".into(),
        0x1B => "extended float with unit".into(),
        0x20 => "string".into(),
        0x21 => "boolean".into(),
        0x44 => "timestamp".into(),
        0x4F => "fixed point".into(),
        0x08_000C => "complex float32".into(),
        0x10_000D => "complex float64".into(),
        0xFFFF_FFFF => "DAQmx raw data".into(),
        c => format!("unknown type 0x{c:08X}"),
    }
}

/// Bytes per value of a fixed-size data type, None for strings and types of unknown size.
pub(crate) fn type_size(code: u32) -> Option<u64> {
    match code {
        1 | 5 | 0x21 => Some(1),
        2 | 6 => Some(2),
        3 | 7 | 9 | 0x19 => Some(4),
        4 | 8 | 10 | 0x1A | 0x08_000C => Some(8),
        0x44 | 0x10_000D => Some(16),
        _ => None,
    }
}

/// Group and channel names of an object path (`/`, `/'g'`, `/'g'/'c'`; `''` is a quote).
pub(crate) fn parse_path(path: &str) -> Result<(Option<String>, Option<String>), String> {
    let mut names = Vec::new();
    let mut chars = path.chars().peekable();
    while let Some(ch) = chars.next() {
        if ch != '/' {
            return Err(format!("found {ch:?} where '/' was expected"));
        }
        if chars.peek().is_none() && names.is_empty() {
            return Ok((None, None)); // the root "/"
        }
        if chars.next() != Some('\'') {
            return Err("expected a quoted name after '/'".into());
        }
        let mut name = String::new();
        loop {
            match chars.next() {
                Some('\'') if chars.peek() == Some(&'\'') => {
                    chars.next();
                    name.push('\'');
                }
                Some('\'') => break,
                Some(c) => name.push(c),
                None => return Err("a name without its closing quote".into()),
            }
        }
        names.push(name);
    }
    match names.len() {
        1 => Ok((names.pop(), None)),
        2 => {
            let c = names.pop();
            Ok((names.pop(), c))
        }
        n => Err(format!("{n} names, expected /'group' or /'group'/'channel'")),
    }
}

/// Reads `buf.len()` bytes at byte `pos` of `src`.
pub(crate) fn read_at<R: Read + Seek>(src: &mut R, pos: u64, buf: &mut [u8]) -> Result<(), TdmsError> {
    src.seek(SeekFrom::Start(pos)).map_err(|e| at(pos, format!("cannot seek there: {e}")))?;
    src.read_exact(buf).map_err(|e| at(pos, format!("cannot read {} bytes there: {e}", buf.len())))
}

/// Reads numbers, strings and property values from a metadata section held in memory.
pub(crate) struct Cursor<'a> {
    /// The bytes.
    pub(crate) buf: &'a [u8],
    /// Position in `buf`.
    pub(crate) pos: usize,
    /// Byte offset of `buf[0]` in the file.
    pub(crate) base: u64,
    /// Numbers are big-endian.
    pub(crate) big: bool,
}

impl Cursor<'_> {
    /// Byte offset of the next byte in the file.
    pub(crate) fn offset(&self) -> u64 {
        self.base + self.pos as u64
    }

    /// The next `n` bytes, for the field `what`.
    pub(crate) fn take(&mut self, n: usize, what: &str) -> Result<&[u8], TdmsError> {
        let left = self.buf.len() - self.pos;
        if n > left {
            return Err(at(
                self.offset(),
                format!("{what}: needs {n} bytes but the metadata section has {left} left"),
            ));
        }
        self.pos += n;
        Ok(&self.buf[self.pos - n..self.pos])
    }

    /// `N` bytes in the segment's byte order, as little-endian.
    fn le<const N: usize>(&mut self, what: &str) -> Result<[u8; N], TdmsError> {
        let big = self.big;
        let mut b = [0u8; N];
        b.copy_from_slice(self.take(N, what)?);
        if big {
            b.reverse();
        }
        Ok(b)
    }

    pub(crate) fn u32(&mut self, what: &str) -> Result<u32, TdmsError> {
        Ok(u32::from_le_bytes(self.le(what)?))
    }

    pub(crate) fn u64(&mut self, what: &str) -> Result<u64, TdmsError> {
        Ok(u64::from_le_bytes(self.le(what)?))
    }

    /// A string: u32 length in bytes, then UTF-8.
    pub(crate) fn string(&mut self, what: &str) -> Result<String, TdmsError> {
        let at_len = self.offset();
        let n = self.u32(what)? as usize;
        let bytes = self.take(n, what)?;
        String::from_utf8(bytes.to_vec())
            .map_err(|_| at(at_len + 4, format!("{what}: {n} bytes that are not UTF-8, expected UTF-8 text")))
    }

    /// A property value: data type code, then the value.
    pub(crate) fn value(&mut self, name: &str, name_at: u64) -> Result<Value, TdmsError> {
        let type_at = self.offset();
        let code = self.u32("property data type")?;
        let what = format!("property {name:?}");
        let w = what.as_str();
        Ok(match code {
            1 => Value::Int(i8::from_le_bytes(self.le(w)?).into()),
            2 => Value::Int(i16::from_le_bytes(self.le(w)?).into()),
            3 => Value::Int(i32::from_le_bytes(self.le(w)?).into()),
            4 => Value::Int(i64::from_le_bytes(self.le(w)?)),
            5 => Value::UInt(u8::from_le_bytes(self.le(w)?).into()),
            6 => Value::UInt(u16::from_le_bytes(self.le(w)?).into()),
            7 => Value::UInt(u32::from_le_bytes(self.le(w)?).into()),
            8 => Value::UInt(u64::from_le_bytes(self.le(w)?)),
            9 | 0x19 => Value::Float(f32::from_le_bytes(self.le(w)?).into()),
            10 | 0x1A => Value::Float(f64::from_le_bytes(self.le(w)?)),
            0x20 => Value::Text(self.string(w)?),
            0x21 => Value::Bool(self.take(1, w)?[0] != 0),
            0x44 => {
                // Little-endian: fraction then seconds; big-endian: seconds then fraction.
                let (a, b) = (self.u64(w)?, self.u64(w)?);
                let (fraction, seconds) = if self.big { (b, a) } else { (a, b) };
                Value::Time { seconds: seconds as i64, fraction }
            }
            0x08_000C => {
                let re = f32::from_le_bytes(self.le(w)?);
                Value::Complex(re.into(), f32::from_le_bytes(self.le(w)?).into())
            }
            0x10_000D => {
                let re = f64::from_le_bytes(self.le(w)?);
                Value::Complex(re, f64::from_le_bytes(self.le(w)?))
            }
            other => {
                return Err(at(
                    type_at,
                    format!(
                        "property {name:?} (name at byte {name_at}) has data type {} (0x{other:08X}), which \
                         this reader does not decode: expected an integer, float, string, boolean, \
                         timestamp or complex type",
                        type_name(other)
                    ),
                ))
            }
        })
    }
}
