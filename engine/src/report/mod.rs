//! Human-readable summaries and PNG plots of result files.
//!
//! [`summarize`] turns a [`ResultFile`](crate::output::ResultFile) into a text report: the run's
//! root attributes, then each group with its `kind`, and for each dataset its shape, units, total,
//! peak (with position and, where axes are attached, the bin-centre coordinates) and, where an
//! `X_sigma` dataset sits beside `X`, the relative 1σ uncertainty. [`plot_all`] draws one PNG per plottable dataset
//! (one per group for spectra), chosen by the group's `kind` (see [`crate::output`] for the
//! layout conventions):
//!
//! | `kind`       | plot | file |
//! |--------------|------|------|
//! | `depth_dose` | line through bin centres with 1σ error bars | `<group>_<dataset>.png` |
//! | `spectrum`   | step histogram over the bin edges, one series per dataset | `<group>.png` |
//! | `image`      | heat map with colour scale, row 0 at the top | `<group>_<dataset>.png` |
//! | `dose_grid`  | central slice across axis 0, heat map with colour scale | `<group>_<dataset>.png` |
//!
//! `<group>` is the group's path with `/` replaced by `_`. Text is drawn with an embedded copy
//! of DejaVu Sans, so no system fonts or font configuration are needed.

mod plot;
mod summary;

pub use plot::{decode_png, plot_all, PlotOutcome};
pub use summary::{summarize, DatasetStats};

use std::path::PathBuf;

/// Error from drawing or writing plots.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    /// Writing a plot file failed (including refusal to overwrite an existing one).
    #[error(transparent)]
    Output(#[from] crate::output::OutputError),
    /// The plotting library failed to draw.
    #[error("{path}: cannot draw plot: {message}")]
    Draw {
        /// Plot file being drawn.
        path: PathBuf,
        /// Library message.
        message: String,
    },
    /// PNG encoding or decoding failed.
    #[error("{path}: PNG error: {message}")]
    Png {
        /// File concerned.
        path: PathBuf,
        /// Codec message.
        message: String,
    },
    /// The plot folder could not be created or read.
    #[error("{path}: {action}: {source}")]
    Io {
        /// Folder or file concerned.
        path: PathBuf,
        /// What was being done.
        action: &'static str,
        /// Underlying error.
        #[source]
        source: std::io::Error,
    },
}
