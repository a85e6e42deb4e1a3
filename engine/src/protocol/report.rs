//! Protocol reports: `protocol.csv` (one row per figure), `protocol.h5` (one group per exam) and
//! `protocol.html` (one self-contained page: inline CSS, PNG plots as base64 data URIs).

use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::sync::Once;

use plotters::prelude::*;
use plotters::style::FontStyle;

use super::format::Protocol;
use super::{ExamResult, CAUTIONS, LIMITS};
use crate::output::{self, Dataset, Group, OutputError, ResultFile};

const FONT: &str = "protocol-sans";
static FONT_BYTES: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans-subset.ttf");

fn register_font() {
    static ONCE: Once = Once::new();
    ONCE.call_once(|| {
        plotters::style::register_font(FONT, FontStyle::Normal, FONT_BYTES)
            .unwrap_or_else(|_| panic!("embedded font assets/fonts/DejaVuSans-subset.ttf is not a valid TrueType font"));
    });
}

/// A report could not be written.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    /// Writing a file.
    #[error(transparent)]
    Output(#[from] OutputError),
    /// Drawing a plot.
    #[error("plot `{name}`: {message}")]
    Plot {
        /// Plot name.
        name: String,
        /// Message.
        message: String,
    },
}

/// Paths written by [`write_all`].
#[derive(Debug, Clone)]
pub struct Written {
    /// CSV.
    pub csv: PathBuf,
    /// HDF5.
    pub h5: PathBuf,
    /// HTML.
    pub html: PathBuf,
}

fn fmt_num(v: f64) -> String {
    if !v.is_finite() {
        return "".into();
    }
    let a = v.abs();
    if a == 0.0 {
        "0".into()
    } else if (1e-3..1e5).contains(&a) {
        format!("{:.4}", v).trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        format!("{v:.4e}")
    }
}

fn csv_field(s: &str) -> String {
    if s.contains(',') || s.contains('"') {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

/// The CSV text: one row per figure and one per depth-dose point.
pub fn csv_text(results: &[ExamResult]) -> String {
    let mut s = String::from("exam,quantity,unit,computed,sigma,stated,difference_percent,difference_sigma_percent,tolerance_percent,status,reference_level,reference_status\n");
    for r in results {
        let e = &r.exam;
        let _ = writeln!(s, "{},tube_output_1m,uGy/mAs,{},0,,,,,,,", csv_field(&e.name), r.output_ugy_per_mas_1m);
        let _ = writeln!(s, "{},hvl1_al,mm,{},0,,,,,,,", csv_field(&e.name), r.hvl1_mm_al);
        let _ = writeln!(s, "{},focus_skin_distance,cm,{},0,,,,,,,", csv_field(&e.name), r.fsd_cm);
        let _ = writeln!(s, "{},mas,mAs,{},0,,,,,,,", csv_field(&e.name), e.mas);
        let _ = writeln!(s, "{},anode_angle,deg,{},0,,,,,,,", csv_field(&e.name), e.anode_angle_deg);
        let _ = writeln!(s, "{},ripple,%,{},0,,,,,,,", csv_field(&e.name), e.ripple_percent);
        for f in &r.figures {
            let (d, ds) = f.difference_percent.map_or((String::new(), String::new()), |d| (d.value.to_string(), d.sigma.to_string()));
            let _ = writeln!(
                s,
                "{},{},{},{},{},{},{},{},{},{},{},{}",
                csv_field(&e.name),
                f.key,
                f.unit,
                f.computed.value,
                f.computed.sigma,
                f.stated.map_or(String::new(), |v| v.to_string()),
                d,
                ds,
                f.tolerance_percent,
                f.status.label(),
                f.reference.map_or(String::new(), |v| v.to_string()),
                f.reference_status.label()
            );
        }
        for (i, z) in r.depths_cm.iter().enumerate() {
            let _ = writeln!(s, "{},depth_dose_{}cm,mGy,{},{},,,,,,,", csv_field(&e.name), z, r.depth_dose_mgy[i].value, r.depth_dose_mgy[i].sigma);
        }
    }
    s
}

fn safe_name(i: usize) -> String {
    format!("exam_{i:02}")
}

/// The HDF5 tree: root attributes (title, limits, cautions), one group per exam.
pub fn result_file(p: &Protocol, results: &[ExamResult]) -> ResultFile {
    let mut f = ResultFile::new();
    f.set_attr("dosemill_version", env!("CARGO_PKG_VERSION"));
    f.set_attr("protocol_title", p.title.as_str());
    f.set_attr("protocol_file", p.file.as_str());
    f.set_attr("demo_data", p.demo_data);
    f.set_attr("limits", LIMITS.join("\n"));
    f.set_attr("cautions", CAUTIONS.join("\n"));
    for (i, r) in results.iter().enumerate() {
        let mut g = Group::with_kind(&safe_name(i), "protocol_exam");
        g.set_attr("name", r.exam.name.as_str());
        g.set_attr("kvp", r.exam.kvp);
        g.set_attr("anode", format!("{:?}", r.exam.anode).as_str());
        g.set_attr("anode_angle_deg", r.exam.anode_angle_deg);
        g.set_attr("ripple_percent", r.exam.ripple_percent);
        g.set_attr("mas", r.exam.mas);
        g.set_attr("focus_skin_cm", r.fsd_cm);
        g.set_attr("hvl1_mm_al", r.hvl1_mm_al);
        g.set_attr("tube_output_ugy_per_mas_1m", r.output_ugy_per_mas_1m);
        g.set_attr("not_evaluated", r.not_evaluated.join("\n"));
        g.set_attr("patient", patient_text(&r.exam.patient).as_str());
        if let Some(f) = r.fdd_cm {
            g.set_attr("focus_detector_cm", f);
        }
        if let Some(d) = &r.detector_deck {
            g.set_attr("detector_deck", d.as_str());
            g.set_attr("detector_histories", r.detector_histories as f64);
        }
        if !r.depth_media.is_empty() {
            g.set_attr("depth_media", r.depth_media.join(","));
        }
        for fig in &r.figures {
            let mut d = Dataset::f64_1d(&fig.key, vec![fig.computed.value], &fig.unit).with_attr("label", fig.label.as_str()).with_attr("status", fig.status.label());
            if let Some(s) = fig.stated {
                d = d.with_attr("stated", s);
            }
            if let Some(s) = fig.reference {
                d = d.with_attr("reference_level", s);
            }
            g.add_dataset(d);
            g.add_dataset(Dataset::f64_1d(&format!("{}{}", fig.key, output::SIGMA_SUFFIX), vec![fig.computed.sigma], &fig.unit));
        }
        if !r.depths_cm.is_empty() {
            g.add_dataset(Dataset::f64_1d("depth", r.depths_cm.clone(), "cm"));
            g.add_with_sigma("depth_dose", &[r.depths_cm.len()], r.depth_dose_mgy.iter().map(|e| e.value).collect(), r.depth_dose_mgy.iter().map(|e| e.sigma).collect(), "mGy");
            g.add_with_sigma("pdd", &[r.depths_cm.len()], r.pdd_percent.iter().map(|e| e.value).collect(), r.pdd_percent.iter().map(|e| e.sigma).collect(), "%");
        }
        f.add_group(g);
    }
    f
}

fn patient_text(p: &super::format::Patient) -> String {
    match p {
        super::format::Patient::Slab { material, thickness_cm, lateral_cm } => format!("{material} slab {thickness_cm} cm thick, {} × {} cm", lateral_cm[0], lateral_cm[1]),
        super::format::Patient::VoxelDeck { path, thickness_cm, .. } => format!("voxel phantom deck {path} ({thickness_cm} cm on the central axis)"),
    }
}

/// Standard base64 (RFC 4648) of `bytes`.
pub fn base64(bytes: &[u8]) -> String {
    const T: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
    let mut out = String::with_capacity(bytes.len().div_ceil(3) * 4);
    for c in bytes.chunks(3) {
        let n = (c[0] as u32) << 16 | (*c.get(1).unwrap_or(&0) as u32) << 8 | *c.get(2).unwrap_or(&0) as u32;
        out.push(T[(n >> 18) as usize & 63] as char);
        out.push(T[(n >> 12) as usize & 63] as char);
        out.push(if c.len() > 1 { T[(n >> 6) as usize & 63] as char } else { '=' });
        out.push(if c.len() > 2 { T[n as usize & 63] as char } else { '=' });
    }
    out
}

fn png(pixels: &[u8], w: u32, h: u32, name: &str) -> Result<Vec<u8>, ReportError> {
    use image::ImageEncoder;
    let mut bytes = Vec::new();
    image::codecs::png::PngEncoder::new(&mut bytes)
        .write_image(pixels, w, h, image::ColorType::Rgb8)
        .map_err(|e| ReportError::Plot { name: name.into(), message: e.to_string() })?;
    Ok(bytes)
}

/// (x, y, σ) points drawn with error bars; returns PNG bytes.
fn draw_points(name: &str, title: &str, x_label: &str, y_label: &str, series: &[(String, Vec<(f64, f64, f64)>, RGBColor)], line: bool) -> Result<Vec<u8>, ReportError> {
    register_font();
    let (w, h) = (800u32, 480u32);
    let mut pixels = vec![255u8; (w * h * 3) as usize];
    let err = |e: &dyn std::fmt::Display| ReportError::Plot { name: name.into(), message: e.to_string() };
    let all: Vec<&(f64, f64, f64)> = series.iter().flat_map(|s| s.1.iter()).filter(|p| p.1.is_finite()).collect();
    let x0 = all.iter().map(|p| p.0).fold(f64::INFINITY, f64::min);
    let x1 = all.iter().map(|p| p.0).fold(f64::NEG_INFINITY, f64::max);
    let y1 = all.iter().map(|p| p.1 + p.2.max(0.0)).fold(0.0, f64::max);
    let (x0, x1) = if x1 > x0 { (x0 - 0.05 * (x1 - x0), x1 + 0.05 * (x1 - x0)) } else { (x0 - 1.0, x0 + 1.0) };
    let y1 = if y1 > 0.0 { y1 * 1.1 } else { 1.0 };
    {
        let root = BitMapBackend::with_buffer(&mut pixels, (w, h)).into_drawing_area();
        let mut chart = ChartBuilder::on(&root)
            .caption(title, (FONT, 22))
            .margin(15)
            .x_label_area_size(45)
            .y_label_area_size(80)
            .build_cartesian_2d(x0..x1, 0.0..y1)
            .map_err(|e| err(&e))?;
        chart
            .configure_mesh()
            .x_desc(x_label)
            .y_desc(y_label)
            .label_style((FONT, 14))
            .axis_desc_style((FONT, 16))
            .draw()
            .map_err(|e| err(&e))?;
        for (label, pts, colour) in series {
            let c = *colour;
            let good: Vec<(f64, f64, f64)> = pts.iter().copied().filter(|p| p.1.is_finite()).collect();
            if line {
                chart.draw_series(LineSeries::new(good.iter().map(|p| (p.0, p.1)), c.stroke_width(2))).map_err(|e| err(&e))?;
            }
            chart
                .draw_series(good.iter().map(|p| Circle::new((p.0, p.1), 4, c.filled())))
                .map_err(|e| err(&e))?
                .label(label.as_str())
                .legend(move |(x, y)| Circle::new((x + 10, y), 4, c.filled()));
            for p in &good {
                if p.2 > 0.0 {
                    chart.draw_series(std::iter::once(PathElement::new(vec![(p.0, p.1 - p.2), (p.0, p.1 + p.2)], c.stroke_width(1)))).map_err(|e| err(&e))?;
                }
            }
        }
        chart
            .configure_series_labels()
            .label_font((FONT, 14))
            .background_style(WHITE.mix(0.85))
            .border_style(BLACK)
            .position(SeriesLabelPosition::UpperRight)
            .draw()
            .map_err(|e| err(&e))?;
        root.present().map_err(|e| err(&e))?;
    }
    png(&pixels, w, h, name)
}

fn esc(s: &str) -> String {
    s.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

fn img(bytes: &[u8], alt: &str) -> String {
    format!("<img alt=\"{}\" src=\"data:image/png;base64,{}\">", esc(alt), base64(bytes))
}

const CSS: &str = "body{font-family:sans-serif;margin:2em;max-width:1100px;color:#222}h1{font-size:1.6em}h2{font-size:1.3em;border-bottom:1px solid #999;margin-top:2em}\
table{border-collapse:collapse;margin:0.8em 0}th,td{border:1px solid #bbb;padding:4px 8px;text-align:right}th{background:#eee}td.l,th.l{text-align:left}\
tr.flag td{background:#fdd}.caution{border:2px solid #b00;padding:0.6em 1em;background:#fff4f4}.demo{font-weight:bold;color:#b00}img{max-width:100%;border:1px solid #ccc}";

/// The HTML page.
pub fn html_text(p: &Protocol, results: &[ExamResult]) -> Result<String, ReportError> {
    let mut h = String::new();
    let _ = write!(h, "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>Protocol report: {}</title><style>{CSS}</style></head><body>\n", esc(&p.title));
    let _ = writeln!(h, "<h1>Protocol report: {}</h1>", esc(&p.title));
    let _ = writeln!(h, "<p>Protocol file: <code>{}</code>; {} exams; dosemill {}.</p>", esc(&p.file), results.len(), env!("CARGO_PKG_VERSION"));
    if p.demo_data {
        let _ = writeln!(h, "<p class=\"demo\">The protocol file marks its exams and stated figures as invented demo data.</p>");
    }
    h.push_str("<div class=\"caution\"><h2>Cautions</h2><ul>");
    for c in CAUTIONS {
        let _ = write!(h, "<li>{}</li>", esc(c));
    }
    h.push_str("</ul></div>\n<h2>Summary</h2>\n<table><tr><th class=\"l\">exam</th><th>kV</th><th>mAs</th><th>FSD (cm)</th><th>HVL (mm Al)</th><th>IAK (mGy)</th><th>B</th><th>ESAK (mGy)</th><th>ESD water (mGy)</th><th>SPR</th><th class=\"l\">flags</th></tr>\n");
    for r in results {
        let g = |k: &str| r.figure(k).map_or("–".to_string(), |f| format!("{} ± {}", fmt_num(f.computed.value), fmt_num(f.computed.sigma)));
        let flags: Vec<String> = r.figures.iter().filter(|f| f.status.flagged() || f.reference_status.flagged()).map(|f| format!("{}: {}", f.key, if f.status.flagged() { f.status.label() } else { f.reference_status.label() })).collect();
        let cls = if flags.is_empty() { "" } else { " class=\"flag\"" };
        let _ = writeln!(
            h,
            "<tr{cls}><td class=\"l\">{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"l\">{}</td></tr>",
            esc(&r.exam.name),
            fmt_num(r.exam.kvp),
            fmt_num(r.exam.mas),
            fmt_num(r.fsd_cm),
            fmt_num(r.hvl1_mm_al),
            g("iak"),
            g("backscatter_factor"),
            g("esak"),
            g("esd_water"),
            g("spr"),
            esc(&flags.join("; "))
        );
    }
    h.push_str("</table>\n");
    // Comparison plot: computed ESAK and ESD against stated values, by exam.
    let mut computed = Vec::new();
    let mut stated = Vec::new();
    for (i, r) in results.iter().enumerate() {
        for key in ["esak", "esd_water", "esd_soft_tissue"] {
            if let Some(f) = r.figure(key) {
                if let Some(s) = f.stated {
                    computed.push((i as f64 + 1.0, f.computed.value, f.computed.sigma));
                    stated.push((i as f64 + 1.0, s, 0.0));
                }
            }
        }
    }
    if !computed.is_empty() {
        let bytes = draw_points("comparison", "Entrance figures: computed vs stated", "exam number (table order)", "mGy", &[("computed ± 1σ".into(), computed, BLUE), ("stated".into(), stated, RED)], false)?;
        let _ = writeln!(h, "<h2>Computed and stated entrance figures</h2>\n{}", img(&bytes, "computed and stated entrance figures"));
    }
    for (i, r) in results.iter().enumerate() {
        let e = &r.exam;
        let _ = writeln!(h, "<h2>Exam {}: {}</h2>", i + 1, esc(&e.name));
        let filt: Vec<String> = e.filtration.iter().map(|(m, t)| format!("{t} mm {m}")).collect();
        let patient = patient_text(&e.patient);
        let _ = writeln!(
            h,
            "<p>{} kV, {:?} anode at {}°, ripple {} %, added filtration {}; {} mAs; focus–skin {} cm; field {} × {} cm at the skin; patient: {}. Tube output {} µGy/mAs at 1 m, first HVL {} mm Al, mean energy {} keV. Histories: {} free in air, {} with phantom. Tolerance {} %.</p>",
            fmt_num(e.kvp),
            e.anode,
            fmt_num(e.anode_angle_deg),
            fmt_num(e.ripple_percent),
            if filt.is_empty() { "none".to_string() } else { esc(&filt.join(" + ")) },
            fmt_num(e.mas),
            fmt_num(r.fsd_cm),
            e.field_cm[0],
            e.field_cm[1],
            esc(&patient),
            fmt_num(r.output_ugy_per_mas_1m),
            fmt_num(r.hvl1_mm_al),
            fmt_num(r.mean_kev),
            r.histories.0,
            r.histories.1,
            e.tolerance_percent
        );
        h.push_str("<table><tr><th class=\"l\">quantity</th><th>computed</th><th>± 1σ</th><th>unit</th><th>stated</th><th>difference (%)</th><th>tolerance (%)</th><th class=\"l\">status</th><th>reference level</th><th class=\"l\">vs reference</th></tr>\n");
        for f in &r.figures {
            let cls = if f.status.flagged() || f.reference_status.flagged() { " class=\"flag\"" } else { "" };
            let _ = writeln!(
                h,
                "<tr{cls}><td class=\"l\">{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"l\">{}</td><td>{}</td><td class=\"l\">{}</td></tr>",
                esc(&f.label),
                fmt_num(f.computed.value),
                fmt_num(f.computed.sigma),
                esc(&f.unit),
                f.stated.map_or("–".into(), fmt_num),
                f.difference_percent.map_or("–".into(), |d| format!("{} ± {}", fmt_num(d.value), fmt_num(d.sigma))),
                fmt_num(f.tolerance_percent),
                f.status.label(),
                f.reference.map_or("–".into(), fmt_num),
                f.reference_status.label()
            );
        }
        h.push_str("</table>\n");
        if let (Some(d), Some(fdd)) = (&e.detector, r.fdd_cm) {
            let grid = match d.grid_ratio {
                Some(g) => format!(
                    "anti-scatter grid ratio {g}, {} lamellae/cm of lead {} mm thick, {} interspace, focused at {} cm",
                    fmt_num(d.grid_strips_per_cm.unwrap_or(super::format::GRID_STRIPS_PER_CM)),
                    fmt_num(d.grid_strip_width_mm.unwrap_or(super::format::GRID_STRIP_WIDTH_MM)),
                    d.grid_interspace.as_deref().unwrap_or(super::format::GRID_INTERSPACE),
                    fmt_num(fdd)
                ),
                None => "no grid".to_string(),
            };
            let run = if r.detector_deck.is_some() {
                format!("separate analog run of {} histories; the generated deck is stored in protocol.h5 (attribute detector_deck of this exam)", r.detector_histories)
            } else {
                format!("scored in the phantom run ({} histories, analog), face centred on the beam axis", r.detector_histories)
            };
            let _ = writeln!(
                h,
                "<p>Detector: {} mm {} at {} cm from the focus ({} cm behind the exit surface), {grid}; {run}.</p>",
                fmt_num(d.thickness_mm),
                esc(&d.material),
                fmt_num(fdd),
                fmt_num(d.gap()),
            );
        }
        let regions: Vec<&super::Figure> = r.figures.iter().filter(|f| f.key.starts_with("region_dose_")).collect();
        if !regions.is_empty() {
            h.push_str("<h3>Region doses (voxel phantom)</h3>\n<table><tr><th class=\"l\">region</th><th>mass (g)</th><th>mean dose (mGy)</th><th>± 1σ</th><th>per mAs (mGy/mAs)</th></tr>\n");
            for f in regions {
                let k = &f.key["region_dose_".len()..];
                let mass = r.figure(&format!("region_mass_{k}")).map_or(f64::NAN, |m| m.computed.value);
                let name = f.label.rsplit_once("region ").map_or(k, |x| x.1.split(" (").next().unwrap_or(k));
                let _ = writeln!(h, "<tr><td class=\"l\">{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>", esc(name), fmt_num(mass), fmt_num(f.computed.value), fmt_num(f.computed.sigma), fmt_num(f.computed.value / e.mas));
            }
            h.push_str("</table>\n");
        }
        for n in &r.not_evaluated {
            let _ = writeln!(h, "<p><em>Not evaluated:</em> {}</p>", esc(n));
        }
        if !r.depths_cm.is_empty() {
            let pts: Vec<(f64, f64, f64)> = r.depths_cm.iter().zip(&r.depth_dose_mgy).map(|(z, d)| (*z, d.value, d.sigma)).collect();
            let bytes = draw_points(&format!("depth_dose_{i}"), &format!("Central-axis depth dose: {}", e.name), "depth (cm)", "dose (mGy)", &[("dose ± 1σ".into(), pts, BLUE)], true)?;
            let _ = writeln!(h, "<h3>Central-axis depth dose</h3>\n{}", img(&bytes, &format!("depth dose of {}", e.name)));
            h.push_str("<table><tr><th>depth (cm)</th><th class=\"l\">medium</th><th>dose (mGy)</th><th>± 1σ</th><th>PDD (%)</th><th>± 1σ</th></tr>\n");
            for (k, z) in r.depths_cm.iter().enumerate() {
                let medium = r.depth_media.get(k).map_or("", |m| m.as_str());
                let _ = writeln!(h, "<tr><td>{}</td><td class=\"l\">{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>", fmt_num(*z), esc(medium), fmt_num(r.depth_dose_mgy[k].value), fmt_num(r.depth_dose_mgy[k].sigma), fmt_num(r.pdd_percent[k].value), fmt_num(r.pdd_percent[k].sigma));
            }
            h.push_str("</table>\n");
        }
    }
    h.push_str("<h2>Model limits</h2><ul>");
    for l in LIMITS {
        let _ = write!(h, "<li>{}</li>", esc(l));
    }
    h.push_str("</ul>\n<h2>Method</h2><p>IAK = tube output at 1 m × mAs × (100 cm / FSD)². B = K<sub>air</sub>(entrance, phantom present) / K<sub>air</sub>(same point, free in air), two independent Monte Carlo runs, uncertainties combined in quadrature. ESAK = IAK × B. ESD = IAK × K<sub>medium</sub>(entrance, phantom present)/K<sub>air</sub>(free in air), i.e. ESAK × (μen/ρ)<sub>medium/air</sub> averaged over the energy-fluence spectrum at the surface with the phantom present (incident and backscattered photons). Depth dose: IAK × K<sub>phantom medium</sub>(depth)/K<sub>air</sub>(free in air) on the central axis. PDD and μen-ratio uncertainties ignore the positive correlation within one run (upper bounds). Voxel phantoms: the same figures on the central axis through the grid centre (dose to the local voxel medium), and the mean dose of each labelled region = IAK × (track-length energy in the region / region mass) / K<sub>air</sub>(free in air). SPR: a separate analog run of the exam with the detector at the focus–detector distance (voxel patients: the detector is scored in the phantom run); scatter (all photons that interacted) over the ray-traced primary, both as energy absorbed in the detector layer behind the grid, mean over the central 5 × 5 cm.</p>\n</body></html>\n");
    Ok(h)
}

/// Writes `protocol.csv`, `protocol.h5` and `protocol.html` into `dir` (created if missing);
/// existing files are refused unless `overwrite`.
pub fn write_all(dir: &Path, p: &Protocol, results: &[ExamResult], overwrite: bool) -> Result<Written, ReportError> {
    std::fs::create_dir_all(dir).map_err(|source| OutputError::Io { path: dir.to_owned(), action: "cannot create the report folder", source })?;
    let w = Written { csv: dir.join("protocol.csv"), h5: dir.join("protocol.h5"), html: dir.join("protocol.html") };
    for path in [&w.csv, &w.h5, &w.html] {
        if !overwrite && path.exists() {
            return Err(OutputError::Exists { path: path.clone() }.into());
        }
    }
    let html = html_text(p, results)?;
    output::write_bytes_atomic(&w.csv, csv_text(results).as_bytes(), overwrite)?;
    output::write_atomic(&w.h5, &result_file(p, results), overwrite)?;
    output::write_bytes_atomic(&w.html, html.as_bytes(), overwrite)?;
    Ok(w)
}
