//! The scatter-to-primary ratio at an exam's detector.
//!
//! The exam is written as an ordinary deck (see [`detector_deck`]) and run through the deck
//! set-up and the detector scorer, so the same figures come from `dosemill run` on that deck
//! (the report stores its text). Geometry, in vacuum:
//! - point focus on the z axis at z = −FSD, collimated to the exam's field at the skin (z = 0);
//! - the patient slab from z = 0 to z = thickness, lateral size as in the protocol;
//! - the detector face at z = thickness + gap (gap from `detector.gap_cm`, default 0: the
//!   patient lies on the detector; a zero gap is placed [`FACE_OFFSET_CM`] behind the exit
//!   surface so that photons leaving the surface cross the face), so FDD = FSD + thickness + gap;
//! - response "absorbed" in the named layer; with `grid_ratio` a focused linear grid
//!   (lead lamellae, [`GRID_STRIPS_PER_CM`] per cm, [`GRID_STRIP_WIDTH_MM`] mm thick, aluminium
//!   interspace unless the protocol says otherwise, focused at the focus–detector distance);
//! - pixels of [`PIXEL_PITCH_CM`], face the field projected to the detector plus 2 cm a side,
//!   rounded up to an odd number of pixels so that the central 5 × 5 cm ROI is exactly 5 × 5
//!   pixels;
//! - analog scoring (the forced-detection estimator is less efficient on this kind of problem,
//!   `score/DETECTOR.md`), SPR as ROI scatter over the noiseless (ray-traced) primary.

use super::format::{Exam, Patient, GRID_INTERSPACE, GRID_STRIPS_PER_CM, GRID_STRIP_WIDTH_MM};
use super::dosimetry::{DosimetryError, Estimate};
use crate::score::detector::{summary, DetectorScorer};
use crate::score::Scorer;
use crate::transport::{run, RunSettings};
use dosemill_geometry::Vec3;

/// Pixel pitch of the protocol detector (cm).
pub const PIXEL_PITCH_CM: f64 = 1.0;
/// Distance of the detector face behind the exit surface when the gap is 0 (cm).
pub const FACE_OFFSET_CM: f64 = 1e-3;
/// Margin of the detector face around the projected field, each side (cm).
pub const FACE_MARGIN_CM: f64 = 2.0;

/// Figures of a detector run (per source history; ratios pure).
#[derive(Debug, Clone, serde::Serialize)]
pub struct ImagingResult {
    /// Focus-to-detector distance (cm).
    pub fdd_cm: f64,
    /// SPR in the central ROI: scatter (with grid) over the noiseless primary (with grid).
    pub spr: Estimate,
    /// SPR with the Monte Carlo primary (check; noisier behind thick patients).
    pub spr_mc_primary: Estimate,
    /// Scatter fraction S/(S+P) in the ROI (noiseless primary).
    pub scatter_fraction: Estimate,
    /// MC primary over the noiseless primary in the ROI (should be 1 within statistics).
    pub primary_mc_over_deterministic: Estimate,
    /// With a grid: SPR without it (same run), grid primary and scatter transmission and the
    /// contrast improvement factor.
    pub grid: Option<GridFigures>,
    /// Histories run.
    pub histories: u64,
    /// The deck that reproduces the run with `dosemill run` (slab patients).
    pub deck: Option<String>,
}

/// Anti-scatter grid figures.
#[derive(Debug, Clone, serde::Serialize)]
pub struct GridFigures {
    /// SPR without the grid (scatter before the grid over the noiseless primary without it).
    pub spr_no_grid: Estimate,
    /// Primary transmission T_p (noiseless primary with / without grid).
    pub primary_transmission: Estimate,
    /// Scatter transmission T_s (ROI scatter with / without grid; σ ignores their positive
    /// correlation: an upper bound).
    pub scatter_transmission: Estimate,
    /// Contrast improvement factor K = T_p / T_t, T_t = (T_p P + T_s S)/(P + S).
    pub contrast_improvement_factor: Estimate,
}

fn num(v: f64) -> String {
    // Shortest text that reads back to the same f64.
    format!("{v:?}")
}

/// Side of the detector face (cm) for a field side at the skin: projected, plus margins,
/// rounded up to an odd number of pixels.
pub fn face_side_cm(field_side_cm: f64, fsd_cm: f64, fdd_cm: f64) -> f64 {
    let want = field_side_cm * fdd_cm / fsd_cm + 2.0 * FACE_MARGIN_CM;
    let mut n = (want / PIXEL_PITCH_CM).ceil() as u64;
    if n % 2 == 0 {
        n += 1;
    }
    n as f64 * PIXEL_PITCH_CM
}

/// The deck of an exam's detector run (slab patients; voxel patients score the detector in
/// their phantom run, see `voxel`).
pub fn detector_deck(e: &Exam, histories: u64, seed: u64) -> Result<String, DosimetryError> {
    let Patient::Slab { material, thickness_cm, lateral_cm } = &e.patient else {
        return Err(DosimetryError::Invalid("the detector run needs a slab patient".into()));
    };
    let d = e.detector.as_ref().ok_or_else(|| DosimetryError::Invalid("the exam has no detector".into()))?;
    let fsd = e.fsd_cm();
    let fdd = e.fdd_cm();
    let gap = d.gap();
    // Rounded to 1e-6 cm so that the deck text reads back to the same position.
    let face_z = ((thickness_cm + if gap > 0.0 { gap } else { FACE_OFFSET_CM }) * 1e6).round() / 1e6;
    let anode = match e.anode {
        crate::spectrum::Anode::W => "W",
        crate::spectrum::Anode::Mo => "Mo",
        crate::spectrum::Anode::Rh => "Rh",
    };
    let filters: Vec<String> = e.filtration.iter().map(|(m, t)| format!("{{ material = \"{m}\", thickness_mm = {} }}", num(*t))).collect();
    let chunk = (histories / 64).clamp(1000, 100_000);
    let grid = match d.grid_ratio {
        None => String::new(),
        Some(ratio) => format!(
            "anti_scatter_grid = {{ ratio = {}, strips_per_cm = {}, strip_width_cm = {}, strip_material = \"Pb\", interspace_material = \"{}\", focus_distance_cm = {} }}\n",
            num(ratio),
            num(d.grid_strips_per_cm.unwrap_or(GRID_STRIPS_PER_CM)),
            num(d.grid_strip_width_mm.unwrap_or(GRID_STRIP_WIDTH_MM) / 10.0),
            d.grid_interspace.as_deref().unwrap_or(GRID_INTERSPACE),
            num(fdd)
        ),
    };
    let (su, sv) = (face_side_cm(e.field_cm[0], fsd, fdd), face_side_cm(e.field_cm[1], fsd, fdd));
    Ok(format!(
        r#"# Detector run of protocol exam "{name}" (generated by dosemill protocol).
# Focus–skin {fsd} cm, focus–detector {fdd} cm, patient {thickness} cm of {material}, vacuum.
[run]
histories = {histories}
seed = {seed}
histories_per_chunk = {chunk}

[source]
kind = "point"
position_cm = [0, 0, {src}]
direction = [0, 0, 1]
field = {{ shape = "rectangle", width_cm = {fw}, height_cm = {fh} }}
field_distance_cm = {fsd}

[source.tube]
kvp = {kvp}
anode = "{anode}"
anode_angle_deg = {angle}
ripple_percent = {ripple}
filters = [{filters}]

[geometry]
kind = "slabs"
world = "vacuum"
start_z_cm = 0
lateral_size_cm = [{lw}, {lh}]

[[geometry.layer]]
name = "patient"
material = "{material}"
thickness_cm = {thickness}

[[score]]
name = "detector"
kind = "detector"
position_cm = [0, 0, {face_z}]
normal_axis = "z"
size_cm = [{su}, {sv}]
pixel_pitch_cm = {pitch}
response = "absorbed"
layer = {{ material = "{layer}", thickness_cm = {layer_t} }}
{grid}forced_detection = false
"#,
        name = e.name.replace(['"', '\n'], " "),
        fsd = num(fsd),
        fdd = num(fdd),
        thickness = num(*thickness_cm),
        src = num(-fsd),
        fw = num(e.field_cm[0]),
        fh = num(e.field_cm[1]),
        kvp = num(e.kvp),
        angle = num(e.anode_angle_deg),
        ripple = num(e.ripple_percent),
        filters = filters.join(", "),
        lw = num(lateral_cm[0]),
        lh = num(lateral_cm[1]),
        face_z = num(face_z),
        su = num(su),
        sv = num(sv),
        pitch = num(PIXEL_PITCH_CM),
        layer = d.material,
        layer_t = num(d.thickness_mm / 10.0),
    ))
}

/// Runs the detector deck of an exam and derives SPR, scatter fraction and grid figures.
pub fn evaluate_detector(e: &Exam, histories: u64, seed: u64, threads: usize) -> Result<ImagingResult, DosimetryError> {
    let text = detector_deck(e, histories, seed)?;
    let deck = crate::deck::load_str(&text, std::path::Path::new("protocol_detector.toml")).map_err(|errs| {
        DosimetryError::Invalid(format!("detector deck: {}", errs.iter().map(|x| x.to_string()).collect::<Vec<_>>().join("; ")))
    })?;
    let (problem, _) = crate::setup::build(&deck.resolved).map_err(|x| DosimetryError::Invalid(format!("detector deck: {x}")))?;
    let settings = RunSettings { histories, seed, chunk_histories: deck.resolved.run.histories_per_chunk, threads: threads.max(1), progress: false };
    let r = run(&problem, &settings);
    let Some(Scorer::Detector(det)) = r.scorers.first() else {
        return Err(DosimetryError::Invalid("detector deck has no detector score".into()));
    };
    let det: &DetectorScorer = det;
    let mut out = summarise(det, r.histories, e.fdd_cm())?;
    out.deck = Some(text);
    Ok(out)
}

/// SPR, scatter fraction and grid figures of a finished detector run.
pub fn summarise(det: &DetectorScorer, histories: u64, fdd_cm: f64) -> Result<ImagingResult, DosimetryError> {
    let s = det.summary(histories);
    let (pd, pd_ng) = det.setup.primary_deterministic_roi.ok_or_else(|| DosimetryError::NoScore("no deterministic primary (pencil beam?)".into()))?;
    if !(pd > 0.0) {
        return Err(DosimetryError::NoScore("no primary reaches the detector ROI; check the field and distances".into()));
    }
    let sc = Estimate::new(s.mean[summary::ROI_SCATTER], s.sigma[summary::ROI_SCATTER]);
    if !(sc.value > 0.0) {
        return Err(DosimetryError::NoScore("no scattered photon reached the detector ROI; raise the histories".into()));
    }
    // Divided, not scaled by 1/pd: the correctly rounded quotient, as the other ratios here.
    let spr = Estimate::new(sc.value / pd, sc.sigma / pd);
    let spr_mc = Estimate::new(s.spr_roi.0, s.spr_roi.1);
    let t = sc.value + pd;
    let sf = Estimate::new(sc.value / t, pd * sc.sigma / (t * t));
    let pmc = Estimate::new(s.mean[summary::ROI_PRIMARY] / pd, s.sigma[summary::ROI_PRIMARY] / pd);
    let grid = det.setup.spec.grid.as_ref().map(|_| {
        let sng = Estimate::new(s.mean[summary::ROI_SCATTER_NO_GRID], s.sigma[summary::ROI_SCATTER_NO_GRID]);
        let tp = pd / pd_ng;
        let ts = sc.ratio(sng);
        // K = T_p (P + S)/(T_p P + T_s S) with P = pd_ng, S = sng; σ from T_s alone (first order).
        let (p0, s0) = (pd_ng, sng.value);
        let k = tp * (p0 + s0) / (tp * p0 + ts.value * s0);
        let dk = k * s0 * ts.sigma / (tp * p0 + ts.value * s0);
        GridFigures { spr_no_grid: Estimate::new(sng.value / pd_ng, sng.sigma / pd_ng), primary_transmission: Estimate::exact(tp), scatter_transmission: ts, contrast_improvement_factor: Estimate::new(k, dk) }
    });
    Ok(ImagingResult { fdd_cm, spr, spr_mc_primary: spr_mc, scatter_fraction: sf, primary_mc_over_deterministic: pmc, grid, histories, deck: None })
}

/// A protocol detector (absorbed signal in the named layer, optional focused grid) with its face
/// centred at `center_cm`, normal to z, for a field of `field_cm` at `fsd_cm`, in a problem's
/// geometry (the plane must lie inside its world).
#[allow(clippy::too_many_arguments)]
pub fn detector_scorer(
    d: &super::format::Detector,
    center_cm: Vec3,
    field_cm: [f64; 2],
    fsd_cm: f64,
    fdd_cm: f64,
    geometry: &crate::transport::Geometry,
    materials: &[crate::physics::xs::MaterialXs],
    source: &crate::source::Source,
    options: &crate::physics::PhysicsOptions,
) -> Result<DetectorScorer, DosimetryError> {
    use crate::score::detector::{DetectorSpec, LayerResponse, Response};
    let lib = |n: &str| dosemill_xsdata::library::lookup(n).map_err(|e| DosimetryError::Material(e.to_string()));
    let table = |n: &str| -> Result<crate::physics::xs::MaterialXs, DosimetryError> {
        let m = lib(n)?;
        crate::physics::xs::MaterialXs::new(m.name(), m.density_g_cm3(), m.composition(), options).map_err(|e| DosimetryError::Material(e.to_string()))
    };
    let layer = LayerResponse::new(&lib(&d.material)?, d.thickness_mm / 10.0, options, source.spectrum.max_kev()).map_err(|e| DosimetryError::Invalid(format!("detector layer: {e}")))?;
    let size = [face_side_cm(field_cm[0], fsd_cm, fdd_cm), face_side_cm(field_cm[1], fsd_cm, fdd_cm)];
    let pixels = [(size[0] / PIXEL_PITCH_CM).round() as usize, (size[1] / PIXEL_PITCH_CM).round() as usize];
    let mut spec = DetectorSpec::new(center_cm, 2, size, pixels, Response::Absorbed(layer));
    if let Some(ratio) = d.grid_ratio {
        let g = crate::score::grid::GridModel::new(
            ratio,
            d.grid_strips_per_cm.unwrap_or(GRID_STRIPS_PER_CM),
            d.grid_strip_width_mm.unwrap_or(GRID_STRIP_WIDTH_MM) / 10.0,
            Some(fdd_cm),
            table("Pb")?,
            table(d.grid_interspace.as_deref().unwrap_or(GRID_INTERSPACE))?,
        )
        .map_err(|e| DosimetryError::Invalid(format!("anti-scatter grid: {e}")))?;
        spec.grid = Some(g);
    }
    DetectorScorer::new(spec, geometry, materials, source, options).map_err(|e| DosimetryError::Invalid(format!("detector: {e}")))
}
