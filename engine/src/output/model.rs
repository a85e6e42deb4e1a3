//! The in-memory result tree: what a result file holds, independent of HDF5.

use std::fmt;
use std::sync::Arc;

/// Value of an attribute on the root, a group or a dataset.
#[derive(Debug, Clone, PartialEq)]
pub enum AttrValue {
    /// UTF-8 text of any length (no NUL characters).
    Str(String),
    /// A 64-bit float.
    F64(f64),
    /// A signed 64-bit integer.
    I64(i64),
    /// An unsigned 64-bit integer.
    U64(u64),
    /// A 1-D array of 64-bit floats.
    F64s(Vec<f64>),
    /// A 1-D array of signed 64-bit integers.
    I64s(Vec<i64>),
    /// A flag, stored as u8 0/1 (see the module docs).
    Bool(bool),
}

impl AttrValue {
    /// The text, if this is a string.
    pub fn as_str(&self) -> Option<&str> {
        match self {
            AttrValue::Str(s) => Some(s),
            _ => None,
        }
    }

    /// The value as f64 if it is a single number (integers converted).
    pub fn as_f64(&self) -> Option<f64> {
        match *self {
            AttrValue::F64(x) => Some(x),
            AttrValue::I64(x) => Some(x as f64),
            AttrValue::U64(x) => Some(x as f64),
            _ => None,
        }
    }

    /// Same value and the same bits (NaN payloads and the sign of zero count).
    pub fn bits_equal(&self, other: &AttrValue) -> bool {
        match (self, other) {
            (AttrValue::F64(a), AttrValue::F64(b)) => a.to_bits() == b.to_bits(),
            (AttrValue::F64s(a), AttrValue::F64s(b)) => {
                a.len() == b.len() && a.iter().zip(b).all(|(x, y)| x.to_bits() == y.to_bits())
            }
            _ => self == other,
        }
    }

    /// Short name of the value's type, for listings.
    pub fn type_name(&self) -> &'static str {
        match self {
            AttrValue::Str(_) => "str",
            AttrValue::F64(_) => "f64",
            AttrValue::I64(_) => "i64",
            AttrValue::U64(_) => "u64",
            AttrValue::F64s(_) => "f64[]",
            AttrValue::I64s(_) => "i64[]",
            AttrValue::Bool(_) => "bool",
        }
    }
}

impl fmt::Display for AttrValue {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            AttrValue::Str(s) => write!(f, "{s}"),
            AttrValue::F64(x) => write!(f, "{x}"),
            AttrValue::I64(x) => write!(f, "{x}"),
            AttrValue::U64(x) => write!(f, "{x}"),
            AttrValue::F64s(v) => write!(f, "{v:?}"),
            AttrValue::I64s(v) => write!(f, "{v:?}"),
            AttrValue::Bool(b) => write!(f, "{b}"),
        }
    }
}

impl From<&str> for AttrValue {
    fn from(s: &str) -> Self {
        AttrValue::Str(s.to_owned())
    }
}
impl From<String> for AttrValue {
    fn from(s: String) -> Self {
        AttrValue::Str(s)
    }
}
impl From<f64> for AttrValue {
    fn from(x: f64) -> Self {
        AttrValue::F64(x)
    }
}
impl From<i64> for AttrValue {
    fn from(x: i64) -> Self {
        AttrValue::I64(x)
    }
}
impl From<u64> for AttrValue {
    fn from(x: u64) -> Self {
        AttrValue::U64(x)
    }
}
impl From<bool> for AttrValue {
    fn from(x: bool) -> Self {
        AttrValue::Bool(x)
    }
}
impl From<Vec<f64>> for AttrValue {
    fn from(x: Vec<f64>) -> Self {
        AttrValue::F64s(x)
    }
}

/// The elements of a dataset, flat in row-major order, with their element type.
#[derive(Debug, Clone, PartialEq)]
pub enum DataBuf {
    /// 64-bit floats (scores, uncertainties, bin edges).
    F64(Vec<f64>),
    /// 32-bit floats (large images where single precision suffices).
    F32(Vec<f32>),
    /// Signed 64-bit integers.
    I64(Vec<i64>),
    /// Signed 32-bit integers.
    I32(Vec<i32>),
    /// Unsigned 64-bit integers (counts).
    U64(Vec<u64>),
    /// Unsigned 32-bit integers.
    U32(Vec<u32>),
    /// Unsigned 16-bit integers (material indices of a voxel grid).
    U16(Vec<u16>),
    /// Unsigned 8-bit integers (masks, small indices).
    U8(Vec<u8>),
    /// UTF-8 strings, one per element (no NUL characters).
    Str(Vec<String>),
    /// 64-bit floats computed block by block while the file is written (large voxel grids), so
    /// the whole array never sits in memory. Written and read back exactly as [`DataBuf::F64`].
    Produced(Produced),
}

/// Elements produced on demand: `fill(start, out)` writes elements `start .. start + out.len()`.
/// Float64 (scores) or unsigned 64-bit words (raw sums of shard files).
#[derive(Clone)]
pub struct Produced {
    len: usize,
    fill: ProducedFill,
}

#[derive(Clone)]
enum ProducedFill {
    F64(Arc<dyn Fn(usize, &mut [f64]) + Send + Sync>),
    U64(Arc<dyn Fn(usize, &mut [u64]) + Send + Sync>),
}

impl Produced {
    /// Elements per block when a produced array is walked.
    pub const BLOCK: usize = 1 << 16;

    /// `len` float64 elements made by `fill`, which must give the same values whenever it is
    /// called.
    pub fn new(len: usize, fill: impl Fn(usize, &mut [f64]) + Send + Sync + 'static) -> Self {
        Produced { len, fill: ProducedFill::F64(Arc::new(fill)) }
    }

    /// `len` unsigned 64-bit elements made by `fill` (same rule).
    pub fn new_u64(len: usize, fill: impl Fn(usize, &mut [u64]) + Send + Sync + 'static) -> Self {
        Produced { len, fill: ProducedFill::U64(Arc::new(fill)) }
    }

    /// Number of elements.
    pub fn len(&self) -> usize {
        self.len
    }

    /// Whether there are no elements.
    pub fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// True for unsigned 64-bit elements.
    pub fn is_u64(&self) -> bool {
        matches!(self.fill, ProducedFill::U64(_))
    }

    /// Writes elements `start .. start + out.len()` into `out` (u64 elements converted).
    pub fn fill(&self, start: usize, out: &mut [f64]) {
        assert!(start + out.len() <= self.len, "produced range past the end");
        match &self.fill {
            ProducedFill::F64(f) => f(start, out),
            ProducedFill::U64(f) => {
                let mut w = vec![0u64; out.len()];
                f(start, &mut w);
                for (o, v) in out.iter_mut().zip(w) {
                    *o = v as f64;
                }
            }
        }
    }

    /// Writes the u64 elements `start .. start + out.len()` into `out`; `false` (nothing
    /// written) for float64 elements.
    pub fn fill_u64(&self, start: usize, out: &mut [u64]) -> bool {
        assert!(start + out.len() <= self.len, "produced range past the end");
        match &self.fill {
            ProducedFill::U64(f) => {
                f(start, out);
                true
            }
            ProducedFill::F64(_) => false,
        }
    }

    /// Appends the little-endian bytes of elements `start .. start + n` to `out`.
    pub fn le_bytes(&self, start: usize, n: usize, out: &mut Vec<u8>) {
        match &self.fill {
            ProducedFill::F64(f) => {
                let mut v = vec![0.0; n];
                f(start, &mut v);
                v.iter().for_each(|x| out.extend_from_slice(&x.to_le_bytes()));
            }
            ProducedFill::U64(f) => {
                let mut v = vec![0u64; n];
                f(start, &mut v);
                v.iter().for_each(|x| out.extend_from_slice(&x.to_le_bytes()));
            }
        }
    }

    /// Calls `f(start, block)` for consecutive blocks of at most [`Produced::BLOCK`] elements.
    pub fn for_each_block(&self, mut f: impl FnMut(usize, &[f64])) {
        let mut buf = vec![0.0; Self::BLOCK.min(self.len)];
        let mut start = 0;
        while start < self.len {
            let k = Self::BLOCK.min(self.len - start);
            self.fill(start, &mut buf[..k]);
            f(start, &buf[..k]);
            start += k;
        }
    }

    /// All elements in one vector (u64 elements converted).
    pub fn to_vec(&self) -> Vec<f64> {
        let mut v = vec![0.0; self.len];
        if self.len > 0 {
            self.fill(0, &mut v);
        }
        v
    }

    /// All u64 elements in one vector; `None` for float64 elements.
    pub fn to_u64_vec(&self) -> Option<Vec<u64>> {
        let mut v = vec![0u64; self.len];
        (self.len == 0 || self.fill_u64(0, &mut v)).then_some(v)
    }

    fn bits_equal_slice(&self, other: &[f64]) -> bool {
        if other.len() != self.len || self.is_u64() {
            return false;
        }
        let mut same = true;
        self.for_each_block(|start, b| same &= b.iter().zip(&other[start..]).all(|(x, y)| x.to_bits() == y.to_bits()));
        same
    }

    fn equal_u64_slice(&self, other: &[u64]) -> bool {
        other.len() == self.len && self.to_u64_vec().is_some_and(|v| v == other)
    }
}

impl fmt::Debug for Produced {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "Produced({} f64)", self.len)
    }
}

impl PartialEq for Produced {
    fn eq(&self, other: &Self) -> bool {
        match (self.to_u64_vec(), other.to_u64_vec()) {
            (Some(a), Some(b)) => a == b,
            (None, None) => self.len == other.len && self.bits_equal_slice(&other.to_vec()),
            _ => false,
        }
    }
}

impl DataBuf {
    /// Number of elements.
    pub fn len(&self) -> usize {
        match self {
            DataBuf::F64(v) => v.len(),
            DataBuf::F32(v) => v.len(),
            DataBuf::I64(v) => v.len(),
            DataBuf::I32(v) => v.len(),
            DataBuf::U64(v) => v.len(),
            DataBuf::U32(v) => v.len(),
            DataBuf::U16(v) => v.len(),
            DataBuf::U8(v) => v.len(),
            DataBuf::Str(v) => v.len(),
            DataBuf::Produced(p) => p.len(),
        }
    }

    /// True when there are no elements.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Element type name as used in listings and in the h5py check (numpy spelling).
    pub fn type_name(&self) -> &'static str {
        match self {
            DataBuf::Produced(p) if p.is_u64() => "uint64",
            DataBuf::F64(_) | DataBuf::Produced(_) => "float64",
            DataBuf::F32(_) => "float32",
            DataBuf::I64(_) => "int64",
            DataBuf::I32(_) => "int32",
            DataBuf::U64(_) => "uint64",
            DataBuf::U32(_) => "uint32",
            DataBuf::U16(_) => "uint16",
            DataBuf::U8(_) => "uint8",
            DataBuf::Str(_) => "str",
        }
    }

    /// The elements as f64 (integers converted), or `None` for strings.
    pub fn to_f64(&self) -> Option<Vec<f64>> {
        Some(match self {
            DataBuf::F64(v) => v.clone(),
            DataBuf::F32(v) => v.iter().map(|&x| f64::from(x)).collect(),
            DataBuf::I64(v) => v.iter().map(|&x| x as f64).collect(),
            DataBuf::I32(v) => v.iter().map(|&x| f64::from(x)).collect(),
            DataBuf::U64(v) => v.iter().map(|&x| x as f64).collect(),
            DataBuf::U32(v) => v.iter().map(|&x| f64::from(x)).collect(),
            DataBuf::U16(v) => v.iter().map(|&x| f64::from(x)).collect(),
            DataBuf::U8(v) => v.iter().map(|&x| f64::from(x)).collect(),
            DataBuf::Str(_) => return None,
            DataBuf::Produced(p) => p.to_vec(),
        })
    }

    /// Same type, same length and the same bits in every element.
    pub fn bits_equal(&self, other: &DataBuf) -> bool {
        match (self, other) {
            (DataBuf::F64(a), DataBuf::F64(b)) => {
                a.len() == b.len() && a.iter().zip(b).all(|(x, y)| x.to_bits() == y.to_bits())
            }
            (DataBuf::F32(a), DataBuf::F32(b)) => {
                a.len() == b.len() && a.iter().zip(b).all(|(x, y)| x.to_bits() == y.to_bits())
            }
            (DataBuf::Produced(p), DataBuf::F64(v)) | (DataBuf::F64(v), DataBuf::Produced(p)) => p.bits_equal_slice(v),
            (DataBuf::Produced(p), DataBuf::U64(v)) | (DataBuf::U64(v), DataBuf::Produced(p)) => p.equal_u64_slice(v),
            (DataBuf::Produced(p), DataBuf::Produced(q)) => p.len() == q.len() && p.bits_equal_slice(&q.to_vec()),
            _ => self == other,
        }
    }
}

/// A problem in a result tree, with the object path where it was found.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{object}: {reason}")]
pub struct TreeError {
    /// Object path inside the file, e.g. `/depth_dose/dose`.
    pub object: String,
    /// What is wrong and how to fix it.
    pub reason: String,
}

/// One n-dimensional array with its units and attributes.
#[derive(Debug, Clone, PartialEq)]
pub struct Dataset {
    /// Name within its group.
    pub name: String,
    /// Extent of each dimension; `[]` is a scalar (one element).
    pub shape: Vec<usize>,
    /// Elements in row-major order; length = product of `shape`.
    pub data: DataBuf,
    /// Units of the values, e.g. `"Gy"`; `"1"` when dimensionless. Stored as attribute `units`.
    pub units: String,
    /// Further attributes (not `units`).
    pub attrs: Vec<(String, AttrValue)>,
}

impl Dataset {
    /// A dataset from its parts (checked when written, see [`ResultFile::validate`]).
    pub fn new(name: &str, shape: &[usize], data: DataBuf, units: &str) -> Self {
        Dataset {
            name: name.to_owned(),
            shape: shape.to_vec(),
            data,
            units: units.to_owned(),
            attrs: Vec::new(),
        }
    }

    /// A 1-D f64 dataset, shape `[values.len()]`.
    pub fn f64_1d(name: &str, values: Vec<f64>, units: &str) -> Self {
        let n = values.len();
        Self::new(name, &[n], DataBuf::F64(values), units)
    }

    /// An n-D f64 dataset.
    pub fn f64_nd(name: &str, shape: &[usize], values: Vec<f64>, units: &str) -> Self {
        Self::new(name, shape, DataBuf::F64(values), units)
    }

    /// A scalar string dataset (shape `[]`), e.g. for a long text.
    pub fn text(name: &str, text: &str) -> Self {
        Self::new(name, &[], DataBuf::Str(vec![text.to_owned()]), "1")
    }

    /// Add or replace an attribute; returns `self` for chaining.
    pub fn with_attr(mut self, name: &str, value: impl Into<AttrValue>) -> Self {
        set_attr(&mut self.attrs, name, value.into());
        self
    }

    /// The attribute `name`, if present.
    pub fn attr(&self, name: &str) -> Option<&AttrValue> {
        get_attr(&self.attrs, name)
    }

    /// Number of elements implied by the shape.
    pub fn element_count(&self) -> usize {
        self.shape.iter().product()
    }

    /// Same name, shape, units, attributes and bit-identical data.
    pub fn bits_equal(&self, other: &Dataset) -> bool {
        self.name == other.name
            && self.shape == other.shape
            && self.units == other.units
            && attrs_bits_equal(&self.attrs, &other.attrs)
            && self.data.bits_equal(&other.data)
    }
}

/// A named group of datasets, sub-groups and attributes.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Group {
    /// Name within its parent.
    pub name: String,
    /// Attributes, e.g. `kind`.
    pub attrs: Vec<(String, AttrValue)>,
    /// Datasets directly in this group.
    pub datasets: Vec<Dataset>,
    /// Sub-groups.
    pub groups: Vec<Group>,
}

impl Group {
    /// An empty group with no attributes.
    pub fn new(name: &str) -> Self {
        Group {
            name: name.to_owned(),
            ..Group::default()
        }
    }

    /// An empty group with its `kind` attribute set (see the module docs for the kinds).
    pub fn with_kind(name: &str, kind: &str) -> Self {
        let mut g = Group::new(name);
        g.set_attr("kind", kind);
        g
    }

    /// Add or replace an attribute.
    pub fn set_attr(&mut self, name: &str, value: impl Into<AttrValue>) {
        set_attr(&mut self.attrs, name, value.into());
    }

    /// The attribute `name`, if present.
    pub fn attr(&self, name: &str) -> Option<&AttrValue> {
        get_attr(&self.attrs, name)
    }

    /// The `kind` attribute, if present and a string.
    pub fn kind(&self) -> Option<&str> {
        self.attr("kind").and_then(AttrValue::as_str)
    }

    /// Append a dataset.
    pub fn add_dataset(&mut self, dataset: Dataset) {
        self.datasets.push(dataset);
    }

    /// Append a scored quantity and its 1σ absolute uncertainty: datasets `name` and
    /// `name_sigma` of the same `shape` and `units` (lengths are checked when written).
    pub fn add_with_sigma(
        &mut self,
        name: &str,
        shape: &[usize],
        values: Vec<f64>,
        sigma: Vec<f64>,
        units: &str,
    ) {
        self.add_dataset(Dataset::f64_nd(name, shape, values, units));
        self.add_dataset(Dataset::f64_nd(
            &format!("{name}{}", super::SIGMA_SUFFIX),
            shape,
            sigma,
            units,
        ));
    }

    /// Append a sub-group.
    pub fn add_group(&mut self, group: Group) {
        self.groups.push(group);
    }

    /// The dataset `name` directly in this group.
    pub fn dataset(&self, name: &str) -> Option<&Dataset> {
        self.datasets.iter().find(|d| d.name == name)
    }

    /// The sub-group `name` directly in this group.
    pub fn group(&self, name: &str) -> Option<&Group> {
        self.groups.iter().find(|g| g.name == name)
    }

    /// Attach bin edges to dimension `axis` of dataset `dataset`: adds (or reuses, when an
    /// identical one exists) the 1-D f64 dataset `edges_name` with `edges` in `units`, and sets
    /// the attribute `axis{axis}` = `edges_name` on the data dataset.
    ///
    /// Fails when the dataset is missing, `axis` is out of range, `edges.len()` is not the
    /// dimension's extent + 1, or a different dataset already has the name `edges_name`.
    pub fn attach_axis(
        &mut self,
        dataset: &str,
        axis: usize,
        edges_name: &str,
        edges: &[f64],
        units: &str,
    ) -> Result<(), TreeError> {
        let err = |reason: String| TreeError {
            object: format!("{}/{dataset}", self.name),
            reason,
        };
        let Some(ds) = self.dataset(dataset) else {
            return Err(err(
                "no such dataset in this group; add the dataset before its axes".into(),
            ));
        };
        let Some(&extent) = ds.shape.get(axis) else {
            return Err(err(format!(
                "axis {axis} out of range for shape {:?}",
                ds.shape
            )));
        };
        if edges.len() != extent + 1 {
            return Err(err(format!(
                "axis {axis} has {extent} bins, so it needs {} edges, got {}",
                extent + 1,
                edges.len()
            )));
        }
        match self.dataset(edges_name) {
            Some(existing) => {
                let same = existing.units == units
                    && existing.shape == [edges.len()]
                    && existing.data.bits_equal(&DataBuf::F64(edges.to_vec()));
                if !same {
                    return Err(err(format!(
                        "a different dataset named `{edges_name}` already exists in this group"
                    )));
                }
            }
            None => self.add_dataset(Dataset::f64_1d(edges_name, edges.to_vec(), units)),
        }
        let ds = self
            .datasets
            .iter_mut()
            .find(|d| d.name == dataset)
            .expect("checked above");
        set_attr(
            &mut ds.attrs,
            &format!("axis{axis}"),
            AttrValue::Str(edges_name.to_owned()),
        );
        Ok(())
    }

    /// The edges dataset named by attribute `axis{axis}` of `dataset`, if any.
    pub fn axis_of(&self, dataset: &Dataset, axis: usize) -> Option<&Dataset> {
        let name = dataset.attr(&format!("axis{axis}"))?.as_str()?;
        self.dataset(name)
    }

    /// Copy sorted by name at every level (attributes, datasets, groups).
    pub fn canonical(&self) -> Group {
        let mut g = self.clone();
        g.sort_recursive();
        g
    }

    fn sort_recursive(&mut self) {
        self.attrs.sort_by(|a, b| a.0.cmp(&b.0));
        self.datasets.sort_by(|a, b| a.name.cmp(&b.name));
        for d in &mut self.datasets {
            d.attrs.sort_by(|a, b| a.0.cmp(&b.0));
        }
        self.groups.sort_by(|a, b| a.name.cmp(&b.name));
        for g in &mut self.groups {
            g.sort_recursive();
        }
    }

    /// Same names, attributes, datasets (bit for bit) and sub-groups, in the same order.
    pub fn bits_equal(&self, other: &Group) -> bool {
        self.name == other.name
            && attrs_bits_equal(&self.attrs, &other.attrs)
            && self.datasets.len() == other.datasets.len()
            && self
                .datasets
                .iter()
                .zip(&other.datasets)
                .all(|(a, b)| a.bits_equal(b))
            && self.groups.len() == other.groups.len()
            && self
                .groups
                .iter()
                .zip(&other.groups)
                .all(|(a, b)| a.bits_equal(b))
    }
}

/// A whole result file: root attributes and top-level groups.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct ResultFile {
    /// Root attributes (see the module docs for the expected ones).
    pub attrs: Vec<(String, AttrValue)>,
    /// Top-level groups, one per scorer.
    pub groups: Vec<Group>,
}

impl ResultFile {
    /// An empty file.
    pub fn new() -> Self {
        ResultFile::default()
    }

    /// Add or replace a root attribute.
    pub fn set_attr(&mut self, name: &str, value: impl Into<AttrValue>) {
        set_attr(&mut self.attrs, name, value.into());
    }

    /// The root attribute `name`, if present.
    pub fn attr(&self, name: &str) -> Option<&AttrValue> {
        get_attr(&self.attrs, name)
    }

    /// Append a top-level group.
    pub fn add_group(&mut self, group: Group) {
        self.groups.push(group);
    }

    /// The group at `path` (`"a"` or `"a/b"`, a leading `/` allowed).
    pub fn group(&self, path: &str) -> Option<&Group> {
        let mut parts = path.trim_start_matches('/').split('/');
        let first = parts.next()?;
        let mut g = self.groups.iter().find(|g| g.name == first)?;
        for p in parts {
            g = g.group(p)?;
        }
        Some(g)
    }

    /// Copy sorted by name at every level, the order [`read`](super::read) returns.
    pub fn canonical(&self) -> ResultFile {
        let mut f = self.clone();
        f.attrs.sort_by(|a, b| a.0.cmp(&b.0));
        f.groups.sort_by(|a, b| a.name.cmp(&b.name));
        for g in &mut f.groups {
            g.sort_recursive();
        }
        f
    }

    /// Same attributes and groups, bit for bit, in the same order (apply [`canonical`](Self::canonical) first to ignore order).
    pub fn bits_equal(&self, other: &ResultFile) -> bool {
        attrs_bits_equal(&self.attrs, &other.attrs)
            && self.groups.len() == other.groups.len()
            && self
                .groups
                .iter()
                .zip(&other.groups)
                .all(|(a, b)| a.bits_equal(b))
    }

    /// Check every layout rule: names, uniqueness, shape against length, units present,
    /// no NUL in strings, axis attributes pointing at edges of the right length.
    pub fn validate(&self) -> Result<(), TreeError> {
        check_attrs("/", &self.attrs, false)?;
        check_children("", &self.groups, &[])
    }
}

fn set_attr(attrs: &mut Vec<(String, AttrValue)>, name: &str, value: AttrValue) {
    match attrs.iter_mut().find(|(n, _)| n == name) {
        Some(slot) => slot.1 = value,
        None => attrs.push((name.to_owned(), value)),
    }
}

fn get_attr<'a>(attrs: &'a [(String, AttrValue)], name: &str) -> Option<&'a AttrValue> {
    attrs.iter().find(|(n, _)| n == name).map(|(_, v)| v)
}

fn attrs_bits_equal(a: &[(String, AttrValue)], b: &[(String, AttrValue)]) -> bool {
    a.len() == b.len()
        && a.iter()
            .zip(b)
            .all(|(x, y)| x.0 == y.0 && x.1.bits_equal(&y.1))
}

fn check_name(object: &str, name: &str) -> Result<(), TreeError> {
    let bad = |reason: &str| {
        Err(TreeError {
            object: object.to_owned(),
            reason: reason.to_owned(),
        })
    };
    if name.is_empty() {
        return bad("empty name; give every group, dataset and attribute a name");
    }
    if name == "." || name.contains('/') {
        return bad("name must not be `.` or contain `/`; use nested groups for hierarchy");
    }
    if name.contains('\0') {
        return bad("name contains a NUL character");
    }
    Ok(())
}

fn check_attrs(
    object: &str,
    attrs: &[(String, AttrValue)],
    on_dataset: bool,
) -> Result<(), TreeError> {
    for (i, (name, value)) in attrs.iter().enumerate() {
        let at = format!("{object} attribute `{name}`");
        check_name(&at, name)?;
        if attrs[..i].iter().any(|(n, _)| n == name) {
            return Err(TreeError {
                object: at,
                reason: "attribute given twice".into(),
            });
        }
        if on_dataset && name == "units" {
            return Err(TreeError {
                object: at,
                reason: "`units` is reserved; set Dataset::units instead".into(),
            });
        }
        if let AttrValue::Str(s) = value {
            if s.contains('\0') {
                return Err(TreeError {
                    object: at,
                    reason: "string contains a NUL character".into(),
                });
            }
        }
    }
    Ok(())
}

fn check_children(parent: &str, groups: &[Group], datasets: &[Dataset]) -> Result<(), TreeError> {
    let mut names: Vec<&str> = Vec::with_capacity(groups.len() + datasets.len());
    for g in groups {
        let path = format!("{parent}/{}", g.name);
        check_name(&path, &g.name)?;
        if names.contains(&g.name.as_str()) {
            return Err(TreeError {
                object: path,
                reason: "name used twice in the same group".into(),
            });
        }
        names.push(&g.name);
    }
    for d in datasets {
        let path = format!("{parent}/{}", d.name);
        check_name(&path, &d.name)?;
        if names.contains(&d.name.as_str()) {
            return Err(TreeError {
                object: path,
                reason: "name used twice in the same group".into(),
            });
        }
        names.push(&d.name);
        check_dataset(&path, d, datasets)?;
    }
    for g in groups {
        let path = format!("{parent}/{}", g.name);
        check_attrs(&path, &g.attrs, false)?;
        check_children(&path, &g.groups, &g.datasets)?;
    }
    Ok(())
}

fn check_dataset(path: &str, d: &Dataset, siblings: &[Dataset]) -> Result<(), TreeError> {
    let bad = |reason: String| {
        Err(TreeError {
            object: path.to_owned(),
            reason,
        })
    };
    if d.units.is_empty() {
        return bad("units are empty; use \"1\" for a dimensionless quantity".into());
    }
    if d.units.contains('\0') {
        return bad("units contain a NUL character".into());
    }
    let n = d.element_count();
    if n != d.data.len() {
        return bad(format!(
            "shape {:?} holds {n} elements but the data has {}",
            d.shape,
            d.data.len()
        ));
    }
    if let DataBuf::Str(v) = &d.data {
        if v.iter().any(|s| s.contains('\0')) {
            return bad("a string element contains a NUL character".into());
        }
    }
    check_attrs(path, &d.attrs, true)?;
    for (name, value) in &d.attrs {
        let Some(axis) = name
            .strip_prefix("axis")
            .and_then(|s| s.parse::<usize>().ok())
        else {
            continue;
        };
        let Some(edges_name) = value.as_str() else {
            return bad(format!(
                "attribute `{name}` must be the name of an edges dataset"
            ));
        };
        let Some(&extent) = d.shape.get(axis) else {
            return bad(format!(
                "attribute `{name}` refers to a dimension the shape {:?} lacks",
                d.shape
            ));
        };
        let Some(edges) = siblings.iter().find(|s| s.name == edges_name) else {
            return bad(format!(
                "attribute `{name}` names `{edges_name}`, which is not in this group"
            ));
        };
        if edges.shape != [extent + 1] {
            return bad(format!(
                "axis {axis} has {extent} bins but edges `{edges_name}` have shape {:?}; expected [{}]",
                edges.shape,
                extent + 1
            ));
        }
    }
    Ok(())
}
