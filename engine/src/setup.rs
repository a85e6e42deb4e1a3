//! From a resolved deck to a runnable [`Problem`]: materials, geometry, source and scorers.
//!
//! Everything is checked here before the first photon starts; errors name the deck key.

use crate::deck::{self, ResolvedDeck, ScoreKind, SourceEnergy, SourceShape};
use crate::physics::{xs::MaterialXs, PhysicsOptions};
use crate::score::Scorer;
use crate::source::{AliasTable, Emission, EnergySpectrum, Field, Source};
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
}

impl MaterialSet<'_> {
    fn index(&mut self, name: &str, key: &str) -> Result<u16, SetupError> {
        if let Some(i) = self.names.iter().position(|n| n == name) {
            return Ok(i as u16);
        }
        let m = resolve_material(self.deck, name, key)?;
        let table = MaterialXs::new(m.name(), m.density_g_cm3(), m.composition(), &self.options).map_err(|e| err(key, e.to_string()))?;
        self.names.push(name.to_string());
        self.nominal.push(m.density_g_cm3());
        self.tables.push(table);
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

/// Builds the problem of a resolved deck.
pub fn build(d: &ResolvedDeck) -> Result<(Problem, SetupInfo), SetupError> {
    let options = physics_options(d);
    let mut mats = MaterialSet { deck: d, options, names: Vec::new(), tables: Vec::new(), nominal: Vec::new() };

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
        SourceShape::Point { position_cm, direction, field: f, field_distance_cm } => Emission::Point {
            origin_cm: vec3(*position_cm),
            direction: unit(*direction, "source.direction")?,
            field: field(f),
            field_distance_cm: *field_distance_cm,
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
        deck::Geometry::Voxels(_) => {
            return Err(err("geometry.kind", "voxel geometry cannot be run by this version yet; use kind = \"slabs\""));
        }
    };

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
                let air = library::lookup("air").map_err(|e| err(&key, e.to_string()))?;
                air.absorption_table().map_err(|e| err(&key, e.to_string()))?;
                Scorer::AirKerma {
                    axis: match normal_axis { deck::Axis::X => 0, deck::Axis::Y => 1, deck::Axis::Z => 2 },
                    center_cm: vec3(*position_cm),
                    radius_cm: *radius_cm,
                    air: std::sync::Arc::new(air),
                    tally: crate::score::Tally::new(6),
                }
            }
            ScoreKind::Detector(det) => crate::score::Scorer::Detector(Box::new(
                crate::score::detector::from_deck(det, &geometry, &mats.tables, &source, &options, |name, k| resolve_material(d, name, k).map_err(|e| e.message))
                    .map_err(|m| err(&key, m))?,
            )),
            ScoreKind::VoxelDose { .. } => {
                return Err(err(&key, "this kind of score cannot be run by this version yet (available: layer_energy, depth_dose, escape, interaction_counts, transmitted_spectrum, air_kerma)"));
            }
        };
        scorers.push(scorer);
        infos.push(ScoreInfo { name: sc.name.clone(), kind: sc.kind.clone() });
    }

    let field_area_cm2 = source.field_area_cm2();
    let problem = Problem { materials: mats.tables, geometry, source, options, scorers };
    let info = SetupInfo {
        spectrum: info_spectrum,
        beam_quality,
        scores: infos,
        material_names: mats.names,
        layers,
        world_density_g_cm3: world_density,
        field_area_cm2,
    };
    Ok((problem, info))
}
