//! Result files: an in-memory result tree and its HDF5 writer and reader.
//!
//! Everything a run produces is first assembled as a [`ResultFile`] (root attributes and a tree
//! of [`Group`]s holding [`Dataset`]s), then written in one go with [`write_atomic`]: the file
//! is serialised to a temporary file in the destination folder, flushed to disk and renamed over
//! the destination, so a reader never sees a half-written result and a failed write leaves the
//! previous file untouched. [`read`] loads a file back into the same tree, value for value and
//! bit for bit, for `dosemill report` and for merging or resuming runs.
//!
//! The HDF5 encoding is done by the pure-Rust crate `hdf5-pure`; no other module touches it.
//!
//! # Layout conventions
//!
//! Scorers and tools that read result files rely on these conventions; `engine/src/output/LAYOUT.md`
//! holds the same text for the README.
//!
//! ## Root attributes
//!
//! | attribute            | type | meaning |
//! |----------------------|------|---------|
//! | `dosemill_version`   | str  | version of the program that wrote the file |
//! | `git_commit`         | str  | source revision of that program (`"unknown"` outside a checkout) |
//! | `data_source`        | str  | name and version of the interaction data tables used |
//! | `data_tables_sha256` | str  | SHA-256 of those tables, hex |
//! | `seed`               | u64  | master random seed |
//! | `histories`          | u64  | number of histories completed and contained in the scores |
//! | `threads`            | u64  | worker threads used |
//! | `wall_time_s`        | f64  | wall-clock time of the run, seconds |
//! | `start_time`         | str  | start of the run, UTC, RFC 3339 (`2026-01-31T12:00:00Z`) |
//! | `completion`         | str  | `"complete"`, or `"partial"` when the run stopped early |
//! | `deck_text`          | str  | the input deck exactly as read (may be tens of kB) |
//! | `resolved_deck`      | str  | the deck with every default filled in, as the run used it |
//!
//! ## Groups
//!
//! Each scorer writes one top-level group named after the scorer's name in the deck (datasets
//! never sit directly under the root). Groups may nest. Every group that holds results has a string attribute `kind` that says how to read and
//! plot it:
//!
//! | `kind`       | primary datasets | axes |
//! |--------------|------------------|------|
//! | `depth_dose` | 1-D, one value per depth bin (e.g. `dose` in Gy per history) | `axis0` → depth bin edges, cm |
//! | `spectrum`   | 1-D series sharing one set of energy bin edges (e.g. `uncollided`, `scattered`, `total`) | `axis0` → energy bin edges, keV |
//! | `image`      | 2-D `[row, column]`, row 0 at the top of the image | `axis0` → row (y) edges, `axis1` → column (x) edges, cm |
//! | `dose_grid`  | 3-D `[i, j, k]` voxel values, row-major (k fastest) | `axis0`, `axis1`, `axis2` → voxel edges along each index, cm |
//!
//! ## Datasets
//!
//! * Every dataset has a string attribute `units` (`"1"` for a dimensionless quantity), e.g.
//!   `"Gy"`, `"keV"`, `"cm"`, `"1/cm2"`. Values are per source history unless the dataset's
//!   units or a `normalisation` attribute say otherwise.
//! * Storage is row-major (C order), as HDF5 itself uses.
//! * **Uncertainty**: a dataset `X_sigma` beside `X` (same group, same shape, same units) holds
//!   the 1σ absolute statistical uncertainty of `X`.
//! * **Axis coordinates** are ordinary 1-D f64 datasets of bin edges (length `n + 1` for an axis
//!   of `n` bins) in the same group. A data dataset names them with string attributes `axis0`,
//!   `axis1`, … (the name of the edges dataset for that dimension); [`Group::attach_axis`] does
//!   both. An edges dataset may carry a `label` attribute (e.g. `"depth"`) used on plot axes.
//! * Dataset, group and attribute names: non-empty, no `/`, not `.`; `units` is reserved on
//!   datasets (it is the [`Dataset::units`] field).
//!
//! [`RUN_ATTRIBUTES`], [`kind`] and [`SIGMA_SUFFIX`] spell these names for code.
//!
//! ## Encoding
//!
//! * Numbers are little-endian IEEE/two's-complement of the width in [`DataBuf`].
//! * Strings (attributes and string datasets) are variable-length UTF-8 HDF5 strings, stored in
//!   the global heap, so whole deck texts fit; h5py reads them back as `str` (attributes) or via
//!   `dataset.asstr()[()]` (datasets). A string dataset of shape `[]` is a scalar.
//! * [`AttrValue::Bool`] is stored as an unsigned 8-bit integer 0 or 1 (the HDF5 crate has no
//!   boolean attribute type); h5py reads it as `numpy.uint8`. Reading maps a u8 attribute of 0
//!   or 1 back to `Bool`.
//! * The same tree always gives the same bytes (no timestamps in the file), so two runs with
//!   the same deck and seed can be compared with `cmp` as well as dataset by dataset.
//! * [`read`] returns attributes, groups and datasets sorted by name (HDF5 keeps no order that
//!   survives every writer); compare trees with [`ResultFile::canonical`] applied to both.
//!
//! # Testing failures
//!
//! Setting the environment variable [`FAULT_ENV_VAR`] to a byte count makes every write through
//! this module fail like a full disk after that many bytes, so tests of the binary can prove that
//! earlier files stay intact.

mod h5;
mod model;

pub use h5::{
    read, write_atomic, write_atomic_with, write_bytes_atomic, write_stream_atomic, WriteOptions,
    FAULT_ENV_VAR,
};
pub use model::{AttrValue, DataBuf, Dataset, Group, Produced, ResultFile, TreeError};

use std::path::PathBuf;

/// Root attributes every run writes (see the table above), in the order reports list them.
pub const RUN_ATTRIBUTES: [&str; 12] = [
    "dosemill_version",
    "git_commit",
    "data_source",
    "data_tables_sha256",
    "seed",
    "histories",
    "threads",
    "wall_time_s",
    "start_time",
    "completion",
    "deck_text",
    "resolved_deck",
];

/// Values of the group attribute `kind` that reports know how to plot.
pub mod kind {
    /// 1-D values per depth bin, `axis0` = depth edges (cm).
    pub const DEPTH_DOSE: &str = "depth_dose";
    /// 1-D series over shared energy bin edges, `axis0` = energy edges (keV).
    pub const SPECTRUM: &str = "spectrum";
    /// 2-D `[row, column]` detector image, `axis0`/`axis1` = row/column edges (cm).
    pub const IMAGE: &str = "image";
    /// 3-D voxel values, `axis0..2` = voxel edges (cm).
    pub const DOSE_GRID: &str = "dose_grid";
}

/// Suffix of the dataset holding the 1σ absolute uncertainty of the dataset it is appended to.
pub const SIGMA_SUFFIX: &str = "_sigma";

/// Error from writing or reading a result file; every variant names the file.
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    /// The destination exists and overwriting was not allowed.
    #[error("{path}: file already exists; refusing to overwrite it (choose another output path, or pass --force to replace it)")]
    Exists {
        /// Destination file.
        path: PathBuf,
    },
    /// An operating-system error while writing, syncing, renaming or reading.
    #[error("{path}: {action}: {source}")]
    Io {
        /// File concerned (the destination, or the temporary file beside it).
        path: PathBuf,
        /// What was being done, e.g. "cannot create temporary file".
        action: &'static str,
        /// Underlying error.
        #[source]
        source: std::io::Error,
    },
    /// The result tree breaks a layout rule (bad name, shape/length mismatch, …).
    #[error("{path}: invalid result tree: {source}")]
    Invalid {
        /// Destination file.
        path: PathBuf,
        /// What is wrong, and where in the tree.
        #[source]
        source: TreeError,
    },
    /// The HDF5 library refused to encode or decode the file.
    #[error("{path}: HDF5 error at {object}: {message}")]
    Hdf5 {
        /// File concerned.
        path: PathBuf,
        /// Object path inside the file (`/` for the file itself).
        object: String,
        /// Library message.
        message: String,
    },
    /// The file holds something this layout cannot represent.
    #[error("{path}: {object}: {what} (is this a dosemill result file?)")]
    Unsupported {
        /// File concerned.
        path: PathBuf,
        /// Object path inside the file.
        object: String,
        /// What is unsupported.
        what: String,
    },
}
