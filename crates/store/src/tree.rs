//! An in-memory tree of HDF5-like groups: what a record's results look like
//! before they are written, independent of the HDF5 library.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// JSON has no NaN: missing values (NaN) are written as `null` and read back as NaN,
/// so a part file round-trips exactly.
mod nan_null {
    use serde::{Deserialize, Deserializer, Serialize, Serializer};

    pub trait Float: Copy {
        fn is_nan_value(self) -> bool;
        fn nan() -> Self;
    }
    impl Float for f64 {
        fn is_nan_value(self) -> bool {
            self.is_nan()
        }
        fn nan() -> Self {
            f64::NAN
        }
    }
    impl Float for f32 {
        fn is_nan_value(self) -> bool {
            self.is_nan()
        }
        fn nan() -> Self {
            f32::NAN
        }
    }

    pub fn serialize<S: Serializer, T: Float + Serialize>(
        v: &[T],
        s: S,
    ) -> Result<S::Ok, S::Error> {
        let o: Vec<Option<T>> = v
            .iter()
            .map(|x| (!x.is_nan_value()).then_some(*x))
            .collect();
        o.serialize(s)
    }

    pub fn deserialize<'de, D: Deserializer<'de>, T: Float + Deserialize<'de>>(
        d: D,
    ) -> Result<Vec<T>, D::Error> {
        let o: Vec<Option<T>> = Vec::deserialize(d)?;
        Ok(o.into_iter().map(|x| x.unwrap_or_else(T::nan)).collect())
    }

    pub mod scalar {
        use serde::{Deserialize, Deserializer, Serializer};

        pub fn serialize<S: Serializer>(v: &f64, s: S) -> Result<S::Ok, S::Error> {
            if v.is_nan() {
                s.serialize_none()
            } else {
                s.serialize_f64(*v)
            }
        }

        pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
            Ok(Option::<f64>::deserialize(d)?.unwrap_or(f64::NAN))
        }
    }
}

/// `f32` arrays (median beats, confidences: most of a part file) are written
/// as one base64 string of their little-endian bytes instead of a JSON array
/// of decimal numbers: about 5.3 characters per value instead of about 10,
/// no float formatting or parsing, and every bit kept (NaN included, where
/// the array form wrote `null`). Part files of earlier versions, with the
/// array form, are still read.
mod f32_packed {
    use serde::de::{self, SeqAccess, Visitor};
    use serde::{Deserializer, Serializer};
    use std::fmt;

    const ALPHABET: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";

    /// Standard base64 (RFC 4648, section 4) of the values' little-endian bytes.
    pub fn encode(v: &[f32]) -> String {
        let mut bytes = Vec::with_capacity(4 * v.len());
        for x in v {
            bytes.extend_from_slice(&x.to_bits().to_le_bytes());
        }
        encode_bytes(&bytes)
    }

    /// Standard base64 with padding.
    pub fn encode_bytes(bytes: &[u8]) -> String {
        let mut out = Vec::with_capacity(bytes.len().div_ceil(3) * 4);
        let mut chunks = bytes.chunks_exact(3);
        for c in &mut chunks {
            let n = (c[0] as u32) << 16 | (c[1] as u32) << 8 | c[2] as u32;
            out.extend_from_slice(&[
                ALPHABET[(n >> 18) as usize & 63],
                ALPHABET[(n >> 12) as usize & 63],
                ALPHABET[(n >> 6) as usize & 63],
                ALPHABET[n as usize & 63],
            ]);
        }
        match *chunks.remainder() {
            [a] => {
                let n = (a as u32) << 16;
                out.extend_from_slice(&[
                    ALPHABET[(n >> 18) as usize & 63],
                    ALPHABET[(n >> 12) as usize & 63],
                    b'=',
                    b'=',
                ]);
            }
            [a, b] => {
                let n = (a as u32) << 16 | (b as u32) << 8;
                out.extend_from_slice(&[
                    ALPHABET[(n >> 18) as usize & 63],
                    ALPHABET[(n >> 12) as usize & 63],
                    ALPHABET[(n >> 6) as usize & 63],
                    b'=',
                ]);
            }
            _ => {}
        }
        String::from_utf8(out).expect("base64 alphabet is ASCII")
    }

    /// The values of an [`encode`]d string; `None` if it is not one.
    pub fn decode(s: &str) -> Option<Vec<f32>> {
        let bytes = decode_bytes(s)?;
        if !bytes.len().is_multiple_of(4) {
            return None;
        }
        Some(
            bytes
                .chunks_exact(4)
                .map(|b| f32::from_bits(u32::from_le_bytes([b[0], b[1], b[2], b[3]])))
                .collect(),
        )
    }

    /// The bytes of an [`encode_bytes`] string; `None` if it is not one.
    pub fn decode_bytes(s: &str) -> Option<Vec<u8>> {
        let s = s.as_bytes();
        if !s.len().is_multiple_of(4) {
            return None;
        }
        let pad = s.iter().rev().take_while(|&&c| c == b'=').count();
        if pad > 2 {
            return None;
        }
        let val = |c: u8| -> Option<u32> {
            Some(match c {
                b'A'..=b'Z' => c - b'A',
                b'a'..=b'z' => c - b'a' + 26,
                b'0'..=b'9' => c - b'0' + 52,
                b'+' => 62,
                b'/' => 63,
                _ => return None,
            } as u32)
        };
        let mut bytes = Vec::with_capacity(s.len() / 4 * 3);
        for (i, q) in s.chunks_exact(4).enumerate() {
            let last = i + 1 == s.len() / 4;
            let keep = if last { 3 - pad } else { 3 };
            let mut n = 0u32;
            for (k, &c) in q.iter().enumerate() {
                let d = if k > keep { 0 } else { val(c)? };
                n = n << 6 | d;
            }
            bytes.extend_from_slice(&n.to_be_bytes()[1..1 + keep]);
        }
        Some(bytes)
    }

    pub fn serialize<S: Serializer>(v: &[f32], s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(&encode(v))
    }

    struct Packed;

    impl<'de> Visitor<'de> for Packed {
        type Value = Vec<f32>;

        fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
            f.write_str("a base64 string of f32 values or an array of numbers and nulls")
        }

        fn visit_str<E: de::Error>(self, s: &str) -> Result<Vec<f32>, E> {
            decode(s).ok_or_else(|| E::custom("invalid base64 f32 array"))
        }

        // The array form of earlier part files: `null` for NaN.
        fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Vec<f32>, A::Error> {
            let mut v = Vec::with_capacity(seq.size_hint().unwrap_or(0));
            while let Some(x) = seq.next_element::<Option<f32>>()? {
                v.push(x.unwrap_or(f32::NAN));
            }
            Ok(v)
        }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<f32>, D::Error> {
        d.deserialize_any(Packed)
    }

    #[cfg(test)]
    mod tests {
        use super::*;

        // Test vectors of RFC 4648, section 10.
        #[test]
        fn rfc_4648_vectors() {
            for (plain, enc) in [
                ("", ""),
                ("f", "Zg=="),
                ("fo", "Zm8="),
                ("foo", "Zm9v"),
                ("foob", "Zm9vYg=="),
                ("fooba", "Zm9vYmE="),
                ("foobar", "Zm9vYmFy"),
            ] {
                assert_eq!(encode_bytes(plain.as_bytes()), enc);
                assert_eq!(decode_bytes(enc).unwrap(), plain.as_bytes());
            }
            for bad in ["Zg=", "Z===", "Zm9v!A==", "Zg==Zg==", "Zm8=Zm9v"] {
                assert_eq!(decode_bytes(bad), None, "{bad}");
            }
        }

        // Every bit of every value back, NaN payloads, infinities, signed
        // zeros and subnormals included, for every remainder of 3 bytes.
        #[test]
        fn f32_round_trip_bit_for_bit() {
            let mut s = 0x1234_5678u32;
            for n in 0..40usize {
                let mut v: Vec<f32> = (0..n)
                    .map(|_| {
                        s ^= s << 13;
                        s ^= s >> 17;
                        s ^= s << 5;
                        f32::from_bits(s)
                    })
                    .collect();
                let specials = [
                    f32::NAN,
                    -0.0,
                    0.0,
                    f32::INFINITY,
                    1e-45,
                    f32::from_bits(0x7fc0_0001),
                ];
                for (x, sp) in v.iter_mut().zip(specials) {
                    *x = sp;
                }
                let back = decode(&encode(&v)).unwrap();
                let a: Vec<u32> = v.iter().map(|x| x.to_bits()).collect();
                let b: Vec<u32> = back.iter().map(|x| x.to_bits()).collect();
                assert_eq!(a, b, "n={n}");
            }
        }
    }
}

/// An attribute value.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum Attr {
    Int(i64),
    Float(#[serde(with = "nan_null::scalar")] f64),
    Text(String),
    Floats(#[serde(with = "nan_null")] Vec<f64>),
    Texts(Vec<String>),
}

/// The values of a dataset; 2-D data is row-major with `cols` columns.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum Data {
    I64(Vec<i64>),
    F64(#[serde(with = "nan_null")] Vec<f64>),
    F32(#[serde(with = "f32_packed")] Vec<f32>),
    Text(Vec<String>),
    F32Matrix {
        cols: usize,
        #[serde(with = "f32_packed")]
        values: Vec<f32>,
    },
    /// N-dimensional arrays, row-major (C order), `values.len()` = product of `shape`.
    I64Nd {
        shape: Vec<usize>,
        values: Vec<i64>,
    },
    F64Nd {
        shape: Vec<usize>,
        #[serde(with = "nan_null")]
        values: Vec<f64>,
    },
    F32Nd {
        shape: Vec<usize>,
        #[serde(with = "f32_packed")]
        values: Vec<f32>,
    },
    /// A 3-D f32 array `[shape[0], shape[1], shape[2]]` held as one block of
    /// `shape[1] · shape[2]` values per index of its leading axis, written to
    /// HDF5 without joining the blocks (the median beats of a long record's
    /// windows are hundreds of MB; joining them would hold them twice). Built
    /// only on the way into `results.h5`, never in part files.
    #[serde(skip)]
    F32Stack {
        shape: [usize; 3],
        blocks: Vec<Vec<f32>>,
    },
}

impl Data {
    /// Number of rows (elements for 1-D data).
    pub fn rows(&self) -> usize {
        match self {
            Data::I64(v) => v.len(),
            Data::F64(v) => v.len(),
            Data::F32(v) => v.len(),
            Data::Text(v) => v.len(),
            Data::F32Matrix { cols, values } => values.len().checked_div(*cols).unwrap_or(0),
            Data::I64Nd { shape, .. } | Data::F64Nd { shape, .. } | Data::F32Nd { shape, .. } => {
                shape.first().copied().unwrap_or(0)
            }
            Data::F32Stack { shape, .. } => shape[0],
        }
    }
}

/// A dataset with its own attributes (units, descriptions).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Dataset {
    pub data: Data,
    pub attrs: BTreeMap<String, Attr>,
}

/// A group: attributes, datasets and sub-groups, each keyed by name.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct Group {
    pub attrs: BTreeMap<String, Attr>,
    pub datasets: BTreeMap<String, Dataset>,
    pub groups: BTreeMap<String, Group>,
}

impl Group {
    /// Set an attribute.
    pub fn attr(&mut self, name: &str, value: Attr) -> &mut Self {
        self.attrs.insert(name.to_string(), value);
        self
    }

    /// Add a dataset without attributes.
    pub fn dataset(&mut self, name: &str, data: Data) -> &mut Dataset {
        self.datasets.insert(
            name.to_string(),
            Dataset {
                data,
                attrs: BTreeMap::new(),
            },
        );
        self.datasets.get_mut(name).expect("just inserted")
    }

    /// Add a dataset with a `units` attribute.
    pub fn dataset_with_units(&mut self, name: &str, data: Data, units: &str) -> &mut Dataset {
        let d = self.dataset(name, data);
        d.attrs.insert("units".into(), Attr::Text(units.into()));
        d
    }

    /// Get or create a sub-group.
    pub fn group(&mut self, name: &str) -> &mut Group {
        self.groups.entry(name.to_string()).or_default()
    }
}
