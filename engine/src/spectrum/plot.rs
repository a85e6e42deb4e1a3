//! PNG plot of a spectrum: photons per mm² per mAs per keV against energy, lines in their bins.

use std::path::{Path, PathBuf};

use plotters::prelude::*;

use super::Spectrum;

/// Font bytes embedded for plot text (DejaVu Sans subset, see `engine/assets/fonts`).
static FONT_TTF: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans-subset.ttf");
const FONT_FAMILY: &str = "sans-serif";

/// Error from drawing or writing a plot; names the file.
#[derive(Debug, thiserror::Error)]
pub enum PlotError {
    /// The destination exists and overwriting was not allowed.
    #[error("{0}: file already exists; refusing to overwrite it (choose another path, or pass --force to replace it)")]
    Exists(PathBuf),
    /// Drawing or writing failed.
    #[error("{path}: cannot draw the plot: {message}")]
    Draw {
        /// Destination.
        path: PathBuf,
        /// What failed.
        message: String,
    },
}

fn register_font() {
    static ONCE: std::sync::Once = std::sync::Once::new();
    ONCE.call_once(|| {
        let _ = plotters::style::register_font(FONT_FAMILY, FontStyle::Normal, FONT_TTF);
    });
}

/// Draws `spectrum` to the PNG file `path` (written to a temporary file, then renamed).
/// `title` goes above the plot.
pub fn write_png(spectrum: &Spectrum, title: &str, path: &Path, overwrite: bool) -> Result<(), PlotError> {
    if !overwrite && path.exists() {
        return Err(PlotError::Exists(path.to_owned()));
    }
    register_font();
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_owned(),
        _ => PathBuf::from("."),
    };
    let stem = path.file_name().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "plot".into());
    let tmp = dir.join(format!(".{stem}.{}.tmp.png", std::process::id()));
    let draw_err = |e: String| PlotError::Draw { path: path.to_owned(), message: e };
    let result = draw(spectrum, title, &tmp).map_err(draw_err);
    if let Err(e) = result {
        let _ = std::fs::remove_file(&tmp);
        return Err(e);
    }
    std::fs::rename(&tmp, path).map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        draw_err(e.to_string())
    })
}

fn draw(spectrum: &Spectrum, title: &str, file: &Path) -> Result<(), String> {
    let edges = &spectrum.bin_edges_kev;
    let binned = spectrum.binned_fluence_per_mm2_per_mas();
    let per_kev: Vec<f64> = binned.iter().zip(edges.windows(2)).map(|(f, w)| f / (w[1] - w[0])).collect();
    let y_max = per_kev.iter().cloned().fold(0.0_f64, f64::max).max(1e-300) * 1.08;
    let x_max = spectrum.kvp * 1.05;

    let root = BitMapBackend::new(file, (1000, 640)).into_drawing_area();
    root.fill(&WHITE).map_err(|e| e.to_string())?;
    let mut chart = ChartBuilder::on(&root)
        .caption(title, (FONT_FAMILY, 22))
        .margin(14)
        .x_label_area_size(48)
        .y_label_area_size(90)
        .build_cartesian_2d(0.0..x_max, 0.0..y_max)
        .map_err(|e| e.to_string())?;
    chart
        .configure_mesh()
        .x_desc("photon energy (keV)")
        .y_desc("photons / (mm² · mAs · keV)")
        .label_style((FONT_FAMILY, 15))
        .y_label_formatter(&|v| format!("{v:.2e}"))
        .draw()
        .map_err(|e| e.to_string())?;
    // Histogram outline.
    let mut pts = Vec::with_capacity(2 * per_kev.len() + 2);
    pts.push((edges[0], 0.0));
    for (i, v) in per_kev.iter().enumerate() {
        pts.push((edges[i], *v));
        pts.push((edges[i + 1], *v));
    }
    pts.push((*edges.last().unwrap_or(&0.0), 0.0));
    chart
        .draw_series(LineSeries::new(pts, BLUE.stroke_width(2)))
        .map_err(|e| e.to_string())?
        .label("spectrum (lines in their bins)")
        .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], BLUE.stroke_width(2)));
    let kvp = spectrum.kvp;
    chart
        .draw_series(LineSeries::new(vec![(kvp, 0.0), (kvp, y_max)], RED.mix(0.7).stroke_width(1)))
        .map_err(|e| e.to_string())?
        .label(format!("Duane–Hunt limit {kvp} keV"))
        .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], RED.mix(0.7)));
    chart
        .configure_series_labels()
        .label_font((FONT_FAMILY, 15))
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK)
        .position(SeriesLabelPosition::UpperRight)
        .draw()
        .map_err(|e| e.to_string())?;
    root.present().map_err(|e| e.to_string())?;
    Ok(())
}
