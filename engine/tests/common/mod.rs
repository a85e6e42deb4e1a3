//! Builders shared by the engine's integration tests.
#![allow(dead_code)]

use dosemill_engine::physics::{xs::MaterialXs, PhysicsOptions};
use dosemill_engine::score::Scorer;
use dosemill_engine::source::{EnergySpectrum, Emission, Source};
use dosemill_engine::transport::{Geometry, Problem, RunSettings};
use dosemill_geometry::{Lateral, Layer, Medium, SlabStack, Vec3};

/// Water by mass (NIST SRD 126 composition, REFERENCES.md): H 0.111894, O 0.888106.
pub const WATER: &[(u32, f64)] = &[(1, 0.111894), (8, 0.888106)];
/// Dry air near sea level by mass (NIST SRD 126, REFERENCES.md).
pub const AIR: &[(u32, f64)] = &[(6, 0.000124), (7, 0.755268), (8, 0.231781), (18, 0.012827)];

pub fn material(name: &str, density: f64, comp: &[(u32, f64)], options: &PhysicsOptions) -> MaterialXs {
    MaterialXs::new(name, density, comp, options).expect("material table")
}

/// A laterally infinite stack of (material index, density, thickness) from z = 0, in vacuum or
/// in a world of material `world` (index, density), world box 1 cm beyond the stack along z.
pub fn slabs(layers: &[(u16, f64, f64)], world: Option<(u16, f64)>) -> SlabStack {
    let layers = layers.iter().map(|&(m, d, t)| Layer { material: m, density_g_cm3: d, thickness_cm: t }).collect();
    SlabStack::with_margin(0.0, layers, Lateral::Infinite, world.map(|(m, d)| Medium::new(m, d)), 1.0, (1e4, 1e4)).unwrap()
}

pub fn pencil(kev: f64) -> Source {
    Source::new(
        Emission::Pencil { origin_cm: Vec3::new(0.0, 0.0, -0.5), direction: Vec3::new(0.0, 0.0, 1.0) },
        EnergySpectrum::Mono(kev),
    )
}

pub fn problem(materials: Vec<MaterialXs>, stack: SlabStack, source: Source, options: PhysicsOptions, scorers: Vec<Scorer>) -> Problem {
    Problem { materials, geometry: Geometry::Slabs(stack), source, options, scorers }
}

pub fn settings(histories: u64, seed: u64, threads: usize) -> RunSettings {
    RunSettings { histories, seed, chunk_histories: 10_000, threads, progress: false }
}

/// Binomial z-score of `k` successes in `n` trials against probability `p`.
pub fn binomial_z(k: f64, n: f64, p: f64) -> f64 {
    (k - n * p) / (n * p * (1.0 - p)).sqrt()
}
