//! From a resolved deck to a runnable [`Problem`]: materials, geometry, source and scorers.
//!
//! Everything is checked here before the first photon starts; errors name the deck key.

use crate::deck::{self, ResolvedDeck, ScoreKind, SourceEnergy, SourceShape};
use crate::physics::{xs::MaterialXs, PhysicsOptions};
use crate::score::Scorer;
use crate::source::{AliasTable, Emission, EnergyBias, EnergySpectrum, Field, FieldBias, Source};
use crate::spectrum;
use crate::transport::{Geometry, Problem, RunSettings};
use dosemill_geometry::{Lateral, Layer, Medium, SlabStack, Vec3};
use dosemill_xsdata::{library, material::Material};

/// A problem that cannot be set up from its deck.
#[derive(Debug, thiserror::Error)]
#[error("{key}: {message}")]
pub struct SetupError {
    /// Deck key path the error is about.
    pub key: String,
    /// What is wrong and how to fix it.
    pub message: String,
}

fn err(key: &str, message: impl Into<String>) -> SetupError {
    SetupError { key: key.to_string(), message: message.into() }
}

/// What the set-up learnt that the result file records beside the scores.
#[derive(Debug, Clone)]
pub struct SetupInfo {
    /// The source spectrum as (energy entries lo, hi, weight), normalised to unit sum.
    pub spectrum: Option<(Vec<f64>, Vec<f64>, Vec<f64>)>,
    /// Beam-quality figures of a tube source: (name, value, units).
    pub beam_quality: Vec<(String, f64, String)>,
    /// Per score (same order as the deck): the data the result writer needs.
    pub scores: Vec<ScoreInfo>,
    /// Names of the materials, by index.
    pub material_names: Vec<String>,
    /// Layer table of a slab geometry: (name, material, density g/cm³, front z cm, back z cm).
    pub layers: Vec<(String, String, f64, f64, f64)>,
    /// World medium density (g/cm³; 0 for vacuum).
    pub world_density_g_cm3: f64,
    /// Field area of the source (cm²) where it has one.
    pub field_area_cm2: Option<f64>,
    /// `[source.energy_bias]` as given, and the bias built from it (each entry's draw
    /// probability and start weight).
    pub energy_bias: Option<(deck::EnergyBias, EnergyBias)>,
    /// `[source.field_bias]` as given, and the bias built from it (each cell's keep
    /// probability and start weight).
    pub field_bias: Option<(deck::FieldBias, FieldBias)>,
}

/// A deck score with its engine scorer.
#[derive(Debug, Clone)]
pub struct ScoreInfo {
    /// Name given in the deck.
    pub name: String,
    /// Its kind, as in the deck.
    pub kind: ScoreKind,
}

/// The physics switches of a deck.
pub fn physics_options(d: &ResolvedDeck) -> PhysicsOptions {
    PhysicsOptions {
        cutoff_kev: d.run.energy_cutoff_kev,
        bound_compton: d.run.bound_compton,
        rayleigh: d.run.rayleigh,
        fluorescence: d.run.fluorescence,
    }
}

/// The run settings of a deck (threads: the deck's, else all cores).
pub fn run_settings(d: &ResolvedDeck, threads: Option<usize>, seed: Option<u64>, progress: bool) -> RunSettings {
    let threads = threads
        .or(d.run.threads.map(|t| t as usize))
        .unwrap_or_else(|| std::thread::available_parallelism().map(|n| n.get()).unwrap_or(1));
    RunSettings {
        histories: d.run.histories,
        seed: seed.unwrap_or(d.run.seed),
        chunk_histories: d.run.histories_per_chunk,
        threads,
        progress,
    }
}

/// A material of the deck: user-defined in `[[material]]`, else from the built-in library.
pub fn resolve_material(d: &ResolvedDeck, name: &str, key: &str) -> Result<Material, SetupError> {
    if let Some(m) = d.materials.iter().find(|m| m.name == name) {
        let made = match &m.composition {
            deck::Composition::Formula(f) => Material::from_formula(&m.name, f, m.density_g_cm3, "defined in the deck"),
            deck::Composition::MassFractions(fr) => {
                let z: Vec<(u32, f64)> = fr.iter().map(|e| (e.z, e.mass_fraction)).collect();
                Material::from_mass_fractions_z(&m.name, m.density_g_cm3, &z, true, "defined in the deck")
            }
        };
        return made.map_err(|e| err(key, e.to_string()));
    }
    library::lookup(name).map_err(|e| err(key, e.to_string()))
}

struct MaterialSet<'a> {
    deck: &'a ResolvedDeck,
    options: PhysicsOptions,
    names: Vec<String>,
    tables: Vec<MaterialXs>,
    nominal: Vec<f64>,
    library: Vec<Material>,
}

impl MaterialSet<'_> {
    fn index(&mut self, name: &str, key: &str) -> Result<u16, SetupError> {
        self.index_at(name, None, key)
    }

    /// The index of material `name`, or of a variant of it at another density (named
    /// `name@density`).
    fn index_at(&mut self, name: &str, density_g_cm3: Option<f64>, key: &str) -> Result<u16, SetupError> {
        let label = match density_g_cm3 {
            Some(d) => format!("{name}@{d}"),
            None => name.to_string(),
        };
        if let Some(i) = self.names.iter().position(|n| *n == label) {
            return Ok(i as u16);
        }
        let mut m = resolve_material(self.deck, name, key)?;
        if let Some(d) = density_g_cm3 {
            m = m.with_density(d).map_err(|e| err(key, e.to_string()))?.with_name(&label);
        }
        let name = label.as_str();
        let table = MaterialXs::new(m.name(), m.density_g_cm3(), m.composition(), &self.options).map_err(|e| err(key, e.to_string()))?;
        self.names.push(name.to_string());
        self.nominal.push(m.density_g_cm3());
        self.tables.push(table);
        self.library.push(m);
        Ok((self.tables.len() - 1) as u16)
    }
}

fn vec3(a: [f64; 3]) -> Vec3 {
    Vec3::new(a[0], a[1], a[2])
}

fn field(f: &deck::Field) -> Field {
    match *f {
        deck::Field::Rectangle { width_cm, height_cm } => Field::Rectangle { width_cm, height_cm },
        deck::Field::Circle { radius_cm } => Field::Circle { radius_cm },
    }
}

/// The engine's tube model for a deck's `[source.tube]`.
pub fn tube_of(t: &deck::Tube) -> spectrum::Tube {
    let anode = match t.anode {
        deck::Anode::W => spectrum::Anode::W,
        deck::Anode::Mo => spectrum::Anode::Mo,
        deck::Anode::Rh => spectrum::Anode::Rh,
    };
    let mut tube = spectrum::Tube::new(t.kvp, anode);
    tube.anode_angle_deg = t.anode_angle_deg;
    tube.ripple_percent = t.ripple_percent;
    for f in &t.filters {
        tube = tube.with_filter(&f.material.name, f.thickness_cm * 10.0);
    }
    tube
}

/// `[source.energy_bias]`: the importance of a spectrum entry is the uncollided transmission
/// exp(−∫μ ds) at its mid energy along the straight line from the source point (focal spot or
/// field centre) to the centre of the named detector's face, through the problem's geometry.
/// The energies that reach the detector get more histories and proportionally smaller weights.
fn energy_bias(d: &ResolvedDeck, problem: &Problem) -> Result<Option<EnergyBias>, SetupError> {
    let Some(spec) = &d.source.energy_bias else { return Ok(None) };
    let key = "source.energy_bias.toward";
    let det = d
        .scores
        .iter()
        .find_map(|s| match &s.kind {
            ScoreKind::Detector(det) if s.name == spec.toward => Some(det),
            _ => None,
        })
        .ok_or_else(|| err(key, format!("no detector score named `{}`", spec.toward)))?;
    let from = problem.source.origin();
    let to = vec3(det.position_cm);
    let length = (to - from).norm();
    let dir = (to - from)
        .try_normalised()
        .ok_or_else(|| err(key, "the detector's face centre is the source point: no line to bias along"))?;
    let bias = EnergyBias::new(&problem.source.spectrum, spec.floor, |lo, hi| {
        (-crate::raytrace::optical_depth(&problem.geometry, &problem.materials, from, dir, length, 0.5 * (lo + hi))).exp()
    });
    bias.map(Some).ok_or_else(|| err(key, "no source energy reaches the detector uncollided: nothing to bias toward"))
}

/// `[source.field_bias]`: the importance of a field cell is exp(−d / L), d the distance in the
/// named detector's plane from where the ray through the cell centre meets the plane to the
/// detector's central ROI (0 inside it), L = `length_cm`; a ray that never reaches the plane
/// has importance 0 (the floor keeps it possible).
fn field_bias(d: &ResolvedDeck, problem: &Problem) -> Result<Option<FieldBias>, SetupError> {
    let Some(spec) = &d.source.field_bias else { return Ok(None) };
    let key = "source.field_bias.toward";
    let det = d
        .scores
        .iter()
        .position(|s| s.name == spec.toward && matches!(s.kind, ScoreKind::Detector(_)))
        .and_then(|i| match &problem.scorers[i] {
            crate::score::Scorer::Detector(det) => Some(det),
            _ => None,
        })
        .ok_or_else(|| err(key, format!("no detector score named `{}`", spec.toward)))?;
    let bias = FieldBias::new(&problem.source.emission, spec.floor, |from, dir| match det.roi_miss_cm(from, dir) {
        Some(miss) => (-miss / spec.length_cm).exp(),
        None => 0.0,
    });
    bias.map(Some).map_err(|m| err("source.field_bias", m))
}

/// Builds the problem of a resolved deck.
pub fn build(d: &ResolvedDeck) -> Result<(Problem, SetupInfo), SetupError> {
    let options = physics_options(d);
    let mut mats = MaterialSet { deck: d, options, names: Vec::new(), tables: Vec::new(), nominal: Vec::new(), library: Vec::new() };

    // Source.
    let mut info_spectrum = None;
    let mut beam_quality = Vec::new();
    let energy = match &d.source.energy {
        SourceEnergy::Monoenergetic { energy_kev } => EnergySpectrum::Mono(*energy_kev),
        SourceEnergy::SpectrumFile { energies_kev, weights, .. } => {
            let table = AliasTable::new(weights).ok_or_else(|| err("source.spectrum_file", "the spectrum has no positive weight"))?;
            let total: f64 = weights.iter().sum();
            info_spectrum = Some((energies_kev.clone(), energies_kev.clone(), weights.iter().map(|w| w / total).collect()));
            EnergySpectrum::Discrete { kev: energies_kev.clone(), table }
        }
        SourceEnergy::Tube(t) => {
            let tube = tube_of(t);
            let s = spectrum::compute_spectrum(&tube, &spectrum::SpectrumOptions::default()).map_err(|e| err("source.tube", e.to_string()))?;
            let q = spectrum::BeamQuality::of(&s).map_err(|e| err("source.tube", e.to_string()))?;
            beam_quality = vec![
                ("hvl1_mm_al".to_string(), q.hvl1_mm_al, "mm".to_string()),
                ("hvl2_mm_al".to_string(), q.hvl2_mm_al, "mm".to_string()),
                ("homogeneity".to_string(), q.homogeneity, "1".to_string()),
                ("mean_kev".to_string(), q.mean_kev_fluence, "keV".to_string()),
                ("air_kerma_ugy_per_mas_1m".to_string(), q.air_kerma_ugy_per_mas_1m, "uGy/mAs".to_string()),
            ];
            let table = s.to_sampling_table();
            let alias = AliasTable::new(&table.weights).ok_or_else(|| err("source.tube", "the filtered tube spectrum is empty"))?;
            let total: f64 = table.weights.iter().sum();
            info_spectrum = Some((table.lo_kev.clone(), table.hi_kev.clone(), table.weights.iter().map(|w| w / total).collect()));
            EnergySpectrum::Ranges { lo_kev: table.lo_kev, hi_kev: table.hi_kev, table: alias }
        }
    };
    if energy.min_kev() < options.cutoff_kev {
        return Err(err("source", format!("the source emits photons at {} keV, below the energy cut-off {} keV", energy.min_kev(), options.cutoff_kev)));
    }
    let unit = |v: [f64; 3], key: &str| -> Result<Vec3, SetupError> {
        vec3(v).try_normalised().ok_or_else(|| err(key, "the direction must not be the zero vector"))
    };
    let emission = match &d.source.shape {
        SourceShape::Pencil { position_cm, direction } => Emission::Pencil { origin_cm: vec3(*position_cm), direction: unit(*direction, "source.direction")? },
        SourceShape::Parallel { position_cm, direction, field: f } => {
            Emission::Parallel { origin_cm: vec3(*position_cm), direction: unit(*direction, "source.direction")?, field: field(f) }
        }
        SourceShape::Point { position_cm, direction, field: f, field_distance_cm, focal_spot_cm } => Emission::Point {
            origin_cm: vec3(*position_cm),
            direction: unit(*direction, "source.direction")?,
            field: field(f),
            field_distance_cm: *field_distance_cm,
            focal_spot_cm: *focal_spot_cm,
        },
    };
    let source = Source::new(emission, energy);
    let source_z = match &d.source.shape {
        SourceShape::Pencil { position_cm, .. } | SourceShape::Parallel { position_cm, .. } | SourceShape::Point { position_cm, .. } => position_cm[2],
    };

    // Geometry.
    let (geometry, layers, world_density) = match &d.geometry {
        deck::Geometry::Slabs(s) => {
            let mut layers = Vec::new();
            let mut table = Vec::new();
            let mut z = s.start_z_cm;
            for (i, l) in s.layers.iter().enumerate() {
                let key = format!("geometry.layer[{i}].material");
                let m = mats.index(&l.material.name, &key)?;
                let rho = l.density_g_cm3.unwrap_or(mats.nominal[m as usize]);
                layers.push(Layer { material: m, density_g_cm3: rho, thickness_cm: l.thickness_cm });
                let name = l.name.clone().unwrap_or_else(|| format!("layer{i}"));
                table.push((name, l.material.name.clone(), rho, z, z + l.thickness_cm));
                z += l.thickness_cm;
            }
            let world = match s.world {
                deck::World::Vacuum => None,
                deck::World::Air => {
                    let m = mats.index("air", "geometry.world")?;
                    Some(Medium::new(m, mats.nominal[m as usize]))
                }
            };
            let lateral = match s.lateral_size_cm {
                None => Lateral::Infinite,
                Some([w, h]) => Lateral::Box { half_x_cm: 0.5 * w, half_y_cm: 0.5 * h },
            };
            // World: from 1 cm before the source (or the stack) to 1 m behind the stack; laterally 10 m.
            let front = (s.start_z_cm - source_z).max(0.0) + 1.0;
            let total = z - s.start_z_cm;
            let bounds = dosemill_geometry::Aabb::new(Vec3::new(-1000.0, -1000.0, s.start_z_cm - front), Vec3::new(1000.0, 1000.0, s.start_z_cm + total + 100.0));
            let stack = SlabStack::new(s.start_z_cm, layers, lateral, dosemill_geometry::World { medium: world, bounds })
                .map_err(|e| err("geometry", e.to_string()))?;
            (Geometry::Slabs(stack), table, world.map(|w| w.density_g_cm3).unwrap_or(0.0))
        }
        deck::Geometry::Voxels(v) => {
            let (grid, labels) = build_voxels(v, &mut mats)?;
            let world = match v.world {
                deck::World::Vacuum => None,
                deck::World::Air => {
                    let m = mats.index("air", "geometry.world")?;
                    Some(Medium::new(m, mats.nominal[m as usize]))
                }
            };
            // World: the grid plus 1 cm, stretched to hold the source, every detector face and
            // every air-kerma disc (photons leaving it escape, so a scorer outside would see
            // nothing).
            let gb = grid.bounds();
            let src = vec3(match &d.source.shape {
                SourceShape::Pencil { position_cm, .. } | SourceShape::Parallel { position_cm, .. } | SourceShape::Point { position_cm, .. } => *position_cm,
            });
            let (mut lo, mut hi) = (gb.min_cm.min(src), gb.max_cm.max(src));
            for sc in &d.scores {
                if let deck::ScoreKind::Detector(det) = &sc.kind {
                    let c = vec3(det.position_cm);
                    let (u, v) = crate::score::detector::face_axes(det.normal_axis.index());
                    let half = Vec3::new(0.0, 0.0, 0.0).with_axis(u, 0.5 * det.size_cm[0]).with_axis(v, 0.5 * det.size_cm[1]);
                    lo = lo.min(c - half);
                    hi = hi.max(c + half);
                }
                if let deck::ScoreKind::AirKerma { position_cm, radius_cm, .. } = &sc.kind {
                    let r = Vec3::new(*radius_cm, *radius_cm, *radius_cm);
                    lo = lo.min(vec3(*position_cm) - r);
                    hi = hi.max(vec3(*position_cm) + r);
                }
            }
            let one = Vec3::new(1.0, 1.0, 1.0);
            let bounds = dosemill_geometry::Aabb::new(lo - one, hi + one);
            let grid = grid.with_world(dosemill_geometry::World { medium: world, bounds }).map_err(|e| err("geometry", e.to_string()))?;
            grid.prepare_tracking();
            let mut max_density = grid.max_density_by_material();
            max_density.resize(mats.tables.len(), 0.0);
            let majorant = crate::physics::majorant::Majorant::new(&mats.tables, &max_density);
            let world = crate::transport::VoxelWorld { tracking: Default::default(), grid: std::sync::Arc::new(grid), majorant, labels: labels.map(std::sync::Arc::new) };
            (Geometry::Voxels(Box::new(world)), Vec::new(), 0.0)
        }
    };
    let library_materials = std::sync::Arc::new(mats.library.clone());

    // Scorers.
    let n_layers = layers.len();
    let mut scorers = Vec::new();
    let mut infos = Vec::new();
    for (i, sc) in d.scores.iter().enumerate() {
        let key = format!("score[{i}] ({})", sc.name);
        let scorer = match &sc.kind {
            ScoreKind::LayerEnergy => Scorer::region_energy(n_layers),
            ScoreKind::DepthDose { z_min_cm, z_max_cm, bin_width_cm } => {
                let bins = ((z_max_cm - z_min_cm) / bin_width_cm).round().max(1.0) as usize;
                Scorer::depth_energy(*z_min_cm, (z_max_cm - z_min_cm) / bins as f64, bins)
            }
            ScoreKind::Escape => Scorer::escape_counter(),
            ScoreKind::InteractionCounts => Scorer::interactions(),
            ScoreKind::TransmittedSpectrum { energy_min_kev, energy_max_kev, bin_width_kev } => {
                let bins = ((energy_max_kev - energy_min_kev) / bin_width_kev).round().max(1.0) as usize;
                Scorer::transmitted_spectrum(*energy_min_kev, (energy_max_kev - energy_min_kev) / bins as f64, bins, false)
            }
            ScoreKind::AirKerma { position_cm, normal_axis, radius_cm } => {
                let wb = geometry.world_bounds();
                let c = vec3(*position_cm);
                if !(0..3).all(|a| wb.min_cm.axis(a) < c.axis(a) && c.axis(a) < wb.max_cm.axis(a)) {
                    return Err(err(
                        &key,
                        format!(
                            "the air-kerma disc at ({}, {}, {}) cm lies outside the problem's world ({:?} to {:?} cm), where no photon reaches it; move it closer to the object",
                            c.x, c.y, c.z, [wb.min_cm.x, wb.min_cm.y, wb.min_cm.z], [wb.max_cm.x, wb.max_cm.y, wb.max_cm.z]
                        ),
                    ));
                }
                let air = library::lookup("air").map_err(|e| err(&key, e.to_string()))?;
                air.absorption_table().map_err(|e| err(&key, e.to_string()))?;
                Scorer::AirKerma {
                    axis: normal_axis.index(),
                    center_cm: vec3(*position_cm),
                    radius_cm: *radius_cm,
                    air: std::sync::Arc::new(air),
                    tally: crate::score::Tally::new(6),
                }
            }
            ScoreKind::VoxelDose { estimator, grid } => {
                let Geometry::Voxels(world) = &geometry else {
                    return Err(err(&key, "a voxel_dose score needs voxel geometry"));
                };
                let block = match grid {
                    None => [1, 1, 1],
                    Some(g) => scoring_blocks(&world.grid, g).map_err(|m| err(&key, m))?,
                };
                let estimator = match estimator {
                    deck::Estimator::Analog => crate::score::voxel_dose::DoseEstimator::Analog,
                    deck::Estimator::TrackLength => crate::score::voxel_dose::DoseEstimator::TrackLength,
                };
                for m in library_materials.iter() {
                    m.absorption_table().map_err(|e| err(&key, e.to_string()))?;
                }
                Scorer::VoxelDose(Box::new(crate::score::voxel_dose::VoxelDose::new(
                    estimator,
                    world.grid.clone(),
                    block,
                    world.labels.clone(),
                    library_materials.clone(),
                )))
            }
            ScoreKind::Detector(det) => crate::score::Scorer::Detector(Box::new(
                crate::score::detector::from_deck(det, &geometry, &mats.tables, &source, &options, |name, k| resolve_material(d, name, k).map_err(|e| e.message))
                    .map_err(|m| err(&key, m))?,
            )),
        };
        scorers.push(scorer);
        infos.push(ScoreInfo { name: sc.name.clone(), kind: sc.kind.clone() });
    }

    let field_area_cm2 = source.field_area_cm2();
    let mut problem = Problem { materials: mats.tables, geometry, source, options, scorers };
    problem.source.energy_bias = energy_bias(d, &problem)?;
    problem.source.field_bias = field_bias(d, &problem)?;
    let info = SetupInfo {
        spectrum: info_spectrum,
        beam_quality,
        scores: infos,
        material_names: mats.names,
        layers,
        world_density_g_cm3: world_density,
        field_area_cm2,
        energy_bias: d.source.energy_bias.clone().zip(problem.source.energy_bias.clone()),
        field_bias: d.source.field_bias.clone().zip(problem.source.field_bias.clone()),
    };
    Ok((problem, info))
}

/// Phantom voxels per scoring voxel for a coarser scoring grid that must tile the phantom grid.
fn scoring_blocks(grid: &dosemill_geometry::VoxelGrid, g: &deck::Grid) -> Result<[usize; 3], String> {
    let l = grid.layout();
    let mut block = [1usize; 3];
    for a in 0..3 {
        let ratio = g.voxel_size_cm[a] / l.voxel_size_cm.axis(a);
        let k = ratio.round();
        if k < 1.0 || (ratio - k).abs() > 1e-6 * k {
            return Err(format!("the scoring voxel size {} cm along axis {a} is not a whole multiple of the phantom's {} cm", g.voxel_size_cm[a], l.voxel_size_cm.axis(a)));
        }
        if (g.origin_cm[a] - l.origin_cm.axis(a)).abs() > 1e-9 * (1.0 + l.origin_cm.axis(a).abs()) {
            return Err(format!("the scoring grid origin {:?} must equal the phantom's origin", g.origin_cm));
        }
        block[a] = k as usize;
        let want = l.dims[a].div_ceil(block[a]) as u64;
        if g.voxels[a] != want {
            return Err(format!("the scoring grid needs {want} voxels along axis {a} to cover the phantom, not {}", g.voxels[a]));
        }
    }
    Ok(block)
}

fn grid_layout(g: &deck::Grid) -> dosemill_geometry::GridLayout {
    dosemill_geometry::GridLayout {
        dims: [g.voxels[0] as usize, g.voxels[1] as usize, g.voxels[2] as usize],
        voxel_size_cm: vec3(g.voxel_size_cm),
        origin_cm: vec3(g.origin_cm),
    }
}

/// The voxel grid of a deck, with region labels for phantoms. Materials are registered in the
/// grid's own order, so the grid's material indices are the problem's.
#[allow(clippy::type_complexity)]
fn build_voxels(v: &deck::Voxels, mats: &mut MaterialSet) -> Result<(dosemill_geometry::VoxelGrid, Option<(Vec<u16>, Vec<String>)>), SetupError> {
    use dosemill_geometry::phantom::{build_phantom, PhantomPart, PhantomSpec, Shape};
    use dosemill_geometry::{MaterialIndices, VoxelGrid};
    let key = "geometry";
    match &v.content {
        deck::VoxelContent::Phantom { grid, fill, shapes } => {
            // Materials in grid order: the fill, then each shape's (a shape with its own density
            // gets a variant of its material at that density).
            let fill_idx = mats.index(&fill.name, "geometry.phantom.fill")?;
            debug_assert_eq!(fill_idx, 0);
            let mut parts = Vec::new();
            for (i, sh) in shapes.iter().enumerate() {
                let material = mats.index_at(&sh.material.name, sh.density_g_cm3, &format!("geometry.phantom.shape[{i}].material"))?;
                let c = sh.center_cm;
                let shape = match &sh.form {
                    deck::ShapeForm::Box { half_size_cm } => Shape::Box { center_cm: c, half_size_cm: *half_size_cm },
                    deck::ShapeForm::Sphere { radius_cm } => Shape::Sphere { center_cm: c, radius_cm: *radius_cm },
                    deck::ShapeForm::Ellipsoid { half_size_cm } => Shape::Ellipsoid { center_cm: c, semi_axes_cm: *half_size_cm },
                    deck::ShapeForm::Cylinder { radius_cm, length_cm, axis } => Shape::Cylinder {
                        center_cm: c,
                        axis: match axis { deck::Axis::X => [1.0, 0.0, 0.0], deck::Axis::Y => [0.0, 1.0, 0.0], deck::Axis::Z => [0.0, 0.0, 1.0] },
                        radius_cm: *radius_cm,
                        length_cm: *length_cm,
                    },
                };
                parts.push(PhantomPart { shape, material, region: sh.region.clone() });
            }
            let l = grid_layout(grid);
            let names = mats.names.clone();
            let spec = PhantomSpec {
                dims: l.dims,
                voxel_size_cm: grid.voxel_size_cm,
                origin_cm: grid.origin_cm,
                materials: names.clone(),
                background_material: 0,
                parts,
                supersample: 1,
            };
            let ph = build_phantom(&spec).map_err(|e| err(key, e.to_string()))?;
            let mut g = ph.grid;
            let nominal: Vec<f64> = (0..names.len()).map(|i| mats.nominal[i]).collect();
            g.set_nominal_densities(&nominal).map_err(|e| err(key, e.to_string()))?;
            Ok((g, Some((ph.labels, ph.label_names))))
        }
        deck::VoxelContent::Raw { path, grid, bytes_per_voxel, labels } => {
            let bytes = std::fs::read(path).map_err(|e| err("geometry.file", format!("{}: {e}", path.display())))?;
            let l = grid_layout(grid);
            let n = l.num_voxels() as usize;
            let expected = n * *bytes_per_voxel as usize;
            if bytes.len() != expected {
                return Err(err("geometry.file", format!("{}: the grid needs {expected} bytes, the file has {}", path.display(), bytes.len())));
            }
            // Label values → material indices in the order the labels are listed.
            let mut map = std::collections::HashMap::new();
            for (label, m) in labels {
                let idx = mats.index(&m.name, &format!("geometry.labels `{label}`"))?;
                map.insert(*label, idx);
            }
            let mut idx = Vec::with_capacity(n);
            for i in 0..n {
                let label = if *bytes_per_voxel == 1 { bytes[i] as u32 } else { u16::from_le_bytes([bytes[2 * i], bytes[2 * i + 1]]) as u32 };
                match map.get(&label) {
                    Some(&m) => idx.push(m),
                    None => {
                        let [ix, iy, iz] = l.ijk(i);
                        return Err(err("geometry.labels", format!("{}: voxel ({ix},{iy},{iz}) has label {label}, which the deck's labels do not list", path.display())));
                    }
                }
            }
            let names = mats.names.clone();
            let indices = if names.len() <= 256 { MaterialIndices::U8(idx.iter().map(|&m| m as u8).collect()) } else { MaterialIndices::U16(idx) };
            let mut g = VoxelGrid::new(l, indices, None, names).map_err(|e| err(key, e.to_string()))?;
            g.set_nominal_densities(&mats.nominal.clone()).map_err(|e| err(key, e.to_string()))?;
            Ok((g, None))
        }
        deck::VoxelContent::Hdf5 { path } => {
            let mut g = dosemill_geometry::voxel_file::read_hdf5_voxels(path).map_err(|e| err("geometry.file", e.to_string()))?;
            let names: Vec<String> = g.material_names().to_vec();
            for (i, n) in names.iter().enumerate() {
                let idx = mats.index(n, &format!("geometry.file material `{n}`"))?;
                if idx as usize != i {
                    return Err(err("geometry.file", format!("material `{n}` is listed twice in {}", path.display())));
                }
            }
            if !g.densities_known() {
                let nominal: Vec<f64> = (0..names.len()).map(|i| mats.nominal[i]).collect();
                g.set_nominal_densities(&nominal).map_err(|e| err(key, e.to_string()))?;
            }
            Ok((g, None))
        }
    }
}

#[cfg(test)]
mod tests {
    use crate::score::Scorer;
    use crate::transport::{run, RunSettings};

    fn deck(geometry: &str, air_kerma_z: f64) -> String {
        format!(
            r#"
[run]
histories = 1
[source]
kind = "point"
position_cm = [0, 0, -100]
field = {{ shape = "rectangle", width_cm = 10, height_cm = 10 }}
field_distance_cm = 100
energy_kev = 60
{geometry}
[[score]]
name = "kerma"
kind = "air_kerma"
position_cm = [0, 0, {air_kerma_z}]
radius_cm = 1
"#
        )
    }

    const VOXELS: &str = "[geometry]\nkind = \"voxels\"\nworld = \"air\"\nvoxels = [6, 6, 4]\nvoxel_size_cm = 1\n[geometry.phantom]\nfill = \"water\"";
    const SLABS: &str = "[geometry]\nkind = \"slabs\"\nworld = \"air\"\nstart_z_cm = 0\n[[geometry.layer]]\nmaterial = \"water\"\nthickness_cm = 4";

    // Behind a voxel phantom (grid z 0–4 cm) an air-kerma disc 20 cm further sees the
    // transmitted beam: the world box holds it.
    #[test]
    fn voxel_world_holds_air_kerma_discs() {
        let d = crate::deck::load_str(&deck(VOXELS, 24.0), std::path::Path::new("runs/t.toml")).unwrap_or_else(|e| panic!("{e:?}"));
        let p = super::build(&d.resolved).unwrap_or_else(|e| panic!("{e}")).0;
        let r = run(&p, &RunSettings { histories: 4000, seed: 1, chunk_histories: 1000, threads: 1, progress: false });
        let Scorer::AirKerma { tally, .. } = &r.scorers[0] else { panic!("not an air-kerma scorer") };
        let (m, _) = tally.mean_and_sigma(r.histories);
        assert!(m.iter().any(|&v| v > 0.0), "the disc behind the phantom scores: {m:?}");
    }

    // An air-kerma disc beyond the slab world (1 m behind the stack) is refused, naming the key.
    #[test]
    fn air_kerma_disc_outside_the_world_is_an_error() {
        let d = crate::deck::load_str(&deck(SLABS, 300.0), std::path::Path::new("runs/t.toml")).unwrap_or_else(|e| panic!("{e:?}"));
        let e = super::build(&d.resolved).err().expect("a disc outside the world is refused");
        assert!(e.key.starts_with("score") && e.message.contains("outside the problem's world"), "{e:?}");
    }
}
