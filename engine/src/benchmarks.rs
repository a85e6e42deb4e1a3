//! Reference problems for speed measurements (`dosemill bench`, `cargo bench`).
//!
//! P1: a 60 keV pencil beam into a 20 cm water slab, full physics (bound Compton, Rayleigh,
//! fluorescence), depth dose in 1 mm bins.

use crate::physics::{xs::MaterialXs, PhysicsOptions};
use crate::score::Scorer;
use crate::source::{EnergySpectrum, Emission, Source};
use crate::transport::{Geometry, Problem};
use dosemill_geometry::{Lateral, Layer, SlabStack, Vec3};

/// Water by mass fraction (NIST SRD 126 composition): H 0.111894, O 0.888106.
pub const WATER_COMPOSITION: &[(u32, f64)] = &[(1, 0.111894), (8, 0.888106)];

/// Problem P1 with the given extra scorers after the depth-dose scorer.
pub fn p1(extra: Vec<Scorer>) -> Problem {
    let options = PhysicsOptions::default();
    let water = MaterialXs::new("water", 1.0, WATER_COMPOSITION, &options).expect("water table");
    let stack = SlabStack::with_margin(
        0.0,
        vec![Layer { material: 0, density_g_cm3: 1.0, thickness_cm: 20.0 }],
        Lateral::Infinite,
        None,
        1.0,
        (1e4, 1e4),
    )
    .expect("P1 stack");
    let source = Source::new(
        Emission::Pencil { origin_cm: Vec3::new(0.0, 0.0, -0.5), direction: Vec3::new(0.0, 0.0, 1.0) },
        EnergySpectrum::Mono(60.0),
    );
    let mut scorers = vec![Scorer::depth_energy(0.0, 0.1, 200)];
    scorers.extend(extra);
    Problem { materials: vec![water], geometry: Geometry::Slabs(stack), source, options, scorers }
}
