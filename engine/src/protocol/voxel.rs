//! Voxel-phantom patients: the exam's beam on the grid of a voxel deck.
//!
//! From the deck only the geometry is used (grid, materials, region labels, physics switches of
//! `[run]`); its source, scores and world medium are replaced:
//! - beam axis: +z through the centre of the grid in x and y (the deck's own source is ignored);
//! - skin: the front face of the first voxel on that axis denser than [`TISSUE_MIN_DENSITY`]
//!   (air-filled voxels before it count as air in front of the patient); the axis thickness is
//!   from there to the back face of the last such voxel;
//! - focus at FSD in front of the skin, field (rectangle) at the skin, tube spectrum of the exam;
//! - outside the grid: vacuum (as for slab patients), whatever the deck's `world` says.
//!
//! Runs (different seeds): "free in air" — the same beam with no phantom (vacuum), air kerma on
//! the entrance disc, twice the histories — and "phantom": air, water and soft-tissue kerma on
//! the entrance disc (incident + backscatter), kerma of the local voxel medium on discs at the
//! central-axis depths, and the track-length dose in every labelled region. All figures are
//! per history, turned into exam figures by IAK / K_air(free). A detector, if the exam has one,
//! is scored in the phantom run: face normal to z on the beam axis, `gap_cm` (default: just)
//! behind the phantom's exit surface on the axis, so FDD = FSD + axis thickness + gap.

use std::sync::Arc;

use super::dosimetry::{emission_of, percentage_depth_dose, plane_kerma_gy, settings, slab_problem, BeamShape, DosimetryError, Estimate, SURFACE_GAP_CM};
use crate::deck;
use crate::physics::PhysicsOptions;
use crate::score::axial::{PlaneKerma, DIRECTIONS};
use crate::score::voxel_dose::{DoseEstimator, VoxelDose};
use crate::score::{Scorer, JOULE_PER_KEV};
use crate::source::{EnergySpectrum, Field, Source};
use crate::transport::{run, Geometry, Problem};
use dosemill_geometry::Vec3;

/// Voxels less dense than this (g/cm³) are air in front of or behind the patient.
pub const TISSUE_MIN_DENSITY: f64 = 0.01;

/// A voxel-deck problem could not be set up; the message says what and how to fix it.
#[derive(Debug, thiserror::Error)]
pub enum VoxelPatientError {
    /// The deck cannot be read or is invalid.
    #[error("{0}")]
    Deck(String),
    /// The deck is not a voxel phantom.
    #[error("{0}")]
    NotVoxels(String),
    /// The thickness in the protocol disagrees with the phantom.
    #[error("{0}")]
    Thickness(String),
    /// Monte Carlo part.
    #[error(transparent)]
    Dosimetry(#[from] DosimetryError),
}

/// The beam of an exam on a voxel patient.
#[derive(Debug, Clone)]
pub struct VoxelBeam {
    /// Photon energies (the exam's tube).
    pub spectrum: EnergySpectrum,
    /// Field at the skin.
    pub field: Field,
    /// Focus-to-skin distance (cm).
    pub fsd_cm: f64,
    /// Radius of the on-axis scoring discs (cm).
    pub disc_radius_cm: f64,
    /// Depths (cm below the skin) for the central-axis dose; those beyond the axis thickness are dropped.
    pub depths_cm: Vec<f64>,
    /// Histories of the phantom run (the free-in-air run gets twice as many).
    pub histories: u64,
    /// Seed of the phantom run; free in air uses seed + 1.
    pub seed: u64,
    /// Threads.
    pub threads: usize,
    /// Detector behind the patient, scored in the phantom run (face normal to z, centred on the
    /// beam axis, `gap_cm` behind the phantom's exit surface on the axis).
    pub detector: Option<super::format::Detector>,
}

/// Figures of a voxel patient, per source history (Gy) or per unit free-in-air air kerma.
#[derive(Debug, Clone, serde::Serialize)]
pub struct VoxelResult {
    /// Path of the deck.
    pub deck: String,
    /// Skin position on the axis (z, cm) and the axis thickness (cm).
    pub skin_z_cm: f64,
    /// Patient thickness along the central axis (cm).
    pub axis_thickness_cm: f64,
    /// Free-in-air air kerma at the entrance disc (Gy/history).
    pub free_air_kerma_gy: Estimate,
    /// Backscatter factor at the entrance disc.
    pub backscatter_factor: Estimate,
    /// Water and soft-tissue kerma at the entrance disc per unit free-in-air air kerma.
    pub surface_dose_per_iak: [Estimate; 2],
    /// (μen/ρ) water/air and tissue/air over the entrance spectrum.
    pub muen_ratio: [Estimate; 2],
    /// Depths (cm), local medium name, dose per unit free-in-air air kerma, PDD (%).
    pub depths_cm: Vec<f64>,
    /// Medium at each depth.
    pub depth_media: Vec<String>,
    /// Dose at each depth per unit free-in-air air kerma.
    pub depth_dose_per_iak: Vec<Estimate>,
    /// Percentage depth dose.
    pub pdd_percent: Vec<Estimate>,
    /// Regions: (name, mass g, mean dose per unit free-in-air air kerma).
    pub regions: Vec<(String, f64, Estimate)>,
    /// Histories (free, phantom).
    pub histories: (u64, u64),
    /// Detector figures, with a detector.
    pub imaging: Option<super::imaging::ImagingResult>,
}

fn deck_error(path: &str, errs: &[deck::DeckError]) -> VoxelPatientError {
    let list: Vec<String> = errs.iter().take(5).map(|e| e.to_string()).collect();
    VoxelPatientError::Deck(format!("the voxel deck `{path}` cannot be used: {}; fix the deck or the path (relative to the protocol file)", list.join("; ")))
}

/// Loads and checks a voxel deck (readable, valid, voxel geometry).
pub fn load_voxel_deck(path: &str) -> Result<deck::ResolvedDeck, VoxelPatientError> {
    let p = std::path::Path::new(path);
    if !p.is_file() {
        return Err(VoxelPatientError::Deck(format!("no deck file at `{path}`; give the path of a deck with `[geometry] kind = \"voxels\"`, relative to the protocol file")));
    }
    let d = deck::load(p).map_err(|e| deck_error(path, &e))?;
    if !matches!(d.resolved.geometry, deck::Geometry::Voxels(_)) {
        return Err(VoxelPatientError::NotVoxels(format!(
            "the deck `{path}` has slab geometry, not voxels; give a deck with `[geometry] kind = \"voxels\"`, or describe the patient as a slab: patient = {{ material = \"water\", thickness_cm = … }}"
        )));
    }
    Ok(d.resolved)
}

fn build(d: &deck::ResolvedDeck) -> Result<Problem, VoxelPatientError> {
    crate::setup::build(d).map(|x| x.0).map_err(|e| VoxelPatientError::Deck(format!("voxel deck: {e}")))
}

/// Skin z (cm), axis thickness (cm) and the material index at each z of the axis, from the grid.
fn axis_profile(grid: &dosemill_geometry::VoxelGrid) -> Option<(f64, f64, f64, f64)> {
    let b = grid.bounds();
    let (cx, cy) = (0.5 * (b.min_cm.x + b.max_cm.x), 0.5 * (b.min_cm.y + b.max_cm.y));
    let l = grid.layout();
    let dz = l.voxel_size_cm.z;
    let nz = l.dims[2];
    let mut first = None;
    let mut last = None;
    for k in 0..nz {
        let z = l.origin_cm.z + (k as f64 + 0.5) * dz;
        let Some(i) = grid.voxel_at(Vec3::new(cx, cy, z)) else { continue };
        if grid.voxel_medium(i).1 >= TISSUE_MIN_DENSITY {
            first.get_or_insert(k);
            last = Some(k);
        }
    }
    let (f, la) = (first?, last?);
    let z0 = l.origin_cm.z + f as f64 * dz;
    let z1 = l.origin_cm.z + (la + 1) as f64 * dz;
    Some((cx, cy, z0, z1 - z0))
}

/// Evaluates a voxel patient: loads the deck, places the beam, runs free in air and with the
/// phantom. `thickness_cm` is the protocol's value, checked against the phantom's axis.
pub fn evaluate_voxel(path: &str, thickness_cm: f64, beam: &VoxelBeam) -> Result<VoxelResult, VoxelPatientError> {
    let mut d = load_voxel_deck(path)?;
    if let deck::Geometry::Voxels(v) = &mut d.geometry {
        v.world = deck::World::Vacuum;
    }
    d.scores = vec![deck::Score { name: "regions".into(), kind: deck::ScoreKind::VoxelDose { estimator: deck::Estimator::TrackLength, grid: None } }];
    // First pass: the grid, to find the skin.
    let first = build(&d)?;
    let Geometry::Voxels(w) = &first.geometry else { unreachable!("checked voxel geometry") };
    let (cx, cy, skin, axis_t) = axis_profile(&w.grid).ok_or_else(|| {
        VoxelPatientError::NotVoxels(format!("the phantom of `{path}` has no voxel denser than {TISSUE_MIN_DENSITY} g/cm³ on the central axis (grid centre in x, y, along z); put the patient on that axis"))
    })?;
    let dz = w.grid.layout().voxel_size_cm.z;
    if (axis_t - thickness_cm).abs() > dz.max(0.05 * thickness_cm) + 1e-9 {
        return Err(VoxelPatientError::Thickness(format!(
            "thickness_cm = {thickness_cm} but the phantom `{path}` is {axis_t} cm thick on the central axis; set thickness_cm = {axis_t}"
        )));
    }
    let focus = [cx, cy, skin - beam.fsd_cm];
    let f = match beam.field {
        Field::Rectangle { width_cm, height_cm } => deck::Field::Rectangle { width_cm, height_cm },
        Field::Circle { radius_cm } => deck::Field::Circle { radius_cm },
    };
    d.source.shape = deck::SourceShape::Point { position_cm: focus, direction: [0.0, 0.0, 1.0], field: f, field_distance_cm: beam.fsd_cm, focal_spot_cm: [0.0, 0.0] };
    let mut problem = build(&d)?;
    let physics: PhysicsOptions = problem.options;
    if beam.spectrum.min_kev() < physics.cutoff_kev {
        return Err(VoxelPatientError::Deck(format!(
            "the tube spectrum starts at {} keV, below the deck's energy cut-off {} keV; lower run.energy_cutoff_kev in `{path}`",
            beam.spectrum.min_kev(),
            physics.cutoff_kev
        )));
    }
    let emission = crate::source::Emission::Point { origin_cm: Vec3::new(focus[0], focus[1], focus[2]), direction: Vec3::new(0.0, 0.0, 1.0), field: beam.field, field_distance_cm: beam.fsd_cm, focal_spot_cm: [0.0, 0.0] };
    problem.source = Source::new(emission, beam.spectrum.clone());
    let Some(Scorer::VoxelDose(vd)) = problem.scorers.first() else { unreachable!("one voxel_dose score") };
    let vd: VoxelDose = (**vd).clone();
    debug_assert_eq!(vd.estimator, DoseEstimator::TrackLength);
    let grid = vd.grid.clone();
    let materials = vd.materials.clone();

    let lib = |n: &str| dosemill_xsdata::library::lookup(n).map_err(|e| DosimetryError::Material(e.to_string()));
    let mut media = vec![Arc::new(lib("air")?), Arc::new(lib("water")?), Arc::new(lib("soft_tissue")?)];
    media.extend(materials.iter().cloned().map(Arc::new));
    let mut planes = vec![skin - SURFACE_GAP_CM];
    let mut depths = Vec::new();
    let mut depth_media = Vec::new();
    for &dd in &beam.depths_cm {
        if dd > axis_t + 1e-9 {
            continue;
        }
        let z = skin + dd.clamp(SURFACE_GAP_CM, axis_t - SURFACE_GAP_CM);
        let Some(i) = grid.voxel_at(Vec3::new(cx, cy, z)) else { continue };
        let m = grid.voxel_medium(i).0 as usize;
        planes.push(z);
        depths.push(dd);
        depth_media.push(m);
    }
    let pk = PlaneKerma::new([cx, cy], beam.disc_radius_cm, planes, media.clone()).map_err(|e| DosimetryError::Material(e.to_string()))?;
    problem.scorers.push(Scorer::PlaneKerma(pk));
    let mut fdd = None;
    if let Some(det) = &beam.detector {
        // The face behind the exit surface on the axis (a zero gap: just behind it, as for slabs);
        // the world is stretched to hold it and the whole face (vacuum: nothing changes for the
        // transport or the other scores).
        let gap = det.gap();
        let z_face = ((skin + axis_t + if gap > 0.0 { gap } else { super::imaging::FACE_OFFSET_CM }) * 1e6).round() / 1e6;
        // Nominal focus–detector distance (without the 0.001 cm offset of a zero gap), as for slabs.
        let d_fdd = beam.fsd_cm + axis_t + gap;
        let [fw, fh] = match beam.field {
            Field::Rectangle { width_cm, height_cm } => [width_cm, height_cm],
            Field::Circle { radius_cm } => [2.0 * radius_cm, 2.0 * radius_cm],
        };
        let half = [0.5 * super::imaging::face_side_cm(fw, beam.fsd_cm, d_fdd) + 1.0, 0.5 * super::imaging::face_side_cm(fh, beam.fsd_cm, d_fdd) + 1.0];
        let Geometry::Voxels(w) = &problem.geometry else { unreachable!("voxel geometry") };
        let wb = w.grid.world().bounds;
        let bounds = dosemill_geometry::Aabb::new(
            Vec3::new(wb.min_cm.x.min(cx - half[0]), wb.min_cm.y.min(cy - half[1]), wb.min_cm.z),
            Vec3::new(wb.max_cm.x.max(cx + half[0]), wb.max_cm.y.max(cy + half[1]), wb.max_cm.z.max(z_face + 10.0)),
        );
        let grid2 = (*w.grid).clone().with_world(dosemill_geometry::World { medium: None, bounds }).map_err(|e| DosimetryError::Geometry(e.to_string()))?;
        let vw = crate::transport::VoxelWorld { tracking: w.tracking, grid: Arc::new(grid2), majorant: w.majorant.clone(), labels: w.labels.clone() };
        problem.geometry = Geometry::Voxels(Box::new(vw));
        let scorer = super::imaging::detector_scorer(det, Vec3::new(cx, cy, z_face), [fw, fh], beam.fsd_cm, d_fdd, &problem.geometry, &problem.materials, &problem.source, &problem.options)?;
        problem.scorers.push(Scorer::Detector(Box::new(scorer)));
        fdd = Some(d_fdd);
    }

    // Free in air: the same beam (focus at the origin, field at FSD), no phantom.
    let air = lib("air")?;
    let free_pk = PlaneKerma::new([0.0, 0.0], beam.disc_radius_cm, vec![beam.fsd_cm - SURFACE_GAP_CM], vec![Arc::new(air.clone())]).map_err(|e| DosimetryError::Material(e.to_string()))?;
    let free_problem = slab_problem(&air, 0.0, beam.fsd_cm, axis_t.max(1.0), None, emission_of(&BeamShape::Field(beam.field), beam.fsd_cm), beam.spectrum.clone(), vec![Scorer::PlaneKerma(free_pk)], &physics)?;
    let free = run(&free_problem, &settings(2 * beam.histories, beam.seed.wrapping_add(1), beam.threads));
    let full = run(&problem, &settings(beam.histories, beam.seed, beam.threads));

    let k_free = plane_kerma_gy(&free, 0)[0];
    if !(k_free.value > 0.0) {
        return Err(DosimetryError::NoScore(format!("no photon crossed the {} cm scoring disc free in air; raise the histories", beam.disc_radius_cm)).into());
    }
    let full_k = plane_kerma_gy(&full, 1);
    let nm = media.len();
    let bin = |plane: usize, medium: usize| (plane * nm + medium) * DIRECTIONS;
    let k_entr = full_k[bin(0, 0)];
    let b = k_entr.ratio(k_free);
    let kw = full_k[bin(0, 1)];
    let kt = full_k[bin(0, 2)];
    let mut depth_iak = Vec::new();
    for (j, &m) in depth_media.iter().enumerate() {
        depth_iak.push(full_k[bin(1 + j, 3 + m)].ratio(k_free));
    }
    let pdd = percentage_depth_dose(&depth_iak);

    // Regions: track-length energy per history over the region mass.
    let Scorer::VoxelDose(v) = &full.scorers[0] else { unreachable!("first scorer is the voxel dose") };
    let (vm, vs) = v.tally.mean_and_sigma(full.histories);
    let n = v.voxels();
    let mut regions = Vec::new();
    if let Some(labels) = &v.labels {
        let l = grid.layout();
        let vol = l.voxel_size_cm.x * l.voxel_size_cm.y * l.voxel_size_cm.z;
        let mut mass = vec![0.0; labels.1.len()];
        for i in 0..grid.num_voxels() {
            mass[labels.0[i] as usize] += grid.voxel_medium(i).1 * vol;
        }
        for (k, name) in labels.1.iter().enumerate() {
            // Label 0 is the phantom's fill (background), not a named region.
            if k == 0 || mass[k] <= 0.0 {
                continue;
            }
            let gy = JOULE_PER_KEV / (mass[k] * 1e-3);
            let dose = Estimate::new(vm[n + k] * gy, vs[n + k] * gy);
            regions.push((name.clone(), mass[k], dose.ratio(k_free)));
        }
    }
    let imaging = match (fdd, full.scorers.get(2)) {
        (Some(f), Some(Scorer::Detector(det))) => Some(super::imaging::summarise(det, full.histories, f)?),
        _ => None,
    };
    let names: Vec<String> = depth_media.iter().map(|&m| materials[m].name().to_string()).collect();
    Ok(VoxelResult {
        deck: path.to_string(),
        skin_z_cm: skin,
        axis_thickness_cm: axis_t,
        free_air_kerma_gy: k_free,
        backscatter_factor: b,
        surface_dose_per_iak: [kw.ratio(k_free), kt.ratio(k_free)],
        muen_ratio: [kw.ratio(k_entr), kt.ratio(k_entr)],
        depths_cm: depths,
        depth_media: names,
        depth_dose_per_iak: depth_iak,
        pdd_percent: pdd,
        regions,
        histories: (free.histories, full.histories),
        imaging,
    })
}
