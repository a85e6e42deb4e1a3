//! Protocol files: a list of exams in TOML (`[[exam]]` tables) or CSV (one exam a row).
//! See `README.md` beside this file for the keys. Errors name file, line, column and key.

use std::path::Path;

use serde::Deserialize;

use crate::spectrum::{Anode, ANODE_ANGLE_RANGE_DEG, KVP_MAX, KVP_MIN, RIPPLE_RANGE_PERCENT};

/// A protocol file that cannot be used; `Display` gives `file:line:column: key: message`.
#[derive(Debug, thiserror::Error)]
#[error("{file}:{line}:{column}: {key}: {message}")]
pub struct ProtocolError {
    /// The file.
    pub file: String,
    /// Line (1-based).
    pub line: usize,
    /// Column (1-based).
    pub column: usize,
    /// Key (or CSV column) the error is about.
    pub key: String,
    /// What is wrong and how to fix it.
    pub message: String,
}

/// Where the exam is measured from the focus.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub enum Distance {
    /// Focus-to-skin distance (cm).
    FocusSkin(f64),
    /// Focus-to-detector distance (cm); the patient lies directly on the detector, so the
    /// focus-to-skin distance is this minus the patient thickness.
    FocusDetector(f64),
}

/// The patient model.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub enum Patient {
    /// A homogeneous slab (water, soft tissue, PMMA … from the materials library).
    Slab {
        /// Library material name.
        material: String,
        /// Thickness along the beam (cm).
        thickness_cm: f64,
        /// Lateral size (cm).
        lateral_cm: [f64; 2],
    },
    /// A voxel phantom deck: its grid and region labels, with the exam's beam along +z.
    VoxelDeck {
        /// Path of the deck as written in the protocol (relative to the protocol file).
        path: String,
        /// The same path resolved against the protocol file's folder.
        resolved: String,
        /// Patient thickness along the beam (cm), for the focus-to-skin distance.
        thickness_cm: f64,
    },
}

impl Patient {
    /// Thickness along the beam (cm).
    pub fn thickness_cm(&self) -> f64 {
        match self {
            Patient::Slab { thickness_cm, .. } | Patient::VoxelDeck { thickness_cm, .. } => *thickness_cm,
        }
    }
}

/// An image receptor behind the patient: a sensitive layer, optionally behind an anti-scatter
/// grid. The detector face lies `gap_cm` behind the patient's exit surface (default 0: the
/// patient lies on the detector).
#[derive(Debug, Clone, PartialEq, Deserialize, serde::Serialize)]
#[serde(deny_unknown_fields)]
pub struct Detector {
    /// Library material of the sensitive layer.
    pub material: String,
    /// Thickness of the sensitive layer (mm).
    pub thickness_mm: f64,
    /// Anti-scatter grid ratio, if any.
    pub grid_ratio: Option<f64>,
    /// Grid lamellae per cm (default [`GRID_STRIPS_PER_CM`]).
    pub grid_strips_per_cm: Option<f64>,
    /// Lamella (lead strip) thickness (mm; default [`GRID_STRIP_WIDTH_MM`]).
    pub grid_strip_width_mm: Option<f64>,
    /// Interspace material of the grid (default [`GRID_INTERSPACE`]).
    pub grid_interspace: Option<String>,
    /// Gap between the patient's exit surface and the detector face (cm; default 0).
    pub gap_cm: Option<f64>,
}

/// Default grid lamellae per cm (a common line density of stationary radiography grids).
pub const GRID_STRIPS_PER_CM: f64 = 40.0;
/// Default lamella thickness (mm) of lead.
pub const GRID_STRIP_WIDTH_MM: f64 = 0.036;
/// Default interspace material.
pub const GRID_INTERSPACE: &str = "Al";

impl Detector {
    /// Gap between the exit surface and the detector face (cm).
    pub fn gap(&self) -> f64 {
        self.gap_cm.unwrap_or(0.0)
    }
}

/// Figures stated for an exam (from a survey, a previous calculation, a vendor sheet …).
#[derive(Debug, Clone, Default, PartialEq, Deserialize, serde::Serialize)]
#[serde(deny_unknown_fields)]
pub struct Stated {
    /// Incident air kerma (mGy).
    pub iak_mgy: Option<f64>,
    /// Entrance surface air kerma (mGy).
    pub esak_mgy: Option<f64>,
    /// Entrance surface dose (mGy) to `esd_medium`.
    pub esd_mgy: Option<f64>,
    /// Medium of the stated entrance surface dose: "water" (default) or "soft_tissue".
    pub esd_medium: Option<String>,
    /// Scatter-to-primary ratio at the detector (central ROI).
    pub spr: Option<f64>,
}

/// Reference levels for an exam (e.g. local or national diagnostic reference levels).
#[derive(Debug, Clone, Default, PartialEq, Deserialize, serde::Serialize)]
#[serde(deny_unknown_fields)]
pub struct ReferenceLevels {
    /// Entrance surface air kerma (mGy).
    pub esak_mgy: Option<f64>,
    /// Entrance surface dose (mGy), same medium as the stated ESD.
    pub esd_mgy: Option<f64>,
    /// Scatter-to-primary ratio at the detector (central ROI).
    pub spr: Option<f64>,
}

/// One exam of a protocol.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Exam {
    /// Name.
    pub name: String,
    /// Line of the file where it is defined.
    pub line: usize,
    /// Peak tube voltage (kV).
    pub kvp: f64,
    /// Anode.
    pub anode: Anode,
    /// Anode angle (degrees; default that of the tube model, 12°).
    pub anode_angle_deg: f64,
    /// Voltage ripple (% of kVp; 0 = constant potential, the default).
    pub ripple_percent: f64,
    /// Added filters: (material, thickness mm).
    pub filtration: Vec<(String, f64)>,
    /// Tube current–time product (mAs).
    pub mas: f64,
    /// Distance from the focus.
    pub distance: Distance,
    /// Field size at the entrance surface (cm × cm).
    pub field_cm: [f64; 2],
    /// Patient model.
    pub patient: Patient,
    /// Optional image receptor.
    pub detector: Option<Detector>,
    /// Stated figures.
    pub stated: Stated,
    /// Reference levels.
    pub reference: ReferenceLevels,
    /// Tolerance on stated figures (%).
    pub tolerance_percent: f64,
}

impl Exam {
    /// Gap between the patient's exit surface and the detector (cm; 0 without a detector).
    pub fn detector_gap_cm(&self) -> f64 {
        self.detector.as_ref().map_or(0.0, Detector::gap)
    }

    /// Focus-to-skin distance (cm).
    pub fn fsd_cm(&self) -> f64 {
        match self.distance {
            Distance::FocusSkin(d) => d,
            Distance::FocusDetector(d) => d - self.patient.thickness_cm() - self.detector_gap_cm(),
        }
    }

    /// Focus-to-detector distance (cm): as given, or focus–skin + thickness + gap.
    pub fn fdd_cm(&self) -> f64 {
        match self.distance {
            Distance::FocusSkin(d) => d + self.patient.thickness_cm() + self.detector_gap_cm(),
            Distance::FocusDetector(d) => d,
        }
    }
}

/// A protocol: a title, a default tolerance and the exams.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Protocol {
    /// Title.
    pub title: String,
    /// True when the file says its figures are invented demo data.
    pub demo_data: bool,
    /// Exams in file order.
    pub exams: Vec<Exam>,
    /// File it was read from.
    pub file: String,
}

/// Default tolerance on stated figures (%) when neither the exam nor the protocol gives one.
pub const DEFAULT_TOLERANCE_PERCENT: f64 = 10.0;

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FileToml {
    protocol: Option<HeaderToml>,
    #[serde(default)]
    exam: Vec<toml::Spanned<ExamToml>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct HeaderToml {
    title: Option<String>,
    demo_data: Option<bool>,
    tolerance_percent: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FilterToml {
    material: String,
    thickness_mm: f64,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct PatientToml {
    material: Option<String>,
    thickness_cm: f64,
    lateral_cm: Option<[f64; 2]>,
    voxel_deck: Option<String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct ExamToml {
    name: String,
    kvp: f64,
    anode: Option<String>,
    anode_angle_deg: Option<f64>,
    ripple_percent: Option<f64>,
    #[serde(default)]
    filtration: Vec<FilterToml>,
    mas: f64,
    focus_skin_cm: Option<f64>,
    focus_detector_cm: Option<f64>,
    field_cm: [f64; 2],
    patient: PatientToml,
    detector: Option<Detector>,
    #[serde(default)]
    stated: Stated,
    #[serde(default)]
    reference_level: ReferenceLevels,
    tolerance_percent: Option<f64>,
}

/// Line and column (1-based) of byte offset `at` in `text`.
pub fn line_col(text: &str, at: usize) -> (usize, usize) {
    let before = &text[..at.min(text.len())];
    let line = before.matches('\n').count() + 1;
    let col = before.rsplit('\n').next().map_or(0, |l| l.chars().count()) + 1;
    (line, col)
}

/// Reads a protocol from a `.toml` or `.csv` file.
pub fn read(path: &Path) -> Result<Protocol, ProtocolError> {
    let file = path.display().to_string();
    let text = std::fs::read_to_string(path).map_err(|e| ProtocolError {
        file: file.clone(),
        line: 0,
        column: 0,
        key: "file".into(),
        message: format!("cannot read the protocol: {e}; check the path"),
    })?;
    match path.extension().and_then(|e| e.to_str()).map(|e| e.to_ascii_lowercase()).as_deref() {
        Some("toml") => parse_toml(&text, &file),
        Some("csv") => parse_csv(&text, &file),
        _ => Err(ProtocolError { file, line: 0, column: 0, key: "file".into(), message: "unknown protocol format; use a .toml or .csv file".into() }),
    }
}

struct Checker<'a> {
    file: &'a str,
    line: usize,
    column: usize,
    prefix: String,
}

impl Checker<'_> {
    fn err(&self, key: &str, message: impl Into<String>) -> ProtocolError {
        ProtocolError { file: self.file.to_string(), line: self.line, column: self.column, key: format!("{}{}", self.prefix, key), message: message.into() }
    }
    fn range(&self, key: &str, v: f64, lo: f64, hi: f64, unit: &str) -> Result<f64, ProtocolError> {
        if v.is_finite() && v >= lo && v <= hi {
            Ok(v)
        } else {
            Err(self.err(key, format!("{v} {unit} is outside {lo}–{hi} {unit}; give a value in that range")))
        }
    }
    fn material(&self, key: &str, name: &str) -> Result<String, ProtocolError> {
        match dosemill_xsdata::library::lookup(name) {
            Ok(m) => Ok(m.name().to_string()),
            Err(_) => {
                let near = dosemill_xsdata::library::nearest_names(name, 3);
                Err(self.err(key, format!("unknown material `{name}`; did you mean one of {near:?}? (`dosemill materials` lists them)")))
            }
        }
    }
    fn positive_opt(&self, key: &str, v: Option<f64>) -> Result<(), ProtocolError> {
        match v {
            Some(x) if !(x.is_finite() && x > 0.0) => Err(self.err(key, format!("{x} must be a positive number"))),
            _ => Ok(()),
        }
    }
}

fn anode_of(c: &Checker, s: Option<&str>) -> Result<Anode, ProtocolError> {
    match s.unwrap_or("W").to_ascii_uppercase().as_str() {
        "W" => Ok(Anode::W),
        "MO" => Ok(Anode::Mo),
        "RH" => Ok(Anode::Rh),
        other => Err(c.err("anode", format!("unknown anode `{other}`; use \"W\", \"Mo\" or \"Rh\""))),
    }
}

/// The raw fields of an exam, from either format.
struct RawExam {
    name: String,
    kvp: f64,
    anode: Option<String>,
    anode_angle_deg: Option<f64>,
    ripple_percent: Option<f64>,
    filtration: Vec<(String, f64)>,
    mas: f64,
    focus_skin_cm: Option<f64>,
    focus_detector_cm: Option<f64>,
    field_cm: [f64; 2],
    patient_material: Option<String>,
    patient_thickness_cm: f64,
    patient_lateral_cm: Option<[f64; 2]>,
    voxel_deck: Option<String>,
    detector: Option<Detector>,
    stated: Stated,
    reference: ReferenceLevels,
    tolerance_percent: Option<f64>,
}

fn resolve(c: &Checker, r: RawExam, default_tol: f64) -> Result<Exam, ProtocolError> {
    if r.name.trim().is_empty() {
        return Err(c.err("name", "give the exam a name"));
    }
    let kvp = c.range("kvp", r.kvp, KVP_MIN, KVP_MAX, "kV")?;
    let anode = anode_of(c, r.anode.as_deref())?;
    let default_tube = crate::spectrum::Tube::new(kvp, anode);
    let (a0, a1) = ANODE_ANGLE_RANGE_DEG;
    let anode_angle_deg = c.range("anode_angle_deg", r.anode_angle_deg.unwrap_or(default_tube.anode_angle_deg), a0, a1, "°")?;
    let (r0, r1) = RIPPLE_RANGE_PERCENT;
    let ripple_percent = c.range("ripple_percent", r.ripple_percent.unwrap_or(default_tube.ripple_percent), r0, r1, "%")?;
    let mut filtration = Vec::new();
    for (i, (m, t)) in r.filtration.iter().enumerate() {
        let key = format!("filtration[{i}]");
        let m = c.material(&format!("{key}.material"), m)?;
        c.range(&format!("{key}.thickness_mm"), *t, 0.0, 50.0, "mm")?;
        filtration.push((m, *t));
    }
    let mas = c.range("mas", r.mas, 1e-3, 10_000.0, "mAs")?;
    let thickness = c.range("patient.thickness_cm", r.patient_thickness_cm, 0.5, 60.0, "cm")?;
    let distance = match (r.focus_skin_cm, r.focus_detector_cm) {
        (Some(d), None) => Distance::FocusSkin(c.range("focus_skin_cm", d, 10.0, 1000.0, "cm")?),
        (None, Some(d)) => {
            let d = c.range("focus_detector_cm", d, 10.0, 1000.0, "cm")?;
            let gap = r.detector.as_ref().map_or(0.0, Detector::gap);
            if d - thickness - gap < 10.0 {
                return Err(c.err("focus_detector_cm", format!("{d} cm leaves less than 10 cm from the focus to the skin of a {thickness} cm patient ({gap} cm gap to the detector); check the distance")));
            }
            Distance::FocusDetector(d)
        }
        (Some(_), Some(_)) => return Err(c.err("focus_skin_cm", "give either focus_skin_cm or focus_detector_cm, not both")),
        (None, None) => return Err(c.err("focus_skin_cm", "missing distance; give focus_skin_cm or focus_detector_cm")),
    };
    for (k, v) in [("field_cm[0]", r.field_cm[0]), ("field_cm[1]", r.field_cm[1])] {
        c.range(k, v, 0.5, 60.0, "cm")?;
    }
    let patient = match (r.voxel_deck, r.patient_material) {
        (Some(path), None) => {
            if path.trim().is_empty() {
                return Err(c.err("patient.voxel_deck", "empty path; name a deck file with `[geometry] kind = \"voxels\"`, relative to the protocol file"));
            }
            let base = Path::new(c.file).parent().unwrap_or(Path::new(""));
            let resolved = base.join(&path).display().to_string();
            Patient::VoxelDeck { path, resolved, thickness_cm: thickness }
        }
        (Some(_), Some(_)) => return Err(c.err("patient.voxel_deck", "give either patient material (slab) or voxel_deck, not both")),
        (None, m) => {
            let material = c.material("patient.material", m.as_deref().unwrap_or("water"))?;
            let lateral = r.patient_lateral_cm.unwrap_or([r.field_cm[0].max(30.0) + 10.0, r.field_cm[1].max(30.0) + 10.0]);
            for (k, v) in [("patient.lateral_cm[0]", lateral[0]), ("patient.lateral_cm[1]", lateral[1])] {
                c.range(k, v, 1.0, 200.0, "cm")?;
            }
            if lateral[0] < r.field_cm[0] || lateral[1] < r.field_cm[1] {
                return Err(c.err("patient.lateral_cm", "the patient slab is narrower than the field; make it at least as wide as field_cm"));
            }
            Patient::Slab { material, thickness_cm: thickness, lateral_cm: lateral }
        }
    };
    let mut detector = r.detector;
    if let Some(d) = &mut detector {
        d.material = c.material("detector.material", &d.material)?;
        c.range("detector.thickness_mm", d.thickness_mm, 1e-3, 100.0, "mm")?;
        if let Some(g) = d.grid_ratio {
            c.range("detector.grid_ratio", g, 1.0, 50.0, "")?;
        }
        let strips = c.range("detector.grid_strips_per_cm", d.grid_strips_per_cm.unwrap_or(GRID_STRIPS_PER_CM), 1.0, 200.0, "per cm")?;
        let width = c.range("detector.grid_strip_width_mm", d.grid_strip_width_mm.unwrap_or(GRID_STRIP_WIDTH_MM), 1e-3, 1.0, "mm")?;
        if width / 10.0 >= 1.0 / strips {
            return Err(c.err("detector.grid_strip_width_mm", format!("{width} mm lamellae do not fit {strips} lamellae per cm; make them thinner or use fewer per cm")));
        }
        if let Some(m) = &d.grid_interspace {
            d.grid_interspace = Some(c.material("detector.grid_interspace", m)?);
        }
        if d.grid_ratio.is_none() && (d.grid_strips_per_cm.is_some() || d.grid_strip_width_mm.is_some() || d.grid_interspace.is_some()) {
            return Err(c.err("detector.grid_ratio", "grid details are given but no grid_ratio; add grid_ratio (e.g. 10) or remove the grid keys"));
        }
        c.range("detector.gap_cm", d.gap(), 0.0, 50.0, "cm")?;
    }
    c.positive_opt("stated.iak_mgy", r.stated.iak_mgy)?;
    c.positive_opt("stated.esak_mgy", r.stated.esak_mgy)?;
    c.positive_opt("stated.esd_mgy", r.stated.esd_mgy)?;
    c.positive_opt("stated.spr", r.stated.spr)?;
    c.positive_opt("reference_level.spr", r.reference.spr)?;
    if detector.is_none() && (r.stated.spr.is_some() || r.reference.spr.is_some()) {
        return Err(c.err("stated.spr", "an SPR is given but the exam has no detector; add detector = { material, thickness_mm } or remove the SPR"));
    }
    let mut stated = r.stated;
    if let Some(m) = &stated.esd_medium {
        let name = c.material("stated.esd_medium", m)?;
        if name != "water" && name != "soft_tissue" {
            return Err(c.err("stated.esd_medium", format!("`{m}`: the entrance surface dose is given in \"water\" or \"soft_tissue\"")));
        }
        stated.esd_medium = Some(name);
    }
    c.positive_opt("reference_level.esak_mgy", r.reference.esak_mgy)?;
    c.positive_opt("reference_level.esd_mgy", r.reference.esd_mgy)?;
    let tolerance_percent = c.range("tolerance_percent", r.tolerance_percent.unwrap_or(default_tol), 0.0, 100.0, "%")?;
    Ok(Exam {
        name: r.name,
        line: c.line,
        kvp,
        anode,
        anode_angle_deg,
        ripple_percent,
        filtration,
        mas,
        distance,
        field_cm: r.field_cm,
        patient,
        detector,
        stated,
        reference: r.reference,
        tolerance_percent,
    })
}

/// A run deck (`[run]`, `[source]`, `[geometry]`, `[[score]]`) given where a protocol file is
/// expected: one error that says so and names the command for decks, instead of serde's
/// "unknown field `run`".
fn deck_given_as_protocol(text: &str, file: &str) -> Result<(), ProtocolError> {
    #[derive(Deserialize)]
    struct Probe {
        run: Option<toml::Spanned<toml::Value>>,
        source: Option<toml::Spanned<toml::Value>>,
        geometry: Option<toml::Spanned<toml::Value>>,
        score: Option<toml::Spanned<toml::Value>>,
        protocol: Option<toml::Value>,
        exam: Option<toml::Value>,
    }
    let Ok(p) = toml::from_str::<Probe>(text) else { return Ok(()) };
    if p.protocol.is_some() || p.exam.is_some() {
        return Ok(());
    }
    let first = [("run", &p.run), ("source", &p.source), ("geometry", &p.geometry), ("score", &p.score)]
        .into_iter()
        .filter_map(|(k, v)| v.as_ref().map(|v| (k, v.span().start)))
        .min_by_key(|&(_, at)| at);
    match first {
        None => Ok(()),
        Some((key, at)) => {
            let (line, column) = line_col(text, at);
            Err(ProtocolError {
                file: file.into(),
                line,
                column,
                key: key.into(),
                message: format!("this is a run deck, not a protocol file (no `[protocol]` or `[[exam]]`); run it with `dosemill run {file}`"),
            })
        }
    }
}

/// Parses protocol TOML text (`file` names it in errors).
pub fn parse_toml(text: &str, file: &str) -> Result<Protocol, ProtocolError> {
    deck_given_as_protocol(text, file)?;
    let parsed: FileToml = toml::from_str(text).map_err(|e| {
        let (line, column) = e.span().map_or((0, 0), |s| line_col(text, s.start));
        ProtocolError { file: file.to_string(), line, column, key: "toml".into(), message: e.message().to_string() }
    })?;
    let header = parsed.protocol.unwrap_or(HeaderToml { title: None, demo_data: None, tolerance_percent: None });
    let default_tol = header.tolerance_percent.unwrap_or(DEFAULT_TOLERANCE_PERCENT);
    if parsed.exam.is_empty() {
        return Err(ProtocolError { file: file.into(), line: 1, column: 1, key: "exam".into(), message: "the protocol lists no exam; add [[exam]] tables".into() });
    }
    let mut exams = Vec::new();
    for (i, sp) in parsed.exam.into_iter().enumerate() {
        let (line, column) = line_col(text, sp.span().start);
        let c = Checker { file, line, column, prefix: format!("exam[{i}].") };
        let e = sp.into_inner();
        let raw = RawExam {
            name: e.name,
            kvp: e.kvp,
            anode: e.anode,
            anode_angle_deg: e.anode_angle_deg,
            ripple_percent: e.ripple_percent,
            filtration: e.filtration.into_iter().map(|f| (f.material, f.thickness_mm)).collect(),
            mas: e.mas,
            focus_skin_cm: e.focus_skin_cm,
            focus_detector_cm: e.focus_detector_cm,
            field_cm: e.field_cm,
            patient_material: e.patient.material,
            patient_thickness_cm: e.patient.thickness_cm,
            patient_lateral_cm: e.patient.lateral_cm,
            voxel_deck: e.patient.voxel_deck,
            detector: e.detector,
            stated: e.stated,
            reference: e.reference_level,
            tolerance_percent: e.tolerance_percent,
        };
        exams.push(resolve(&c, raw, default_tol)?);
    }
    check_unique(&exams, file)?;
    Ok(Protocol { title: header.title.unwrap_or_else(|| "protocol".into()), demo_data: header.demo_data.unwrap_or(false), exams, file: file.to_string() })
}

fn check_unique(exams: &[Exam], file: &str) -> Result<(), ProtocolError> {
    for (i, e) in exams.iter().enumerate() {
        if let Some(first) = exams[..i].iter().find(|f| f.name == e.name) {
            return Err(ProtocolError { file: file.into(), line: e.line, column: 1, key: format!("exam[{i}].name"), message: format!("exam name `{}` already used on line {}; give every exam its own name", e.name, first.line) });
        }
    }
    Ok(())
}

/// CSV columns, in any order; the first row names them.
pub const CSV_COLUMNS: [&str; 27] = [
    "name",
    "kvp",
    "anode",
    "anode_angle_deg",
    "ripple_percent",
    "filtration",
    "mas",
    "focus_skin_cm",
    "focus_detector_cm",
    "field_width_cm",
    "field_height_cm",
    "patient_material",
    "patient_thickness_cm",
    "stated_iak_mgy",
    "stated_esak_mgy",
    "stated_esd_mgy",
    "esd_medium",
    "reference_esak_mgy",
    "reference_esd_mgy",
    "tolerance_percent",
    "detector_material",
    "detector_thickness_mm",
    "detector_grid_ratio",
    "detector_gap_cm",
    "patient_voxel_deck",
    "stated_spr",
    "reference_spr",
];

/// Splits one CSV line into (field, starting column) pairs; double quotes group commas.
fn split_csv(line: &str) -> Vec<(String, usize)> {
    let mut out = Vec::new();
    let mut cur = String::new();
    let mut start = 1;
    let mut quoted = false;
    for (i, ch) in line.chars().enumerate() {
        match ch {
            '"' => quoted = !quoted,
            ',' if !quoted => {
                out.push((cur.trim().to_string(), start));
                cur.clear();
                start = i + 2;
            }
            _ => cur.push(ch),
        }
    }
    out.push((cur.trim().to_string(), start));
    out
}

/// Parses protocol CSV text. Lines starting with `#` are comments; `# title: …`,
/// `# demo_data: true` and `# tolerance_percent: …` set the header.
pub fn parse_csv(text: &str, file: &str) -> Result<Protocol, ProtocolError> {
    let mut title = None;
    let mut demo = false;
    let mut default_tol = DEFAULT_TOLERANCE_PERCENT;
    let mut header: Option<Vec<String>> = None;
    let mut exams = Vec::new();
    for (ln, raw_line) in text.lines().enumerate() {
        let line_no = ln + 1;
        let line = raw_line.trim_end_matches('\r');
        if line.trim().is_empty() {
            continue;
        }
        if let Some(comment) = line.trim_start().strip_prefix('#') {
            if let Some((k, v)) = comment.split_once(':') {
                match k.trim() {
                    "title" => title = Some(v.trim().to_string()),
                    "demo_data" => demo = v.trim() == "true",
                    "tolerance_percent" => {
                        default_tol = v.trim().parse().map_err(|_| ProtocolError { file: file.into(), line: line_no, column: 1, key: "tolerance_percent".into(), message: format!("`{}` is not a number", v.trim()) })?
                    }
                    _ => {}
                }
            }
            continue;
        }
        let fields = split_csv(line);
        let Some(cols) = &header else {
            for (name, col) in &fields {
                if !CSV_COLUMNS.contains(&name.as_str()) {
                    return Err(ProtocolError { file: file.into(), line: line_no, column: *col, key: name.clone(), message: format!("unknown column; known columns: {}", CSV_COLUMNS.join(", ")) });
                }
            }
            for need in ["name", "kvp", "mas", "field_width_cm", "field_height_cm", "patient_thickness_cm"] {
                if !fields.iter().any(|(n, _)| n == need) {
                    return Err(ProtocolError { file: file.into(), line: line_no, column: 1, key: need.into(), message: "required column missing from the header row".into() });
                }
            }
            header = Some(fields.into_iter().map(|f| f.0).collect());
            continue;
        };
        if fields.len() != cols.len() {
            return Err(ProtocolError { file: file.into(), line: line_no, column: 1, key: "row".into(), message: format!("{} fields, the header has {}; check for a missing or extra comma", fields.len(), cols.len()) });
        }
        let get = |k: &str| cols.iter().position(|c| c == k).map(|i| (&fields[i].0, fields[i].1)).filter(|(v, _)| !v.is_empty());
        let num = |k: &str| -> Result<Option<f64>, ProtocolError> {
            match get(k) {
                None => Ok(None),
                Some((v, col)) => v.parse::<f64>().map(Some).map_err(|_| ProtocolError { file: file.into(), line: line_no, column: col, key: k.into(), message: format!("`{v}` is not a number") }),
            }
        };
        let need = |k: &str| -> Result<f64, ProtocolError> {
            num(k)?.ok_or_else(|| ProtocolError { file: file.into(), line: line_no, column: 1, key: k.into(), message: "missing value; this column is required".into() })
        };
        let mut filtration = Vec::new();
        if let Some((v, col)) = get("filtration") {
            for part in v.split('+') {
                let (m, t) = part.split_once(':').ok_or_else(|| ProtocolError { file: file.into(), line: line_no, column: col, key: "filtration".into(), message: format!("`{part}`: write filters as MATERIAL:MM joined by +, e.g. Al:2.5+Cu:0.1") })?;
                let t: f64 = t.trim().parse().map_err(|_| ProtocolError { file: file.into(), line: line_no, column: col, key: "filtration".into(), message: format!("`{t}` is not a thickness in mm") })?;
                filtration.push((m.trim().to_string(), t));
            }
        }
        let name_col = get("name").map_or(1, |g| g.1);
        let detector = match get("detector_material") {
            Some((m, _)) => Some(Detector {
                material: m.clone(),
                thickness_mm: num("detector_thickness_mm")?.unwrap_or(0.5),
                grid_ratio: num("detector_grid_ratio")?,
                grid_strips_per_cm: None,
                grid_strip_width_mm: None,
                grid_interspace: None,
                gap_cm: num("detector_gap_cm")?,
            }),
            None => None,
        };
        let raw = RawExam {
            name: get("name").map(|g| g.0.clone()).unwrap_or_default(),
            kvp: need("kvp")?,
            anode: get("anode").map(|g| g.0.clone()),
            anode_angle_deg: num("anode_angle_deg")?,
            ripple_percent: num("ripple_percent")?,
            filtration,
            mas: need("mas")?,
            focus_skin_cm: num("focus_skin_cm")?,
            focus_detector_cm: num("focus_detector_cm")?,
            field_cm: [need("field_width_cm")?, need("field_height_cm")?],
            patient_material: get("patient_material").map(|g| g.0.clone()),
            patient_thickness_cm: need("patient_thickness_cm")?,
            patient_lateral_cm: None,
            voxel_deck: get("patient_voxel_deck").map(|g| g.0.clone()),
            detector,
            stated: Stated { iak_mgy: num("stated_iak_mgy")?, esak_mgy: num("stated_esak_mgy")?, esd_mgy: num("stated_esd_mgy")?, esd_medium: get("esd_medium").map(|g| g.0.clone()), spr: num("stated_spr")? },
            reference: ReferenceLevels { esak_mgy: num("reference_esak_mgy")?, esd_mgy: num("reference_esd_mgy")?, spr: num("reference_spr")? },
            tolerance_percent: num("tolerance_percent")?,
        };
        let c = Checker { file, line: line_no, column: name_col, prefix: String::new() };
        exams.push(resolve(&c, raw, default_tol)?);
    }
    if exams.is_empty() {
        return Err(ProtocolError { file: file.into(), line: 1, column: 1, key: "exam".into(), message: "the protocol lists no exam; add a header row and one row per exam".into() });
    }
    check_unique(&exams, file)?;
    Ok(Protocol { title: title.unwrap_or_else(|| "protocol".into()), demo_data: demo, exams, file: file.to_string() })
}
