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
    F32(#[serde(with = "nan_null")] Vec<f32>),
    Text(Vec<String>),
    F32Matrix {
        cols: usize,
        #[serde(with = "nan_null")]
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
        #[serde(with = "nan_null")]
        values: Vec<f32>,
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
