//! Exam protocols: dosimetric quantities of each exam (incident air kerma from the tube model,
//! backscatter factor, entrance surface air kerma and dose, central-axis depth dose by Monte
//! Carlo; region doses of voxel-phantom patients; scatter-to-primary ratio at the detector),
//! compared with stated figures and reference levels, and written as CSV, HDF5 and one
//! self-contained HTML page. See `README.md` beside this file.

pub mod dosimetry;
pub mod format;
pub mod imaging;
pub mod report;
pub mod voxel;

use dosimetry::{surface_and_depth, tube_energy_spectrum, BeamShape, Estimate, SlabPhantom, SurfaceSetup};
use format::{Exam, Patient, Protocol};

use crate::physics::PhysicsOptions;
use crate::source::Field;
use crate::spectrum::{compute_spectrum, BeamQuality, SpectrumOptions, Tube};

/// Reference distance of the tube output (cm).
pub const OUTPUT_DISTANCE_CM: f64 = 100.0;

/// Depths of the central-axis depth dose (cm), cut at the patient thickness.
pub const DEPTHS_CM: [f64; 13] = [0.0, 0.5, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 8.0, 10.0, 12.0, 15.0, 20.0];

/// How hard to run.
#[derive(Debug, Clone, Copy)]
pub struct RunPlan {
    /// Histories of each phantom run (the free-in-air run gets twice as many; it is cheap).
    pub histories: u64,
    /// Seed.
    pub seed: u64,
    /// Threads.
    pub threads: usize,
}

/// How a computed figure compares with a stated one or a reference level.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
pub enum Status {
    /// No stated value.
    NotStated,
    /// Within the tolerance.
    Within,
    /// Beyond the tolerance.
    Beyond,
    /// At or below the reference level.
    BelowReference,
    /// Above the reference level.
    AboveReference,
}

impl Status {
    /// Text for tables.
    pub fn label(self) -> &'static str {
        match self {
            Status::NotStated => "",
            Status::Within => "within tolerance",
            Status::Beyond => "BEYOND TOLERANCE",
            Status::BelowReference => "below reference level",
            Status::AboveReference => "ABOVE REFERENCE LEVEL",
        }
    }
    /// True for a flagged figure.
    pub fn flagged(self) -> bool {
        matches!(self, Status::Beyond | Status::AboveReference)
    }
}

/// One figure of an exam.
#[derive(Debug, Clone, serde::Serialize)]
pub struct Figure {
    /// Key (e.g. "esd_water").
    pub key: String,
    /// Description.
    pub label: String,
    /// Unit.
    pub unit: String,
    /// Computed value with 1σ (Monte Carlo statistics; analytic figures have σ = 0).
    pub computed: Estimate,
    /// Stated value, if any.
    pub stated: Option<f64>,
    /// (computed − stated)/stated in %, with its 1σ.
    pub difference_percent: Option<Estimate>,
    /// Tolerance (%).
    pub tolerance_percent: f64,
    /// Comparison with the stated value.
    pub status: Status,
    /// Reference level, if any.
    pub reference: Option<f64>,
    /// Comparison with the reference level.
    pub reference_status: Status,
}

/// The evaluation of one exam.
#[derive(Debug, Clone, serde::Serialize)]
pub struct ExamResult {
    /// The exam as read.
    pub exam: Exam,
    /// Beam quality of the tube model.
    pub hvl1_mm_al: f64,
    /// Mean energy (keV, fluence weighted).
    pub mean_kev: f64,
    /// Tube output: air kerma per mAs at 1 m (µGy/mAs).
    pub output_ugy_per_mas_1m: f64,
    /// Focus-to-skin distance (cm).
    pub fsd_cm: f64,
    /// Figures (incident air kerma, B, ESAK, ESD water and tissue, μen ratios).
    pub figures: Vec<Figure>,
    /// Depths (cm) and central-axis dose to the patient medium (mGy) and PDD (%).
    pub depths_cm: Vec<f64>,
    /// Depth dose (mGy).
    pub depth_dose_mgy: Vec<Estimate>,
    /// Percentage depth dose.
    pub pdd_percent: Vec<Estimate>,
    /// Medium of the depth dose at each depth.
    pub depth_media: Vec<String>,
    /// Parts of the exam not evaluated by this version, and why.
    pub not_evaluated: Vec<String>,
    /// Histories (free in air, phantom).
    pub histories: (u64, u64),
    /// Histories of the detector run (0 without one).
    pub detector_histories: u64,
    /// Focus-to-detector distance (cm), with a detector.
    pub fdd_cm: Option<f64>,
    /// The deck of the detector run (`dosemill run` on it gives the same images).
    pub detector_deck: Option<String>,
}

impl ExamResult {
    /// The figure with `key`.
    pub fn figure(&self, key: &str) -> Option<&Figure> {
        self.figures.iter().find(|f| f.key == key)
    }
}

/// A protocol evaluation failed.
#[derive(Debug, thiserror::Error)]
pub enum EvalError {
    /// Tube model.
    #[error("exam `{exam}` (line {line}): tube: {message}")]
    Tube {
        /// Exam.
        exam: String,
        /// Line.
        line: usize,
        /// Message.
        message: String,
    },
    /// The patient model named by the exam cannot be used.
    #[error("{file}:{line}: exam `{exam}`: {key}: {message}")]
    Patient {
        /// Protocol file.
        file: String,
        /// Exam.
        exam: String,
        /// Line of the exam.
        line: usize,
        /// Key.
        key: String,
        /// What is wrong and how to fix it.
        message: String,
    },
    /// Monte Carlo part.
    #[error("exam `{exam}` (line {line}): {cause}")]
    Dosimetry {
        /// Exam.
        exam: String,
        /// Line.
        line: usize,
        /// Cause (its text is part of this error's message, so it is not a separate source).
        cause: dosimetry::DosimetryError,
    },
}

/// The tube model of an exam.
pub fn tube_of(e: &Exam) -> Tube {
    let mut t = Tube::new(e.kvp, e.anode);
    t.anode_angle_deg = e.anode_angle_deg;
    t.ripple_percent = e.ripple_percent;
    for (m, mm) in &e.filtration {
        t = t.with_filter(m, *mm);
    }
    t
}

/// Incident air kerma (mGy) from the tube output at 1 m (µGy/mAs), mAs and the inverse square law.
pub fn incident_air_kerma_mgy(output_ugy_per_mas_1m: f64, mas: f64, fsd_cm: f64) -> f64 {
    output_ugy_per_mas_1m * mas * (OUTPUT_DISTANCE_CM / fsd_cm).powi(2) * 1e-3
}

fn compare(key: &str, label: &str, unit: &str, computed: Estimate, stated: Option<f64>, reference: Option<f64>, tol: f64) -> Figure {
    let difference_percent = stated.map(|s| Estimate::new((computed.value / s - 1.0) * 100.0, computed.sigma / s * 100.0));
    let status = match difference_percent {
        None => Status::NotStated,
        Some(d) if d.value.abs() <= tol => Status::Within,
        Some(_) => Status::Beyond,
    };
    let reference_status = match reference {
        None => Status::NotStated,
        Some(r) if computed.value > r => Status::AboveReference,
        Some(_) => Status::BelowReference,
    };
    Figure { key: key.into(), label: label.into(), unit: unit.into(), computed, stated, difference_percent, tolerance_percent: tol, status, reference, reference_status }
}

/// Checks what can be checked before any Monte Carlo run: every voxel deck is readable, valid
/// and a voxel phantom. Errors name the protocol file, the exam and the key.
pub fn check_inputs(p: &Protocol) -> Result<(), EvalError> {
    for e in &p.exams {
        if let Patient::VoxelDeck { resolved, .. } = &e.patient {
            voxel::load_voxel_deck(resolved).map_err(|x| patient_error(&p.file, e, "patient.voxel_deck", x.to_string()))?;
        }
    }
    Ok(())
}

fn patient_error(file: &str, e: &Exam, key: &str, message: String) -> EvalError {
    EvalError::Patient { file: file.to_string(), exam: e.name.clone(), line: e.line, key: key.to_string(), message }
}

/// Entrance figures shared by slab and voxel patients: B, ESAK, ESD water and tissue, μen ratios.
fn entrance_figures(e: &Exam, iak: f64, b: Estimate, esd_per_iak: [Estimate; 2], muen: [Estimate; 2], what: &str, figures: &mut Vec<Figure>) {
    let tol = e.tolerance_percent;
    let iak_e = Estimate::exact(iak);
    let esak = iak_e.product(b);
    let esd_w = iak_e.product(esd_per_iak[0]);
    let esd_t = iak_e.product(esd_per_iak[1]);
    let medium = e.stated.esd_medium.as_deref().unwrap_or("water");
    let (esd_w_stated, esd_t_stated) = if medium == "soft_tissue" { (None, e.stated.esd_mgy) } else { (e.stated.esd_mgy, None) };
    let (esd_w_ref, esd_t_ref) = if medium == "soft_tissue" { (None, e.reference.esd_mgy) } else { (e.reference.esd_mgy, None) };
    figures.push(compare("backscatter_factor", &format!("Backscatter factor B ({what})"), "1", b, None, None, tol));
    figures.push(compare("esak", "Entrance surface air kerma (IAK × B)", "mGy", esak, e.stated.esak_mgy, e.reference.esak_mgy, tol));
    figures.push(compare("esd_water", "Entrance surface dose, water", "mGy", esd_w, esd_w_stated, esd_w_ref, tol));
    figures.push(compare("esd_soft_tissue", "Entrance surface dose, soft tissue", "mGy", esd_t, esd_t_stated, esd_t_ref, tol));
    figures.push(compare("muen_ratio_water_air", "(μen/ρ) water/air over the surface energy-fluence spectrum", "1", muen[0], None, None, tol));
    figures.push(compare("muen_ratio_tissue_air", "(μen/ρ) soft tissue/air over the surface energy-fluence spectrum", "1", muen[1], None, None, tol));
}

/// A region name as a figure key: letters, digits and `_`.
pub fn key_part(name: &str) -> String {
    name.chars().map(|c| if c.is_ascii_alphanumeric() { c.to_ascii_lowercase() } else { '_' }).collect()
}

/// Evaluates one exam of the protocol read from `file` (voxel decks resolve against it).
pub fn evaluate_exam(file: &str, e: &Exam, plan: &RunPlan) -> Result<ExamResult, EvalError> {
    let tube_err = |m: String| EvalError::Tube { exam: e.name.clone(), line: e.line, message: m };
    let dos_err = |cause| EvalError::Dosimetry { exam: e.name.clone(), line: e.line, cause };
    let options = SpectrumOptions { distance_cm: OUTPUT_DISTANCE_CM, ..SpectrumOptions::default() };
    let s = compute_spectrum(&tube_of(e), &options).map_err(|x| tube_err(x.to_string()))?;
    let q = BeamQuality::of(&s).map_err(|x| tube_err(x.to_string()))?;
    let fsd = e.fsd_cm();
    let iak = incident_air_kerma_mgy(q.air_kerma_ugy_per_mas_1m, e.mas, fsd);
    let tol = e.tolerance_percent;
    let mut figures = vec![compare("iak", "Incident air kerma (tube output × mAs × inverse square)", "mGy", Estimate::exact(iak), e.stated.iak_mgy, None, tol)];
    let mut not_evaluated = Vec::new();
    let depths: Vec<f64>;
    let depth_dose: Vec<Estimate>;
    let pdd: Vec<Estimate>;
    let depth_media: Vec<String>;
    let histories: (u64, u64);
    let mut imaging = None;
    let spectrum = tube_energy_spectrum(&s).map_err(dos_err)?;
    let field = Field::Rectangle { width_cm: e.field_cm[0], height_cm: e.field_cm[1] };
    let ds: Vec<f64> = DEPTHS_CM.iter().copied().filter(|d| *d <= e.patient.thickness_cm()).collect();
    match &e.patient {
        Patient::VoxelDeck { resolved, thickness_cm, .. } => {
            let beam = voxel::VoxelBeam {
                spectrum: spectrum.clone(),
                field,
                fsd_cm: fsd,
                disc_radius_cm: disc_radius_cm(e.field_cm),
                depths_cm: DEPTHS_CM.to_vec(),
                histories: plan.histories,
                seed: plan.seed,
                threads: plan.threads,
                detector: e.detector.clone(),
            };
            let r = voxel::evaluate_voxel(resolved, *thickness_cm, &beam).map_err(|x| match x {
                voxel::VoxelPatientError::Dosimetry(d) => dos_err(d),
                voxel::VoxelPatientError::Thickness(m) => patient_error(file, e, "patient.thickness_cm", m),
                other => patient_error(file, e, "patient.voxel_deck", other.to_string()),
            })?;
            entrance_figures(e, iak, r.backscatter_factor, r.surface_dose_per_iak, r.muen_ratio, "voxel phantom, entrance disc on the central axis", &mut figures);
            figures.push(compare("axis_thickness", "Patient thickness on the central axis (voxel phantom)", "cm", Estimate::exact(r.axis_thickness_cm), None, None, tol));
            for (name, mass, d) in &r.regions {
                let k = key_part(name);
                figures.push(compare(&format!("region_dose_{k}"), &format!("Mean dose, region {name} (track length, kerma approximation)"), "mGy", d.scale(iak), None, None, tol));
                figures.push(compare(&format!("region_mass_{k}"), &format!("Mass, region {name}"), "g", Estimate::exact(*mass), None, None, tol));
            }
            if r.regions.is_empty() {
                not_evaluated.push(format!("region doses: the voxel deck `{}` has no named regions (only `[geometry.phantom]` shapes with `region` carry labels)", resolved));
            }
            depths = r.depths_cm.clone();
            depth_dose = r.depth_dose_per_iak.iter().map(|d| d.scale(iak)).collect();
            pdd = r.pdd_percent.clone();
            depth_media = r.depth_media.clone();
            histories = r.histories;
            imaging = r.imaging;
        }
        Patient::Slab { material, thickness_cm, lateral_cm } => {
            let lib = |n: &str| dosemill_xsdata::library::lookup(n).map_err(|x| dos_err(dosimetry::DosimetryError::Material(x.to_string())));
            let phantom = SlabPhantom { material: lib(material)?, thickness_cm: *thickness_cm, lateral_cm: *lateral_cm };
            let setup = SurfaceSetup {
                spectrum: spectrum.clone(),
                beam: BeamShape::Field(field),
                fsd_cm: fsd,
                disc_radius_cm: disc_radius_cm(e.field_cm),
                surface_media: vec![lib("water")?, lib("soft_tissue")?],
                depths_cm: ds,
                free_histories: 2 * plan.histories,
                phantom_histories: plan.histories,
                seed: plan.seed,
                threads: plan.threads,
                physics: PhysicsOptions::default(),
            };
            let r = surface_and_depth(&phantom, &setup).map_err(dos_err)?;
            entrance_figures(e, iak, r.backscatter_factor, [r.surface_dose_per_iak[0], r.surface_dose_per_iak[1]], [r.muen_ratio[0], r.muen_ratio[1]], &format!("{material} slab"), &mut figures);
            depths = r.depths_cm.clone();
            depth_dose = r.depth_dose_per_iak.iter().map(|d| d.scale(iak)).collect();
            pdd = r.pdd_percent.clone();
            depth_media = vec![material.clone(); depths.len()];
            histories = r.histories;
        }
    }
    let mut detector_histories = 0;
    let mut detector_deck = None;
    let mut fdd = None;
    if let Some(d) = &e.detector {
        let r = match imaging {
            Some(r) => r,
            None => imaging::evaluate_detector(e, plan.histories, plan.seed.wrapping_add(2), plan.threads).map_err(dos_err)?,
        };
        let layer = format!("{} mm {}", d.thickness_mm, d.material);
        let with = if d.grid_ratio.is_some() { "with grid" } else { "no grid" };
        fdd = Some(r.fdd_cm);
        figures.push(compare("focus_detector_distance", "Focus–detector distance", "cm", Estimate::exact(r.fdd_cm), None, None, tol));
        figures.push(compare("spr", &format!("Scatter-to-primary ratio, central 5 × 5 cm at the detector ({layer} absorbed signal, {with}; noiseless primary)"), "1", r.spr, e.stated.spr, e.reference.spr, tol));
        figures.push(compare("spr_mc_primary", "SPR with the Monte Carlo primary (check)", "1", r.spr_mc_primary, None, None, tol));
        figures.push(compare("scatter_fraction", "Scatter fraction S/(S+P), central 5 × 5 cm", "1", r.scatter_fraction, None, None, tol));
        figures.push(compare("primary_mc_over_deterministic", "Primary signal, Monte Carlo / ray traced (check, expect 1)", "1", r.primary_mc_over_deterministic, None, None, tol));
        if let Some(g) = &r.grid {
            figures.push(compare("spr_no_grid", "SPR without the grid (same run)", "1", g.spr_no_grid, None, None, tol));
            figures.push(compare("grid_primary_transmission", "Grid primary transmission T_p", "1", g.primary_transmission, None, None, tol));
            figures.push(compare("grid_scatter_transmission", "Grid scatter transmission T_s (σ upper bound)", "1", g.scatter_transmission, None, None, tol));
            figures.push(compare("grid_contrast_improvement_factor", "Grid contrast improvement factor K", "1", g.contrast_improvement_factor, None, None, tol));
        }
        detector_histories = r.histories;
        detector_deck = r.deck;
    }
    Ok(ExamResult {
        exam: e.clone(),
        hvl1_mm_al: q.hvl1_mm_al,
        mean_kev: q.mean_kev_fluence,
        output_ugy_per_mas_1m: q.air_kerma_ugy_per_mas_1m,
        fsd_cm: fsd,
        figures,
        depths_cm: depths,
        depth_dose_mgy: depth_dose,
        pdd_percent: pdd,
        depth_media,
        not_evaluated,
        histories,
        detector_histories,
        fdd_cm: fdd,
        detector_deck,
    })
}

/// Radius of the on-axis scoring discs for a field (cm): a fifth of the shorter side, 0.1–4 cm.
pub fn disc_radius_cm(field_cm: [f64; 2]) -> f64 {
    (0.2 * field_cm[0].min(field_cm[1])).clamp(0.1, 4.0)
}

/// Evaluates every exam of a protocol in file order.
pub fn evaluate(p: &Protocol, plan: &RunPlan) -> Result<Vec<ExamResult>, EvalError> {
    check_inputs(p)?;
    p.exams.iter().enumerate().map(|(i, e)| evaluate_exam(&p.file, e, &RunPlan { seed: plan.seed.wrapping_add(1000 * i as u64), ..*plan })).collect()
}

/// The model's limits, as the report states them.
pub const LIMITS: [&str; 7] = [
    "Kerma approximation: secondary electrons deposit their energy where they are set in motion; doses are collision kerma. Near interfaces and for the first millimetre below the surface this differs from absorbed dose.",
    "Patient model: a homogeneous slab of one library material with flat entrance surface, or the grid of a voxel-phantom deck (beam along +z through the grid centre, skin at the first voxel denser than 0.01 g/cm³ on that axis); in vacuum, no table or couch. Region doses of voxel phantoms are track-length kerma averaged over each labelled region; the phantom's fill region is not reported.",
    "Detector: a flat, non-perturbing plane at the focus–detector distance (patient directly on it unless detector.gap_cm is given), signal = energy absorbed in the named layer (first-interaction approximation); anti-scatter grid as a focused linear lamella model averaged over its period (default 40 lead lamellae per cm, 0.036 mm thick, aluminium interspace; no cover plates). No blur, noise, housing or back-scatter from behind the detector. Behind a voxel phantom the detector face is centred on the beam axis, gap_cm behind the exit surface on that axis.",
    "SPR is the mean scatter signal over the mean noiseless (ray-traced) primary signal in the central 5 × 5 cm of the detector; its σ is from the scatter alone. The scatter-transmission σ ignores the correlation of scatter with and without the grid (upper bound).",
    "Tube output normalisation: incident air kerma is the tube model's air kerma per mAs at 1 m (air path 1 m) scaled by mAs and the inverse square law; air attenuation between 1 m and the skin, heel effect, off-axis variation and the real tube's output calibration are not modelled. Measured output should replace it where available.",
    "Entrance figures are scored on a disc on the central axis (radius a fifth of the shorter field side, at most 4 cm); the backscatter factor is its average over the disc, slightly below the value at the centre point.",
    "Uncertainties are 1σ Monte Carlo statistics only; the analytic figures (incident air kerma) carry no statistical uncertainty, and model uncertainties (spectrum model, interaction data) are not included.",
];

/// Cautions the report states.
pub const CAUTIONS: [&str; 3] = [
    "Research estimate: to be reviewed by a qualified medical physicist before any use; not a substitute for measurement.",
    "Local regulations and licensed practice prevail over any figure in this report.",
    "Stated figures and reference levels are compared as given in the protocol file; their origin is the file author's responsibility.",
];
