//! Dosimetric quantities from Monte Carlo runs of slab phantoms, each with its 1σ uncertainty.
//!
//! Set-up: a point focus at the origin looking along +z, the field defined at the entrance
//! surface of a slab phantom at `fsd_cm` (or a pencil beam along the axis), vacuum around. The
//! scorer is [`PlaneKerma`]: discs on the central axis at a plane just in front of the surface
//! (air, water, tissue kerma, both directions) and at planes inside the phantom (dose to the
//! phantom medium, kerma approximation).
//!
//! Two independent runs (different seeds): "free in air" (same geometry, phantom density set to
//! zero) and "phantom". Then
//! - backscatter factor B = K_air(entrance, phantom) / K_air(free in air),
//! - entrance surface dose to medium m: D_m = K_air,free(analytic) × K_m(entrance, phantom)/K_air,free(MC),
//!   i.e. ESAK × (μen/ρ)_m/air averaged over the energy-fluence spectrum at the surface with the
//!   phantom present (incident and backscattered photons),
//! - depth dose D(z) likewise from the planes inside the phantom.
//! Ratios of the two runs propagate their relative uncertainties in quadrature (independent).
//! Ratios inside one run (μen ratio, percentage depth dose) are quoted with the same formula,
//! which ignores the positive correlation of numerator and denominator: an upper bound.

use std::sync::Arc;

use crate::physics::{xs::MaterialXs, PhysicsOptions};
use crate::score::axial::{PlaneKerma, GY_PER_KEV_PER_G};
use crate::score::Scorer;
use crate::source::{Emission, EnergySpectrum, Field, Source};
use crate::transport::{run, Geometry, Problem, RunSettings};
use dosemill_geometry::{Aabb, Lateral, Layer, SlabStack, Vec3, World};
use dosemill_xsdata::material::Material;

/// Offset of the entrance scoring plane in front of the surface, and of the first depth plane
/// behind it (cm).
pub const SURFACE_GAP_CM: f64 = 1e-4;

/// A value with its 1σ standard uncertainty (same units).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Estimate {
    /// The value.
    pub value: f64,
    /// 1σ standard uncertainty.
    pub sigma: f64,
}

impl Estimate {
    /// A value with an uncertainty.
    pub fn new(value: f64, sigma: f64) -> Self {
        Estimate { value, sigma }
    }
    /// A value taken as exact (analytic; model uncertainty not quantified).
    pub fn exact(value: f64) -> Self {
        Estimate { value, sigma: 0.0 }
    }
    /// Relative uncertainty σ/|value| (infinite for a zero value).
    pub fn relative(&self) -> f64 {
        if self.value == 0.0 { f64::INFINITY } else { self.sigma / self.value.abs() }
    }
    /// The ratio of two independent estimates: relative uncertainties add in quadrature.
    pub fn ratio(self, den: Estimate) -> Estimate {
        let v = self.value / den.value;
        Estimate { value: v, sigma: v.abs() * (self.relative().powi(2) + den.relative().powi(2)).sqrt() }
    }
    /// The product of two independent estimates.
    pub fn product(self, other: Estimate) -> Estimate {
        let v = self.value * other.value;
        let rel = |e: &Estimate| if e.value == 0.0 { 0.0 } else { e.sigma / e.value.abs() };
        Estimate { value: v, sigma: v.abs() * (rel(&self).powi(2) + rel(&other).powi(2)).sqrt() }
    }
    /// Scaled by an exact factor.
    pub fn scale(self, k: f64) -> Estimate {
        Estimate { value: self.value * k, sigma: self.sigma * k.abs() }
    }
}

/// An error setting up or evaluating a dosimetry run.
#[derive(Debug, thiserror::Error)]
pub enum DosimetryError {
    /// Material data missing or invalid.
    #[error("material data: {0}")]
    Material(String),
    /// Geometry rejected.
    #[error("geometry: {0}")]
    Geometry(String),
    /// A set-up value out of range; the message says which and how to fix it.
    #[error("{0}")]
    Invalid(String),
    /// The run scored nothing where it had to (too few histories).
    #[error("{0}")]
    NoScore(String),
}

/// The beam hitting the phantom.
#[derive(Debug, Clone)]
pub enum BeamShape {
    /// Point focus at the origin, field (centred on the axis) defined at the entrance surface.
    Field(Field),
    /// A pencil beam along the axis.
    Pencil,
}

/// A slab phantom: one homogeneous slab.
#[derive(Debug, Clone)]
pub struct SlabPhantom {
    /// Its material (library or user-made).
    pub material: Material,
    /// Thickness along the beam (cm).
    pub thickness_cm: f64,
    /// Lateral size x × y (cm).
    pub lateral_cm: [f64; 2],
}

/// What to score and how long to run.
#[derive(Debug, Clone)]
pub struct SurfaceSetup {
    /// Photon energy distribution.
    pub spectrum: EnergySpectrum,
    /// Beam geometry.
    pub beam: BeamShape,
    /// Focus-to-surface distance (cm).
    pub fsd_cm: f64,
    /// Radius of the on-axis scoring discs (cm).
    pub disc_radius_cm: f64,
    /// Media whose entrance-surface kerma is scored beside air (e.g. water, soft tissue).
    pub surface_media: Vec<Material>,
    /// Depths below the surface for the central-axis depth dose (cm); depth 0 is just inside.
    pub depths_cm: Vec<f64>,
    /// Histories of the free-in-air run.
    pub free_histories: u64,
    /// Histories of the phantom run.
    pub phantom_histories: u64,
    /// Seed of the phantom run; the free-in-air run uses `seed + 1`.
    pub seed: u64,
    /// Worker threads.
    pub threads: usize,
    /// Physics switches.
    pub physics: PhysicsOptions,
}

/// Results of [`surface_and_depth`]. Kerma and dose are per source history (Gy); ratios are pure.
#[derive(Debug, Clone, serde::Serialize)]
pub struct SurfaceResult {
    /// Air kerma free in air at the entrance plane (no phantom), per history (Gy).
    pub free_air_kerma_gy: Estimate,
    /// Air kerma at the entrance plane with the phantom present (incident + backscatter) (Gy).
    pub entrance_air_kerma_gy: Estimate,
    /// Backward (backscattered) part of it (Gy).
    pub backscattered_air_kerma_gy: Estimate,
    /// Backscatter factor B.
    pub backscatter_factor: Estimate,
    /// Names of the surface media.
    pub surface_media: Vec<String>,
    /// Collision kerma of each surface medium at the entrance plane, phantom present (Gy/history).
    pub surface_kerma_gy: Vec<Estimate>,
    /// Surface kerma of each medium per unit free-in-air air kerma (ESD/IAK).
    pub surface_dose_per_iak: Vec<Estimate>,
    /// (μen/ρ)_medium/air averaged over the energy-fluence spectrum at the entrance plane with the
    /// phantom present: K_medium/K_air from the same crossings.
    pub muen_ratio: Vec<Estimate>,
    /// Depths (cm).
    pub depths_cm: Vec<f64>,
    /// Dose to the phantom medium on the axis at each depth per history (Gy).
    pub depth_dose_gy: Vec<Estimate>,
    /// The same per unit free-in-air air kerma at the entrance plane.
    pub depth_dose_per_iak: Vec<Estimate>,
    /// Percentage depth dose, 100·D(z)/D(first depth).
    pub pdd_percent: Vec<Estimate>,
    /// Histories of the (free, phantom) runs.
    pub histories: (u64, u64),
    /// Wall time of both runs (s).
    pub wall_time_s: f64,
}

fn mxs(m: &Material, options: &PhysicsOptions) -> Result<MaterialXs, DosimetryError> {
    MaterialXs::new(m.name(), m.density_g_cm3(), m.composition(), options).map_err(|e| DosimetryError::Material(e.to_string()))
}

/// A problem: point focus (or pencil) at the origin, one slab of `material` at z = `front_cm`
/// with `density_g_cm3` (0 for free in air), vacuum world.
#[allow(clippy::too_many_arguments)]
pub fn slab_problem(
    material: &Material,
    density_g_cm3: f64,
    front_cm: f64,
    thickness_cm: f64,
    lateral_cm: Option<[f64; 2]>,
    emission: Emission,
    spectrum: EnergySpectrum,
    scorers: Vec<Scorer>,
    physics: &PhysicsOptions,
) -> Result<Problem, DosimetryError> {
    let table = mxs(material, physics)?;
    let lateral = match lateral_cm {
        None => Lateral::Infinite,
        Some([w, h]) => Lateral::Box { half_x_cm: 0.5 * w, half_y_cm: 0.5 * h },
    };
    let back = front_cm + thickness_cm;
    let bounds = Aabb::new(Vec3::new(-1000.0, -1000.0, -1.0), Vec3::new(1000.0, 1000.0, back + 200.0));
    let stack = SlabStack::new(front_cm, vec![Layer { material: 0, density_g_cm3, thickness_cm }], lateral, World { medium: None, bounds })
        .map_err(|e| DosimetryError::Geometry(e.to_string()))?;
    Ok(Problem { materials: vec![table], geometry: Geometry::Slabs(stack), source: Source::new(emission, spectrum), options: *physics, scorers })
}

/// The emission of a beam shape at focus-to-surface distance `fsd_cm`.
pub fn emission_of(beam: &BeamShape, fsd_cm: f64) -> Emission {
    let z = Vec3::new(0.0, 0.0, 1.0);
    match beam {
        BeamShape::Pencil => Emission::Pencil { origin_cm: Vec3::new(0.0, 0.0, 0.0), direction: z },
        BeamShape::Field(f) => Emission::Point { origin_cm: Vec3::new(0.0, 0.0, 0.0), direction: z, field: *f, field_distance_cm: fsd_cm, focal_spot_cm: [0.0, 0.0] },
    }
}

pub(super) fn settings(histories: u64, seed: u64, threads: usize) -> RunSettings {
    RunSettings { histories, seed, chunk_histories: (histories / 64).clamp(1000, 100_000), threads: threads.max(1), progress: false }
}

/// Mean and σ of every bin of scorer `scorer` (a [`PlaneKerma`]) converted to Gy.
pub(super) fn plane_kerma_gy(res: &crate::transport::RunResult, scorer: usize) -> Vec<Estimate> {
    let (m, s) = res.scorers[scorer].tally().mean_and_sigma(res.histories);
    m.iter().zip(&s).map(|(m, s)| Estimate::new(m * GY_PER_KEV_PER_G, s * GY_PER_KEV_PER_G)).collect()
}

/// Percentage depth dose: each depth's dose over the first one (NaN when that is not positive).
pub(super) fn percentage_depth_dose(depth: &[Estimate]) -> Vec<Estimate> {
    match depth.first() {
        Some(d0) if d0.value > 0.0 => depth.iter().map(|d| d.ratio(*d0).scale(100.0)).collect(),
        _ => vec![Estimate::new(f64::NAN, f64::NAN); depth.len()],
    }
}

/// Runs the free-in-air and phantom runs and derives B, surface doses and depth doses.
pub fn surface_and_depth(phantom: &SlabPhantom, setup: &SurfaceSetup) -> Result<SurfaceResult, DosimetryError> {
    if !(setup.fsd_cm > 0.0 && setup.disc_radius_cm > 0.0) {
        return Err(DosimetryError::Invalid(format!("focus-to-surface distance {} cm and disc radius {} cm must be positive", setup.fsd_cm, setup.disc_radius_cm)));
    }
    if !(phantom.thickness_cm > 0.0) {
        return Err(DosimetryError::Invalid(format!("phantom thickness {} cm must be positive", phantom.thickness_cm)));
    }
    let air = dosemill_xsdata::library::lookup("air").map_err(|e| DosimetryError::Material(e.to_string()))?;
    let mut media = vec![Arc::new(air)];
    media.extend(setup.surface_media.iter().cloned().map(Arc::new));
    media.push(Arc::new(phantom.material.clone()));
    let n_surface = setup.surface_media.len();
    let phantom_medium = media.len() - 1;
    let front = setup.fsd_cm;
    let mut planes = vec![front - SURFACE_GAP_CM];
    for &d in &setup.depths_cm {
        if !(0.0..=phantom.thickness_cm).contains(&d) {
            return Err(DosimetryError::Invalid(format!("depth {d} cm lies outside the phantom (0–{} cm)", phantom.thickness_cm)));
        }
        planes.push(front + d.clamp(SURFACE_GAP_CM, phantom.thickness_cm - SURFACE_GAP_CM));
    }
    let scorer = PlaneKerma::new([0.0, 0.0], setup.disc_radius_cm, planes, media.clone()).map_err(|e| DosimetryError::Material(e.to_string()))?;
    let emission = emission_of(&setup.beam, setup.fsd_cm);
    let lateral = Some(phantom.lateral_cm);
    let make = |rho: f64| {
        slab_problem(&phantom.material, rho, front, phantom.thickness_cm, lateral, emission, setup.spectrum.clone(), vec![Scorer::PlaneKerma(scorer.clone())], &setup.physics)
    };
    let free_problem = make(0.0)?;
    let phantom_problem = make(phantom.material.density_g_cm3())?;
    let free = run(&free_problem, &settings(setup.free_histories, setup.seed.wrapping_add(1), setup.threads));
    let full = run(&phantom_problem, &settings(setup.phantom_histories, setup.seed, setup.threads));
    let idx = |plane: usize, medium: usize, dir: usize| (plane * media.len() + medium) * crate::score::axial::DIRECTIONS + dir;
    let (free_k, full_k) = (plane_kerma_gy(&free, 0), plane_kerma_gy(&full, 0));

    let k_free = free_k[idx(0, 0, 0)];
    if !(k_free.value > 0.0) {
        return Err(DosimetryError::NoScore(format!("no photon crossed the {} cm scoring disc free in air; raise the histories", setup.disc_radius_cm)));
    }
    let k_entr = full_k[idx(0, 0, 0)];
    let k_back = full_k[idx(0, 0, 2)];
    let b = k_entr.ratio(k_free);
    let mut surface_kerma = Vec::new();
    let mut per_iak = Vec::new();
    let mut ratio = Vec::new();
    for m in 0..n_surface {
        let k = full_k[idx(0, 1 + m, 0)];
        surface_kerma.push(k);
        per_iak.push(k.ratio(k_free));
        ratio.push(k.ratio(k_entr));
    }
    let mut depth = Vec::new();
    let mut depth_iak = Vec::new();
    for i in 0..setup.depths_cm.len() {
        let d = full_k[idx(1 + i, phantom_medium, 0)];
        depth.push(d);
        depth_iak.push(d.ratio(k_free));
    }
    let pdd = percentage_depth_dose(&depth);
    Ok(SurfaceResult {
        free_air_kerma_gy: k_free,
        entrance_air_kerma_gy: k_entr,
        backscattered_air_kerma_gy: k_back,
        backscatter_factor: b,
        surface_media: setup.surface_media.iter().map(|m| m.name().to_string()).collect(),
        surface_kerma_gy: surface_kerma,
        surface_dose_per_iak: per_iak,
        muen_ratio: ratio,
        depths_cm: setup.depths_cm.clone(),
        depth_dose_gy: depth,
        depth_dose_per_iak: depth_iak,
        pdd_percent: pdd,
        histories: (free.histories, full.histories),
        wall_time_s: free.wall_time_s + full.wall_time_s,
    })
}

/// A simulated narrow-beam HVL measurement.
#[derive(Debug, Clone, serde::Serialize)]
pub struct HvlMeasurement {
    /// Absorber thicknesses (mm), the first 0 (open beam).
    pub thicknesses_mm: Vec<f64>,
    /// Air kerma behind each absorber per history (Gy).
    pub kerma_gy: Vec<Estimate>,
    /// Transmission K(t)/K(0).
    pub transmission: Vec<Estimate>,
    /// First HVL (mm), log-linear interpolation between the two thicknesses bracketing 1/2.
    pub hvl_mm: Estimate,
}

/// Distance from the absorber's back face to the scoring disc in the HVL set-up (cm).
pub const HVL_DISC_DISTANCE_CM: f64 = 100.0;
/// Radius of the scoring disc in the HVL set-up (cm): it subtends 2.5e-5 sr at 100 cm, so
/// scattered photons reaching it are negligible (narrow-beam geometry).
pub const HVL_DISC_RADIUS_CM: f64 = 0.5;

/// Measures the first HVL of `spectrum` in `absorber`: a pencil beam through slabs of the
/// given thicknesses (mm, ascending, positive; the open beam is added), air kerma on a small
/// disc 100 cm behind; one independent run (seed + index) per thickness.
pub fn measure_hvl(
    spectrum: &EnergySpectrum,
    absorber: &Material,
    thicknesses_mm: &[f64],
    histories: u64,
    seed: u64,
    threads: usize,
    physics: &PhysicsOptions,
) -> Result<HvlMeasurement, DosimetryError> {
    if thicknesses_mm.is_empty() || thicknesses_mm.windows(2).any(|w| w[1] <= w[0]) || thicknesses_mm[0] <= 0.0 {
        return Err(DosimetryError::Invalid("absorber thicknesses must be positive and ascending".into()));
    }
    let tmax_cm = thicknesses_mm.last().unwrap() / 10.0;
    let front = 10.0;
    let disc_z = front + tmax_cm + HVL_DISC_DISTANCE_CM;
    let air = Arc::new(dosemill_xsdata::library::lookup("air").map_err(|e| DosimetryError::Material(e.to_string()))?);
    let scorer = PlaneKerma::new([0.0, 0.0], HVL_DISC_RADIUS_CM, vec![disc_z], vec![air]).map_err(|e| DosimetryError::Material(e.to_string()))?;
    let emission = emission_of(&BeamShape::Pencil, front);
    let mut all = vec![0.0];
    all.extend_from_slice(thicknesses_mm);
    let mut kerma = Vec::new();
    for (i, &t) in all.iter().enumerate() {
        let (rho, thick) = if t == 0.0 { (0.0, tmax_cm) } else { (absorber.density_g_cm3(), t / 10.0) };
        let p = slab_problem(absorber, rho, front, thick, None, emission, spectrum.clone(), vec![Scorer::PlaneKerma(scorer.clone())], physics)?;
        let r = run(&p, &settings(histories, seed.wrapping_add(i as u64), threads));
        kerma.push(plane_kerma_gy(&r, 0)[0]);
    }
    let k0 = kerma[0];
    let transmission: Vec<Estimate> = kerma.iter().map(|k| k.ratio(k0)).collect();
    // Bracket: T(t_i) ≥ 1/2 > T(t_{i+1}).
    let i = (0..all.len() - 1)
        .find(|&i| transmission[i].value >= 0.5 && transmission[i + 1].value < 0.5)
        .ok_or_else(|| DosimetryError::Invalid(format!("the thicknesses {:?} mm do not bracket the half-value layer (transmissions {:?})", thicknesses_mm, transmission.iter().map(|t| t.value).collect::<Vec<_>>())))?;
    let (a, b, h) = (kerma[i].value.ln() - k0.value.ln(), kerma[i + 1].value.ln() - k0.value.ln(), 0.5f64.ln());
    let dt = all[i + 1] - all[i];
    let hvl = all[i] + dt * (a - h) / (a - b);
    // Partial derivatives w.r.t. ln K_i, ln K_{i+1}, ln K_0 (independent runs).
    let d_a = dt * (h - b) / (a - b).powi(2);
    let d_b = dt * (a - h) / (a - b).powi(2);
    let d_0 = if i == 0 { 0.0 } else { -dt / (a - b) };
    let s_a = kerma[i].relative();
    let s_b = kerma[i + 1].relative();
    let s_0 = k0.relative();
    // With i = 0, K_i is K_0 itself: a = 0 exactly and only ln K_0 via b enters.
    let var = if i == 0 { (d_b * (s_b * s_b + s_0 * s_0).sqrt()).powi(2) } else { (d_a * s_a).powi(2) + (d_b * s_b).powi(2) + (d_0 * s_0).powi(2) };
    Ok(HvlMeasurement { thicknesses_mm: all, kerma_gy: kerma, transmission, hvl_mm: Estimate::new(hvl, var.sqrt()) })
}

/// Solid angle (sr) of a rectangle `w × h` centred on the axis at distance `d` from a point.
pub fn rectangle_solid_angle_sr(w_cm: f64, h_cm: f64, d_cm: f64) -> f64 {
    4.0 * ((w_cm * h_cm) / ((w_cm * w_cm + 4.0 * d_cm * d_cm) * (h_cm * h_cm + 4.0 * d_cm * d_cm)).sqrt()).asin()
}

/// Solid angle (sr) of a field at distance `d_cm` from a point focus.
pub fn field_solid_angle_sr(field: &Field, d_cm: f64) -> f64 {
    match *field {
        Field::Rectangle { width_cm, height_cm } => rectangle_solid_angle_sr(width_cm, height_cm, d_cm),
        Field::Circle { radius_cm } => std::f64::consts::TAU * (1.0 - d_cm / (d_cm * d_cm + radius_cm * radius_cm).sqrt()),
    }
}

/// The sampling spectrum of a tube spectrum (continuum bins and lines).
pub fn tube_energy_spectrum(s: &crate::spectrum::Spectrum) -> Result<EnergySpectrum, DosimetryError> {
    let t = s.to_sampling_table();
    let table = crate::source::AliasTable::new(&t.weights).ok_or_else(|| DosimetryError::Invalid("the filtered tube spectrum is empty".into()))?;
    Ok(EnergySpectrum::Ranges { lo_kev: t.lo_kev, hi_kev: t.hi_kev, table })
}

/// Photons per mAs that a point focus sends into `field` at `d_cm`, from the tube spectrum's
/// on-axis fluence at its distance (photons/mm²/mAs) and the solid angle of the field. Used to turn
/// per-history scores of a field run into per-mAs values.
pub fn photons_per_mas_into_field(s: &crate::spectrum::Spectrum, field: &Field, d_cm: f64) -> f64 {
    let per_sr = s.total_fluence_per_mm2_per_mas() * 100.0 * s.distance_cm * s.distance_cm;
    per_sr * field_solid_angle_sr(field, d_cm)
}
