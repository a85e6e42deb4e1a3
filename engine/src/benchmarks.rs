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

/// P3: a 256³ voxel phantom (0.1 cm voxels: a soft-tissue cylinder with lung and bone inserts in
/// air, demo geometry), an 80 kV tube beam from a point source at 100 cm with a 20 × 20 cm field,
/// analog dose on a 64³ scoring grid (blocks of 4³ voxels).
pub fn p3() -> Result<Problem, String> {
    p3_with(256, 4)
}

/// P3 on an n³ phantom of the same 25.6 cm cube (voxels of 25.6/n cm), analog dose on the
/// phantom grid in blocks of `block`³ voxels (`block` = 1: dose in every phantom voxel).
pub fn p3_with(n: usize, block: usize) -> Result<Problem, String> {
    if n == 0 || block == 0 {
        return Err("phantom size and scoring block must be positive".into());
    }
    let h = 25.6 / n as f64;
    use crate::physics::majorant::Majorant;
    use crate::score::voxel_dose::{DoseEstimator, VoxelDose};
    use crate::transport::{VoxelTracking, VoxelWorld};
    use dosemill_geometry::phantom::{build_phantom, PhantomPart, PhantomSpec, Shape};
    use std::sync::Arc;
    let options = PhysicsOptions::default();
    let names = ["air", "soft_tissue", "lung", "cortical_bone"];
    let lib: Vec<_> = names.iter().map(|n| dosemill_xsdata::library::lookup(n).map_err(|e| e.to_string())).collect::<Result<_, _>>()?;
    let tables: Vec<MaterialXs> = lib.iter().map(|m| MaterialXs::new(m.name(), m.density_g_cm3(), m.composition(), &options).map_err(|e| e.to_string())).collect::<Result<_, _>>()?;
    let part = |shape, material, region: &str| PhantomPart { shape, material, region: Some(region.to_string()) };
    let spec = PhantomSpec {
        dims: [n, n, n],
        voxel_size_cm: [h, h, h],
        origin_cm: [-12.8, -12.8, 0.0],
        materials: names.iter().map(|s| s.to_string()).collect(),
        background_material: 0,
        parts: vec![
            part(Shape::Cylinder { center_cm: [0.0, 0.0, 12.8], axis: [0.0, 1.0, 0.0], radius_cm: 12.0, length_cm: 25.6 }, 1, "body"),
            part(Shape::Ellipsoid { center_cm: [-5.0, 0.0, 11.0], semi_axes_cm: [3.5, 8.0, 5.0] }, 2, "lung_a"),
            part(Shape::Ellipsoid { center_cm: [5.0, 0.0, 11.0], semi_axes_cm: [3.5, 8.0, 5.0] }, 2, "lung_b"),
            part(Shape::Box { center_cm: [0.0, 0.0, 20.0], half_size_cm: [1.2, 12.0, 1.2] }, 3, "spine"),
        ],
        supersample: 1,
    };
    let ph = build_phantom(&spec).map_err(|e| e.to_string())?;
    let mut grid = ph.grid;
    grid.set_nominal_densities(&lib.iter().map(|m| m.density_g_cm3()).collect::<Vec<_>>()).map_err(|e| e.to_string())?;
    let b = grid.bounds();
    let bounds = dosemill_geometry::Aabb::new(Vec3::new(b.min_cm.x - 1.0, b.min_cm.y - 1.0, -101.0), b.max_cm + Vec3::new(1.0, 1.0, 1.0));
    let grid = grid.with_world(dosemill_geometry::World { medium: Some(dosemill_geometry::Medium::new(0, lib[0].density_g_cm3())), bounds }).map_err(|e| e.to_string())?;
    let majorant = Majorant::new(&tables, &grid.max_density_by_material());
    // The brick tables are part of the set-up (as in `setup::build`), not of the timed run.
    grid.prepare_tracking();
    let grid = Arc::new(grid);
    let tube = crate::spectrum::Tube::new(80.0, crate::spectrum::Anode::W).with_filter("Al", 2.5);
    let s = crate::spectrum::compute_spectrum(&tube, &crate::spectrum::SpectrumOptions::default()).map_err(|e| e.to_string())?;
    let t = s.to_sampling_table();
    let alias = crate::source::AliasTable::new(&t.weights).ok_or("empty spectrum")?;
    let source = Source::new(
        Emission::Point { origin_cm: Vec3::new(0.0, 0.0, -100.0), direction: Vec3::new(0.0, 0.0, 1.0), field: crate::source::Field::Rectangle { width_cm: 20.0, height_cm: 20.0 }, field_distance_cm: 100.0, focal_spot_cm: [0.0, 0.0] },
        EnergySpectrum::Ranges { lo_kev: t.lo_kev, hi_kev: t.hi_kev, table: alias },
    );
    let dose = Scorer::VoxelDose(Box::new(VoxelDose::new(DoseEstimator::Analog, grid.clone(), [block, block, block], Some(Arc::new((ph.labels, ph.label_names))), Arc::new(lib))));
    let world = VoxelWorld { tracking: VoxelTracking::Woodcock, grid, majorant, labels: None };
    Ok(Problem { materials: tables, geometry: Geometry::Voxels(Box::new(world)), source, options, scorers: vec![dose] })
}
