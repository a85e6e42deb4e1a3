//! PNG plots of result groups, chosen by their `kind` attribute.

use std::path::{Path, PathBuf};
use std::sync::Once;

use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::FontStyle;

use super::summary::{axis_label, is_axis_attr, sigma_base, sigma_of};
use super::ReportError;
use crate::output::{self, kind, DataBuf, Dataset, Group, ResultFile};

/// Family name the embedded font is registered under.
const FONT: &str = "sans-serif";
/// DejaVu Sans, character subset (see `engine/assets/fonts/`).
static FONT_BYTES: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans-subset.ttf");

const LINE_SIZE: (u32, u32) = (900, 600);
const MAP_SIZE: (u32, u32) = (900, 700);

fn register_font() {
    static ONCE: Once = Once::new();
    ONCE.call_once(|| {
        plotters::style::register_font(FONT, FontStyle::Normal, FONT_BYTES).unwrap_or_else(|_| {
            panic!("embedded font assets/fonts/DejaVuSans-subset.ttf is not a valid TrueType font")
        });
    });
}

/// What [`plot_all`] did.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct PlotOutcome {
    /// PNG files written.
    pub written: Vec<PathBuf>,
    /// Datasets or groups not plotted, with the reason (layout not as the kind expects).
    pub skipped: Vec<String>,
}

/// Draw every plottable group of `file` into `dir` (created if missing). An existing PNG is
/// refused unless `overwrite`. Groups without a known `kind` are passed over silently.
pub fn plot_all(
    file: &ResultFile,
    dir: &Path,
    overwrite: bool,
) -> Result<PlotOutcome, ReportError> {
    register_font();
    std::fs::create_dir_all(dir).map_err(|source| ReportError::Io {
        path: dir.to_owned(),
        action: "cannot create plot folder",
        source,
    })?;
    let mut outcome = PlotOutcome::default();
    for g in &file.groups {
        plot_group(g, "", dir, overwrite, &mut outcome)?;
    }
    Ok(outcome)
}

/// Decode a PNG into (width, height, RGB8 pixels), for checks and tools.
pub fn decode_png(path: &Path) -> Result<(u32, u32, Vec<u8>), ReportError> {
    let img = image::open(path).map_err(|e| ReportError::Png {
        path: path.to_owned(),
        message: e.to_string(),
    })?;
    let rgb = img.to_rgb8();
    Ok((rgb.width(), rgb.height(), rgb.into_raw()))
}

/// A dataset to plot: numeric, not an `X_sigma` beside `X`, not an axis of another dataset.
fn primaries(g: &Group) -> Vec<&Dataset> {
    let axis_names: Vec<&str> = g
        .datasets
        .iter()
        .flat_map(|d| d.attrs.iter())
        .filter(|(k, _)| is_axis_attr(k))
        .filter_map(|(_, v)| v.as_str())
        .collect();
    g.datasets
        .iter()
        .filter(|d| !matches!(d.data, DataBuf::Str(_)))
        .filter(|d| sigma_base(g, d).is_none())
        .filter(|d| !axis_names.contains(&d.name.as_str()))
        .collect()
}

/// The edges of dimension `axis` of `d`, checked against its extent.
fn edges_of<'a>(g: &'a Group, d: &Dataset, axis: usize) -> Result<(&'a Dataset, Vec<f64>), String> {
    let edges = g
        .axis_of(d, axis)
        .ok_or_else(|| format!("no `axis{axis}` attribute naming its bin edges"))?;
    let e = edges
        .data
        .to_f64()
        .ok_or_else(|| format!("edges `{}` are not numeric", edges.name))?;
    if e.len() != d.shape[axis] + 1 {
        return Err(format!(
            "edges `{}` have {} values for {} bins",
            edges.name,
            e.len(),
            d.shape[axis]
        ));
    }
    if e.iter().any(|x| !x.is_finite()) {
        return Err(format!("edges `{}` are not all finite", edges.name));
    }
    Ok((edges, e))
}

fn plot_group(
    g: &Group,
    parent: &str,
    dir: &Path,
    overwrite: bool,
    out: &mut PlotOutcome,
) -> Result<(), ReportError> {
    let gpath = format!("{parent}/{}", g.name);
    let stem = gpath.trim_start_matches('/').replace('/', "_");
    match g.kind() {
        Some(kind::DEPTH_DOSE) => {
            for d in primaries(g).into_iter().filter(|d| d.shape.len() == 1) {
                match edges_of(g, d, 0) {
                    Ok((edges, e)) => {
                        let path = dir.join(format!("{stem}_{}.png", d.name));
                        let png = draw_depth_dose(
                            &path,
                            &format!("{gpath}/{}", d.name),
                            g,
                            d,
                            edges,
                            &e,
                        )?;
                        save(&path, &png, overwrite, out)?;
                    }
                    Err(why) => out.skipped.push(format!("{gpath}/{}: {why}", d.name)),
                }
            }
        }
        Some(kind::SPECTRUM) => {
            let mut series = Vec::new();
            let mut common: Option<(&Dataset, Vec<f64>)> = None;
            for d in primaries(g).into_iter().filter(|d| d.shape.len() == 1) {
                match edges_of(g, d, 0) {
                    Ok((edges, e)) => match &common {
                        None => {
                            common = Some((edges, e));
                            series.push(d);
                        }
                        Some((c, _)) if c.name == edges.name => series.push(d),
                        Some((c, _)) => out.skipped.push(format!(
                            "{gpath}/{}: uses edges `{}`, the group's first series uses `{}`",
                            d.name, edges.name, c.name
                        )),
                    },
                    Err(why) => out.skipped.push(format!("{gpath}/{}: {why}", d.name)),
                }
            }
            match common {
                Some((edges, e)) => {
                    let path = dir.join(format!("{stem}.png"));
                    let png = draw_spectrum(&path, &gpath, &series, edges, &e)?;
                    save(&path, &png, overwrite, out)?;
                }
                None => out.skipped.push(format!(
                    "{gpath}: spectrum group has no 1-D series with bin edges"
                )),
            }
        }
        Some(kind::IMAGE) => {
            for d in primaries(g).into_iter().filter(|d| d.shape.len() == 2) {
                let axes = edges_of(g, d, 0).and_then(|y| edges_of(g, d, 1).map(|x| (y, x)));
                match axes {
                    Ok(((ye, y), (xe, x))) => {
                        let values = d.data.to_f64().unwrap_or_default();
                        let path = dir.join(format!("{stem}_{}.png", d.name));
                        let map = HeatMap {
                            title: format!("{gpath}/{}", d.name),
                            rows: d.shape[0],
                            cols: d.shape[1],
                            values: &values,
                            row_edges: &y,
                            col_edges: &x,
                            row_label: axis_label(ye),
                            col_label: axis_label(xe),
                            units: &d.units,
                            rows_top_down: true,
                        };
                        let png = draw_heat_map(&path, &map)?;
                        save(&path, &png, overwrite, out)?;
                    }
                    Err(why) => out.skipped.push(format!("{gpath}/{}: {why}", d.name)),
                }
            }
        }
        Some(kind::DOSE_GRID) => {
            for d in primaries(g).into_iter().filter(|d| d.shape.len() == 3) {
                let axes = edges_of(g, d, 0)
                    .and_then(|a| edges_of(g, d, 1).map(|b| (a, b)))
                    .and_then(|(a, b)| edges_of(g, d, 2).map(|c| (a, b, c)));
                match axes {
                    Ok(((e0, z), (e1, r), (e2, c))) => {
                        let (n0, n1, n2) = (d.shape[0], d.shape[1], d.shape[2]);
                        if n0 == 0 || n1 == 0 || n2 == 0 || d.data.len() != n0 * n1 * n2 {
                            out.skipped.push(format!("{gpath}/{}: empty grid", d.name));
                            continue;
                        }
                        let k = n0 / 2;
                        // Only the slice is read (a lazily read grid stays on disk).
                        let slice_values: Vec<f64> = match &d.data {
                            crate::output::DataBuf::Produced(p) => {
                                let mut v = vec![0.0; n1 * n2];
                                p.fill(k * n1 * n2, &mut v);
                                v
                            }
                            other => other.to_f64().map(|v| v[k * n1 * n2..(k + 1) * n1 * n2].to_vec()).unwrap_or_default(),
                        };
                        let slice = &slice_values[..];
                        let centre = 0.5 * (z[k] + z[k + 1]);
                        let zlabel = e0
                            .attr("label")
                            .and_then(|v| v.as_str())
                            .unwrap_or(&e0.name);
                        let path = dir.join(format!("{stem}_{}.png", d.name));
                        let map = HeatMap {
                            title: format!(
                                "{gpath}/{}: slice {k} of {n0}, {zlabel} = {} {}",
                                d.name,
                                fmt_tick(centre),
                                e0.units
                            ),
                            rows: n1,
                            cols: n2,
                            values: slice,
                            row_edges: &r,
                            col_edges: &c,
                            row_label: axis_label(e1),
                            col_label: axis_label(e2),
                            units: &d.units,
                            rows_top_down: false,
                        };
                        let png = draw_heat_map(&path, &map)?;
                        save(&path, &png, overwrite, out)?;
                    }
                    Err(why) => out.skipped.push(format!("{gpath}/{}: {why}", d.name)),
                }
            }
        }
        _ => {}
    }
    for sub in &g.groups {
        plot_group(sub, &gpath, dir, overwrite, out)?;
    }
    Ok(())
}

/// Encode the RGB buffer as PNG and write it atomically.
fn save(path: &Path, png: &Rgb, overwrite: bool, out: &mut PlotOutcome) -> Result<(), ReportError> {
    use image::ImageEncoder;
    let mut bytes = Vec::new();
    image::codecs::png::PngEncoder::new(&mut bytes)
        .write_image(&png.pixels, png.width, png.height, image::ColorType::Rgb8)
        .map_err(|e| ReportError::Png {
            path: path.to_owned(),
            message: e.to_string(),
        })?;
    output::write_bytes_atomic(path, &bytes, overwrite)?;
    out.written.push(path.to_owned());
    Ok(())
}

/// A rendered RGB8 picture.
struct Rgb {
    width: u32,
    height: u32,
    pixels: Vec<u8>,
}

fn draw_err<E: std::fmt::Display>(path: &Path) -> impl Fn(E) -> ReportError + '_ {
    move |e| ReportError::Draw {
        path: path.to_owned(),
        message: e.to_string(),
    }
}

/// Tick label: plain for moderate magnitudes, scientific otherwise.
fn fmt_tick(v: f64) -> String {
    let a = v.abs();
    if a == 0.0 {
        "0".into()
    } else if (1e-2..1e4).contains(&a) {
        let s = format!("{v:.3}");
        let s = s.trim_end_matches('0').trim_end_matches('.');
        s.to_string()
    } else {
        format!("{v:.2e}")
    }
}

/// A y range covering `lo..hi` with a margin, never empty.
fn padded(lo: f64, hi: f64) -> (f64, f64) {
    if !(lo.is_finite() && hi.is_finite()) {
        return (0.0, 1.0);
    }
    if hi > lo {
        let m = 0.05 * (hi - lo);
        (if lo >= 0.0 { (lo - m).max(0.0) } else { lo - m }, hi + m)
    } else if lo == 0.0 {
        (0.0, 1.0)
    } else {
        let m = 0.1 * lo.abs();
        (lo - m, hi + m)
    }
}

fn draw_depth_dose(
    path: &Path,
    title: &str,
    g: &Group,
    d: &Dataset,
    edges: &Dataset,
    e: &[f64],
) -> Result<Rgb, ReportError> {
    let (w, h) = LINE_SIZE;
    let mut pixels = vec![255u8; (w * h * 3) as usize];
    let values = d.data.to_f64().unwrap_or_default();
    let sigma = sigma_of(g, d);
    let centres: Vec<f64> = e.windows(2).map(|p| 0.5 * (p[0] + p[1])).collect();
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for (i, &v) in values.iter().enumerate() {
        let s = sigma.as_ref().map_or(0.0, |s| s[i]);
        if v.is_finite() {
            lo = lo.min(v - s);
            hi = hi.max(v + s);
        }
    }
    let (y0, y1) = padded(lo, hi);
    let (x0, x1) = (e[0].min(e[e.len() - 1]), e[0].max(e[e.len() - 1]));
    {
        let err = draw_err(path);
        let root = BitMapBackend::with_buffer(&mut pixels, (w, h)).into_drawing_area();
        let mut chart = ChartBuilder::on(&root)
            .caption(title, (FONT, 24))
            .margin(20)
            .x_label_area_size(50)
            .y_label_area_size(90)
            .build_cartesian_2d(x0..x1, y0..y1)
            .map_err(&err)?;
        chart
            .configure_mesh()
            .x_desc(axis_label(edges))
            .y_desc(format!("{} ({})", d.name, d.units))
            .label_style((FONT, 16))
            .axis_desc_style((FONT, 18))
            .x_label_formatter(&|v| fmt_tick(*v))
            .y_label_formatter(&|v| fmt_tick(*v))
            .draw()
            .map_err(&err)?;
        let colour = BLUE;
        let pts: Vec<(f64, f64)> = centres
            .iter()
            .zip(&values)
            .filter(|(_, v)| v.is_finite())
            .map(|(&x, &y)| (x, y))
            .collect();
        chart
            .draw_series(LineSeries::new(pts.iter().copied(), colour.stroke_width(2)))
            .map_err(&err)?
            .label(if sigma.is_some() {
                format!("{} ± 1σ", d.name)
            } else {
                d.name.clone()
            })
            .legend(move |(x, y)| {
                PathElement::new(vec![(x, y), (x + 20, y)], colour.stroke_width(2))
            });
        chart
            .draw_series(
                pts.iter()
                    .map(|&(x, y)| Circle::new((x, y), 3, colour.filled())),
            )
            .map_err(&err)?;
        if let Some(s) = &sigma {
            // Error bars: a vertical stroke from v − σ to v + σ with caps a fifth of a bin wide.
            for (i, ((&x, &v), &s)) in centres.iter().zip(&values).zip(s).enumerate() {
                if !(v.is_finite() && s.is_finite()) {
                    continue;
                }
                let cap = 0.1 * (e[i + 1] - e[i]).abs();
                let style = colour.stroke_width(1);
                let bar = [
                    PathElement::new(vec![(x, v - s), (x, v + s)], style),
                    PathElement::new(vec![(x - cap, v - s), (x + cap, v - s)], style),
                    PathElement::new(vec![(x - cap, v + s), (x + cap, v + s)], style),
                ];
                chart.draw_series(bar).map_err(&err)?;
            }
        }
        chart
            .configure_series_labels()
            .label_font((FONT, 16))
            .background_style(WHITE.mix(0.85))
            .border_style(BLACK)
            .position(SeriesLabelPosition::UpperRight)
            .draw()
            .map_err(&err)?;
        root.present().map_err(&err)?;
    }
    Ok(Rgb {
        width: w,
        height: h,
        pixels,
    })
}

fn draw_spectrum(
    path: &Path,
    title: &str,
    series: &[&Dataset],
    edges: &Dataset,
    e: &[f64],
) -> Result<Rgb, ReportError> {
    let (w, h) = LINE_SIZE;
    let mut pixels = vec![255u8; (w * h * 3) as usize];
    let data: Vec<Vec<f64>> = series
        .iter()
        .map(|d| d.data.to_f64().unwrap_or_default())
        .collect();
    let (mut lo, mut hi) = (0.0f64, f64::NEG_INFINITY);
    for v in data.iter().flatten().filter(|v| v.is_finite()) {
        lo = lo.min(*v);
        hi = hi.max(*v);
    }
    let (y0, y1) = padded(lo, hi);
    let (x0, x1) = (e[0].min(e[e.len() - 1]), e[0].max(e[e.len() - 1]));
    let mut units: Vec<&str> = series.iter().map(|d| d.units.as_str()).collect();
    units.dedup();
    {
        let err = draw_err(path);
        let root = BitMapBackend::with_buffer(&mut pixels, (w, h)).into_drawing_area();
        let mut chart = ChartBuilder::on(&root)
            .caption(title, (FONT, 24))
            .margin(20)
            .x_label_area_size(50)
            .y_label_area_size(90)
            .build_cartesian_2d(x0..x1, y0..y1)
            .map_err(&err)?;
        chart
            .configure_mesh()
            .x_desc(axis_label(edges))
            .y_desc(format!("value ({})", units.join(", ")))
            .label_style((FONT, 16))
            .axis_desc_style((FONT, 18))
            .x_label_formatter(&|v| fmt_tick(*v))
            .y_label_formatter(&|v| fmt_tick(*v))
            .draw()
            .map_err(&err)?;
        for (i, (d, v)) in series.iter().zip(&data).enumerate() {
            let colour = Palette99::pick(i).to_rgba();
            // Step outline: flat across each bin, vertical at every edge.
            let mut pts = Vec::with_capacity(2 * v.len());
            for (b, &y) in v.iter().enumerate() {
                let y = if y.is_finite() { y } else { 0.0 };
                pts.push((e[b], y));
                pts.push((e[b + 1], y));
            }
            chart
                .draw_series(LineSeries::new(pts, colour.stroke_width(2)))
                .map_err(&err)?
                .label(d.name.clone())
                .legend(move |(x, y)| {
                    PathElement::new(vec![(x, y), (x + 20, y)], colour.stroke_width(2))
                });
        }
        chart
            .configure_series_labels()
            .label_font((FONT, 16))
            .background_style(WHITE.mix(0.85))
            .border_style(BLACK)
            .position(SeriesLabelPosition::UpperRight)
            .draw()
            .map_err(&err)?;
        root.present().map_err(&err)?;
    }
    Ok(Rgb {
        width: w,
        height: h,
        pixels,
    })
}

/// A 2-D map to draw: `values[row * cols + col]`.
struct HeatMap<'a> {
    title: String,
    rows: usize,
    cols: usize,
    values: &'a [f64],
    row_edges: &'a [f64],
    col_edges: &'a [f64],
    row_label: String,
    col_label: String,
    units: &'a str,
    /// Row 0 at the top (images) rather than at the bottom (slices in patient coordinates).
    rows_top_down: bool,
}

/// Colour of `t` in [0, 1]: linear interpolation between anchor colours of the viridis map
/// (matplotlib's perceptually uniform map, CC0; anchor values from memory).
fn colour_map(t: f64) -> RGBColor {
    const STOPS: [(u8, u8, u8); 5] = [
        (0x44, 0x01, 0x54),
        (0x3b, 0x52, 0x8b),
        (0x21, 0x91, 0x8c),
        (0x5e, 0xc9, 0x62),
        (0xfd, 0xe7, 0x25),
    ];
    let t = if t.is_finite() {
        t.clamp(0.0, 1.0)
    } else {
        0.0
    };
    let x = t * (STOPS.len() - 1) as f64;
    let i = (x.floor() as usize).min(STOPS.len() - 2);
    let f = x - i as f64;
    let mix = |a: u8, b: u8| (f64::from(a) + f * (f64::from(b) - f64::from(a))).round() as u8;
    let (a, b) = (STOPS[i], STOPS[i + 1]);
    RGBColor(mix(a.0, b.0), mix(a.1, b.1), mix(a.2, b.2))
}

fn draw_heat_map(path: &Path, m: &HeatMap<'_>) -> Result<Rgb, ReportError> {
    let (w, h) = MAP_SIZE;
    let mut pixels = vec![255u8; (w * h * 3) as usize];
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for &v in m.values.iter().filter(|v| v.is_finite()) {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if !lo.is_finite() {
        (lo, hi) = (0.0, 1.0);
    }
    if hi <= lo {
        hi = lo + if lo == 0.0 { 1.0 } else { lo.abs() * 1e-6 };
    }
    let span = |e: &[f64]| (e[0].min(e[e.len() - 1]), e[0].max(e[e.len() - 1]));
    let (x0, x1) = span(m.col_edges);
    let (r0, r1) = span(m.row_edges);
    {
        let err = draw_err(path);
        let root = BitMapBackend::with_buffer(&mut pixels, (w, h)).into_drawing_area();
        let (main, bar) = root.split_horizontally(w - 150);
        draw_map_panel(&main, m, (x0, x1), (r0, r1), (lo, hi)).map_err(&err)?;
        draw_colour_bar(&bar, m.units, (lo, hi)).map_err(&err)?;
        root.present().map_err(&err)?;
    }
    Ok(Rgb {
        width: w,
        height: h,
        pixels,
    })
}

type DrawResult<T> =
    Result<T, DrawingAreaErrorKind<<BitMapBackend<'static> as DrawingBackend>::ErrorType>>;

fn draw_map_panel(
    area: &DrawingArea<BitMapBackend<'_>, Shift>,
    m: &HeatMap<'_>,
    (x0, x1): (f64, f64),
    (r0, r1): (f64, f64),
    (lo, hi): (f64, f64),
) -> DrawResult<()> {
    // Square pixels: shrink the panel along one direction so that 1 cm is the same length on
    // both axes (the plot region is estimated from the caption, margins and label areas). A
    // very elongated map keeps at least a quarter of the room, to stay legible.
    let (pw, ph) = area.dim_in_pixel();
    let avail_w = f64::from(pw) - 80.0 - 30.0;
    let avail_h = f64::from(ph) - 50.0 - 30.0 - 35.0;
    let want = (x1 - x0) / (r1 - r0);
    let (mut pad_x, mut pad_y) = (0i32, 0i32);
    if want.is_finite() && want > 0.0 && avail_w > 0.0 && avail_h > 0.0 {
        if want > avail_w / avail_h {
            let new_h = (avail_w / want).max(0.25 * avail_h);
            pad_y = ((avail_h - new_h) / 2.0) as i32;
        } else {
            let new_w = (avail_h * want).max(0.25 * avail_w);
            pad_x = ((avail_w - new_w) / 2.0) as i32;
        }
    }
    let area = area.margin(pad_y, pad_y, pad_x, pad_x);
    let builder = |area| {
        let mut b = ChartBuilder::on(area);
        b.caption(&m.title, (FONT, 22))
            .margin(15)
            .x_label_area_size(50)
            .y_label_area_size(80);
        b
    };
    let cells = (0..m.rows)
        .flat_map(|r| (0..m.cols).map(move |c| (r, c)))
        .map(|(r, c)| {
            let v = m.values[r * m.cols + c];
            let colour = if v.is_finite() {
                colour_map((v - lo) / (hi - lo))
            } else {
                RGBColor(255, 255, 255)
            };
            Rectangle::new(
                [
                    (m.col_edges[c], m.row_edges[r]),
                    (m.col_edges[c + 1], m.row_edges[r + 1]),
                ],
                colour.filled(),
            )
        });
    // Rows top-down: the row axis runs downwards, so row 0 is drawn at the top.
    let y_range = if m.rows_top_down { r1..r0 } else { r0..r1 };
    let mut chart = builder(&area).build_cartesian_2d(x0..x1, y_range)?;
    chart
        .configure_mesh()
        .disable_mesh()
        .x_desc(&m.col_label)
        .y_desc(&m.row_label)
        .label_style((FONT, 16))
        .axis_desc_style((FONT, 18))
        .x_label_formatter(&|v| fmt_tick(*v))
        .y_label_formatter(&|v| fmt_tick(*v))
        .draw()?;
    chart.draw_series(cells)?;
    Ok(())
}

fn draw_colour_bar(
    area: &DrawingArea<BitMapBackend<'_>, Shift>,
    units: &str,
    (lo, hi): (f64, f64),
) -> DrawResult<()> {
    let mut chart = ChartBuilder::on(area)
        .margin_top(60)
        .margin_bottom(65)
        .margin_right(10)
        .y_label_area_size(85)
        .build_cartesian_2d(0.0..1.0, lo..hi)?;
    chart
        .configure_mesh()
        .disable_mesh()
        .disable_x_axis()
        .y_desc(units)
        .label_style((FONT, 15))
        .axis_desc_style((FONT, 17))
        .y_label_formatter(&|v| fmt_tick(*v))
        .draw()?;
    const STEPS: usize = 200;
    chart.draw_series((0..STEPS).map(|i| {
        let a = lo + (hi - lo) * i as f64 / STEPS as f64;
        let b = lo + (hi - lo) * (i + 1) as f64 / STEPS as f64;
        Rectangle::new(
            [(0.0, a), (1.0, b)],
            colour_map((i as f64 + 0.5) / STEPS as f64).filled(),
        )
    }))?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn colour_map_ends_and_midpoint() {
        assert_eq!(colour_map(0.0), RGBColor(0x44, 0x01, 0x54));
        assert_eq!(colour_map(1.0), RGBColor(0xfd, 0xe7, 0x25));
        assert_eq!(colour_map(0.5), RGBColor(0x21, 0x91, 0x8c));
        assert_eq!(colour_map(f64::NAN), colour_map(0.0));
    }

    #[test]
    fn tick_labels() {
        assert_eq!(fmt_tick(0.0), "0");
        assert_eq!(fmt_tick(2.5), "2.5");
        assert_eq!(fmt_tick(10.0), "10");
        assert_eq!(fmt_tick(1.5e-5), "1.50e-5");
    }
}
