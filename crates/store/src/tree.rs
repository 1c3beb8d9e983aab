//! An in-memory tree of HDF5-like groups: what a record's results look like
//! before they are written, independent of the HDF5 library.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// An attribute value.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum Attr {
    Int(i64),
    Float(f64),
    Text(String),
    Floats(Vec<f64>),
    Texts(Vec<String>),
}

/// The values of a dataset; 2-D data is row-major with `cols` columns.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum Data {
    I64(Vec<i64>),
    F64(Vec<f64>),
    F32(Vec<f32>),
    Text(Vec<String>),
    F32Matrix { cols: usize, values: Vec<f32> },
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
