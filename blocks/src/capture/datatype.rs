//! Sample encodings named as in the SigMF standard (`cf32_le`, `ci16_le`,
//! `ci8`, `cu8`, `rf32_be`, ...): one place that turns bytes into floats and
//! back, for raw files, SigMF recordings and standard input alike.
//!
//! Integers are scaled to [-1, 1): `i16 / 32768`, `i8 / 128`, and unsigned
//! 8-bit as offset binary, `(u8 - 128) / 128`.

use super::error::CaptureError;
use std::fmt;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum SampleFormat {
    F32,
    I16,
    I8,
    U8,
}

/// A sample encoding: complex or real, component format, byte order.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct DataType {
    pub complex: bool,
    pub format: SampleFormat,
    pub big_endian: bool,
}

impl DataType {
    pub const CF32_LE: DataType = DataType { complex: true, format: SampleFormat::F32, big_endian: false };

    /// Parse a SigMF datatype name. 8-bit types take no byte-order suffix;
    /// wider ones require `_le` or `_be`. The error names no file; a caller
    /// that read the name from one adds it ([`CaptureError::in_file`]).
    pub fn parse(name: &str) -> Result<DataType, CaptureError> {
        let bad = || {
            CaptureError::unsupported(
                "",
                format!(
                    "unsupported datatype '{name}' (supported: c or r, then f32, i16, i8 or u8, with _le or _be for f32 and i16; e.g. cf32_le, ci16_le, ci8, cu8)"
                ),
            )
        };
        let (complex, rest) = match name.as_bytes().first() {
            Some(b'c') => (true, &name[1..]),
            Some(b'r') => (false, &name[1..]),
            _ => return Err(bad()),
        };
        let (body, big_endian) = match rest.rsplit_once('_') {
            Some((b, "le")) => (b, false),
            Some((b, "be")) => (b, true),
            Some(_) => return Err(bad()),
            None => (rest, false),
        };
        let format = match body {
            "f32" => SampleFormat::F32,
            "i16" => SampleFormat::I16,
            "i8" => SampleFormat::I8,
            "u8" => SampleFormat::U8,
            _ => return Err(bad()),
        };
        let eight = matches!(format, SampleFormat::I8 | SampleFormat::U8);
        if eight == rest.contains('_') {
            return Err(bad());
        }
        Ok(DataType { complex, format, big_endian })
    }

    /// Bytes of one component (one real number).
    pub fn component_bytes(&self) -> usize {
        match self.format {
            SampleFormat::F32 => 4,
            SampleFormat::I16 => 2,
            SampleFormat::I8 | SampleFormat::U8 => 1,
        }
    }

    /// Components per sample of one channel: 2 for complex, 1 for real.
    pub fn components(&self) -> usize {
        if self.complex { 2 } else { 1 }
    }

    /// Bytes of one sample of one channel.
    pub fn sample_bytes(&self) -> usize {
        self.component_bytes() * self.components()
    }

    /// Decode whole components from `bytes`, appending to `out`. Trailing
    /// bytes of an incomplete component are ignored (the caller checks).
    pub fn decode(&self, bytes: &[u8], out: &mut Vec<f32>) {
        let be = self.big_endian;
        match self.format {
            SampleFormat::F32 => out.extend(bytes.chunks_exact(4).map(|b| {
                let a = [b[0], b[1], b[2], b[3]];
                if be { f32::from_be_bytes(a) } else { f32::from_le_bytes(a) }
            })),
            SampleFormat::I16 => out.extend(bytes.chunks_exact(2).map(|b| {
                let a = [b[0], b[1]];
                (if be { i16::from_be_bytes(a) } else { i16::from_le_bytes(a) }) as f32 / 32768.0
            })),
            SampleFormat::I8 => out.extend(bytes.iter().map(|&b| b as i8 as f32 / 128.0)),
            SampleFormat::U8 => out.extend(bytes.iter().map(|&b| (b as f32 - 128.0) / 128.0)),
        }
    }

    /// Encode components, rounding and clipping integers to their range.
    pub fn encode(&self, values: &[f32], out: &mut Vec<u8>) {
        let be = self.big_endian;
        for &v in values {
            match self.format {
                SampleFormat::F32 => out.extend_from_slice(&if be { v.to_be_bytes() } else { v.to_le_bytes() }),
                SampleFormat::I16 => {
                    let q = (v * 32768.0).round().clamp(-32768.0, 32767.0) as i16;
                    out.extend_from_slice(&if be { q.to_be_bytes() } else { q.to_le_bytes() });
                }
                SampleFormat::I8 => out.push((v * 128.0).round().clamp(-128.0, 127.0) as i8 as u8),
                SampleFormat::U8 => out.push((v * 128.0 + 128.0).round().clamp(0.0, 255.0) as u8),
            }
        }
    }
}

impl fmt::Display for DataType {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let body = match self.format {
            SampleFormat::F32 => "f32",
            SampleFormat::I16 => "i16",
            SampleFormat::I8 => "i8",
            SampleFormat::U8 => "u8",
        };
        let order = match (self.format, self.big_endian) {
            (SampleFormat::I8 | SampleFormat::U8, _) => "",
            (_, true) => "_be",
            (_, false) => "_le",
        };
        write!(f, "{}{body}{order}", if self.complex { 'c' } else { 'r' })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_round_trip_and_bad_names_are_refused() {
        for n in ["cf32_le", "cf32_be", "ci16_le", "ri16_be", "ci8", "cu8", "rf32_le", "ru8"] {
            assert_eq!(DataType::parse(n).unwrap().to_string(), n);
        }
        for n in ["cf64_le", "ci8_le", "cf32", "xf32_le", "cu16", ""] {
            assert!(DataType::parse(n).is_err(), "{n}");
        }
    }

    #[test]
    fn encode_decode_round_trip() {
        let vals = [0.0f32, 0.5, -0.5, 0.99, -1.0];
        for n in ["cf32_le", "cf32_be", "ci16_le", "ci16_be", "ci8", "cu8"] {
            let dt = DataType::parse(n).unwrap();
            let mut bytes = Vec::new();
            dt.encode(&vals, &mut bytes);
            assert_eq!(bytes.len(), vals.len() * dt.component_bytes());
            let mut back = Vec::new();
            dt.decode(&bytes, &mut back);
            let tol = match dt.format {
                SampleFormat::F32 => 0.0,
                SampleFormat::I16 => 1.0 / 32768.0,
                _ => 1.0 / 128.0,
            };
            for (a, b) in vals.iter().zip(&back) {
                assert!((a - b).abs() <= tol, "{n}: {a} vs {b}");
            }
        }
    }
}
