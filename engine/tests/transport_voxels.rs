//! Voxel transport checks: against the slab geometry, between estimators, between tracking
//! methods, and against the exact uncollided transmission exp(−∫μ ds).

mod common;
use common::*;
use dosemill_engine::physics::{majorant::Majorant, PhysicsOptions};
use dosemill_engine::raytrace::optical_depth;
use dosemill_engine::score::voxel_dose::{DoseEstimator, VoxelDose};
use dosemill_engine::score::Scorer;
use dosemill_engine::source::{EnergySpectrum, Emission, Field, Source};
use dosemill_engine::transport::{run, Geometry, Problem, VoxelTracking, VoxelWorld};
use dosemill_geometry::{Aabb, GridLayout, Lateral, Layer, MaterialIndices, SlabStack, Vec3, VoxelGrid, World};
use std::sync::Arc;

const LEAD: &[(u32, f64)] = &[(82, 1.0)];

/// Materials: 0 water (1.0), 1 lead (11.35), 2 lung-density water (0.26).
fn materials(o: &PhysicsOptions) -> (Vec<dosemill_engine::physics::xs::MaterialXs>, Vec<f64>) {
    (vec![material("water", 1.0, WATER, o), material("lead", 11.35, LEAD, o), material("lung", 0.26, WATER, o)], vec![1.0, 11.35, 0.26])
}

/// The library materials behind [`materials`] (for μen/ρ in the dose scorers).
fn library() -> Arc<Vec<dosemill_xsdata::Material>> {
    Arc::new(vec![
        dosemill_xsdata::library::lookup("water").unwrap(),
        dosemill_xsdata::library::lookup("lead").unwrap(),
        dosemill_xsdata::library::lookup("water").unwrap().with_density(0.26).unwrap(),
    ])
}

fn voxel_problem(grid: VoxelGrid, mats: Vec<dosemill_engine::physics::xs::MaterialXs>, source: Source, scorers: Vec<Scorer>, tracking: VoxelTracking) -> Problem {
    let maxd = grid.max_density_by_material();
    let majorant = Majorant::new(&mats, &maxd);
    let world = VoxelWorld { tracking, grid: Arc::new(grid), majorant, labels: None };
    Problem { materials: mats, geometry: Geometry::Voxels(Box::new(world)), source, options: PhysicsOptions::default(), scorers }
}

fn grid(dims: [usize; 3], size: [f64; 3], origin: [f64; 3], f: impl Fn(usize, usize, usize) -> u8, densities: &[f64]) -> VoxelGrid {
    let mut idx = Vec::new();
    for k in 0..dims[2] {
        for j in 0..dims[1] {
            for i in 0..dims[0] {
                idx.push(f(i, j, k));
            }
        }
    }
    let layout = GridLayout { dims, voxel_size_cm: Vec3::new(size[0], size[1], size[2]), origin_cm: Vec3::new(origin[0], origin[1], origin[2]) };
    let mut g = VoxelGrid::new(layout, MaterialIndices::U8(idx), None, vec!["water".into(), "lead".into(), "lung".into()]).unwrap();
    g.set_nominal_densities(densities).unwrap();
    let b = g.bounds();
    g.with_world(World { medium: None, bounds: Aabb::new(b.min_cm - Vec3::new(1.0, 1.0, 2.0), b.max_cm + Vec3::new(1.0, 1.0, 1.0)) }).unwrap()
}

fn z_ok(a: &[f64], sa: &[f64], b: &[f64], sb: &[f64], limit: f64, what: &str) {
    for i in 0..a.len() {
        let s = (sa[i] * sa[i] + sb[i] * sb[i]).sqrt();
        if s > 0.0 {
            let z = (a[i] - b[i]) / s;
            assert!(z.abs() < limit, "{what} bin {i}: {} ± {} vs {} ± {} (z = {z})", a[i], sa[i], b[i], sb[i]);
        }
    }
}

/// A voxelised slab stack (water 4 cm, lung-density 2 cm, water 4 cm; 40 × 40 cm) gives the same
/// depth dose as the slab geometry within statistics: per-bin z-test, |z| < 4 (independent runs).
#[test]
fn voxelised_slabs_match_the_slab_geometry() {
    let o = PhysicsOptions::default();
    let (mats, rho) = materials(&o);
    let g = grid([20, 20, 50], [2.0, 2.0, 0.2], [-20.0, -20.0, 0.0], |_, _, k| if (20..30).contains(&k) { 2 } else { 0 }, &rho);
    let src = Source::new(Emission::Pencil { origin_cm: Vec3::new(0.0, 0.0, -1.0), direction: Vec3::Z }, EnergySpectrum::Mono(60.0));
    let depth = || Scorer::depth_energy(0.0, 0.2, 50);
    let pv = voxel_problem(g, mats.clone(), src.clone(), vec![depth()], VoxelTracking::Woodcock);
    let layers = vec![
        Layer { material: 0, density_g_cm3: 1.0, thickness_cm: 4.0 },
        Layer { material: 2, density_g_cm3: 0.26, thickness_cm: 2.0 },
        Layer { material: 0, density_g_cm3: 1.0, thickness_cm: 4.0 },
    ];
    let stack = SlabStack::with_margin(0.0, layers, Lateral::Box { half_x_cm: 20.0, half_y_cm: 20.0 }, None, 1.0, (0.0, 0.0)).unwrap();
    let ps = problem(mats, stack, src, o, vec![depth()]);
    let n = 200_000;
    let a = run(&pv, &settings(n, 1, 2));
    let b = run(&ps, &settings(n, 2, 2));
    let (ma, sa) = a.scorers[0].tally().mean_and_sigma(n);
    let (mb, sb) = b.scorers[0].tally().mean_and_sigma(n);
    z_ok(&ma, &sa, &mb, &sb, 4.0, "depth energy");
}

fn heterogeneous(rho: &[f64]) -> VoxelGrid {
    // 16 × 16 × 20 voxels of 1 cm: water with a lead bar and a lung block.
    grid([16, 16, 20], [1.0, 1.0, 1.0], [-8.0, -8.0, 0.0], |i, j, k| {
        if (3..5).contains(&k) && (6..10).contains(&i) && (7..9).contains(&j) {
            1
        } else if (8..14).contains(&k) && (2..14).contains(&i) && (2..14).contains(&j) {
            2
        } else {
            0
        }
    }, rho)
}

fn broad_beam() -> Source {
    Source::new(
        Emission::Parallel { origin_cm: Vec3::new(0.0, 0.0, -1.0), direction: Vec3::Z, field: Field::Rectangle { width_cm: 10.0, height_cm: 10.0 } },
        EnergySpectrum::Mono(80.0),
    )
}

/// Woodcock tracking vs exact voxel-by-voxel stepping on a heterogeneous phantom (lead and lung
/// inserts): the same dose in every voxel of a 4 × 4 × 5 scoring grid and the same depth energy
/// within statistics (independent runs; per-bin |z| < 4.5 over ~100 bins).
#[test]
fn delta_tracking_matches_exact_traversal() {
    let o = PhysicsOptions::default();
    let (mats, rho) = materials(&o);
    let g = Arc::new(heterogeneous(&rho));
    let lib = library();
    let scorers = || vec![Scorer::VoxelDose(Box::new(VoxelDose::new(DoseEstimator::Analog, g.clone(), [4, 4, 4], None, lib.clone()))), Scorer::depth_energy(0.0, 1.0, 20)];
    let a = run(&voxel_problem((*g).clone(), mats.clone(), broad_beam(), scorers(), VoxelTracking::Woodcock), &settings(150_000, 11, 2));
    let b = run(&voxel_problem((*g).clone(), mats, broad_beam(), scorers(), VoxelTracking::Exact), &settings(150_000, 12, 2));
    for s in 0..2 {
        let (ma, sa) = a.scorers[s].tally().mean_and_sigma(a.histories);
        let (mb, sb) = b.scorers[s].tally().mean_and_sigma(b.histories);
        z_ok(&ma, &sa, &mb, &sb, 4.5, "woodcock vs exact");
    }
}

/// Track-length and analog dose estimators agree within statistics in every voxel whose
/// uncertainty is below 2 % (same run; |z| < 4 with the variances added, which is conservative
/// for positively correlated estimates).
#[test]
fn track_length_and_analog_agree() {
    let o = PhysicsOptions::default();
    let (mats, rho) = materials(&o);
    let g = Arc::new(heterogeneous(&rho));
    let lib = library();
    let scorers = vec![
        Scorer::VoxelDose(Box::new(VoxelDose::new(DoseEstimator::Analog, g.clone(), [8, 8, 4], None, lib.clone()))),
        Scorer::VoxelDose(Box::new(VoxelDose::new(DoseEstimator::TrackLength, g.clone(), [8, 8, 4], None, lib.clone()))),
    ];
    let n = 100_000;
    let r = run(&voxel_problem((*g).clone(), mats, broad_beam(), scorers, VoxelTracking::Woodcock), &settings(n, 21, 2));
    let (ma, sa) = r.scorers[0].tally().mean_and_sigma(n);
    let (mb, sb) = r.scorers[1].tally().mean_and_sigma(n);
    let mut compared = 0;
    for i in 0..ma.len() {
        if ma[i] > 0.0 && sa[i] / ma[i] < 0.02 {
            compared += 1;
            let z = (ma[i] - mb[i]) / (sa[i] * sa[i] + sb[i] * sb[i]).sqrt();
            assert!(z.abs() < 4.0, "voxel {i}: analog {} ± {}, track length {} ± {}", ma[i], sa[i], mb[i], sb[i]);
        }
    }
    assert!(compared >= 6, "only {compared} voxels below 2 %");
}

/// Uncollided transmission along a ray through the heterogeneous phantom equals exp(−∫μ ds)
/// from the exact traversal (binomial |z| < 4), for rays through the lead bar and the lung block.
#[test]
fn uncollided_transmission_matches_the_traversal() {
    let o = PhysicsOptions::default();
    let (mats, rho) = materials(&o);
    let g = heterogeneous(&rho);
    for (i, (x, y)) in [(0.5, 0.3), (-5.5, 4.5)].into_iter().enumerate() {
        let dir = Vec3::new(0.05, -0.02, 1.0).normalised();
        let start = Vec3::new(x, y, -1.0);
        let src = Source::new(Emission::Pencil { origin_cm: start, direction: dir }, EnergySpectrum::Mono(100.0));
        let p = voxel_problem(g.clone(), mats.clone(), src, vec![Scorer::transmitted_spectrum(99.5, 1.0, 1, false)], VoxelTracking::Woodcock);
        let tau = optical_depth(&p.geometry, &p.materials, start, dir, 100.0, 100.0);
        let n = 300_000u64;
        let r = run(&p, &settings(n, 31 + i as u64, 2));
        let (m, _) = r.scorers[0].tally().mean_and_sigma(n);
        let k = m[0] * n as f64;
        let z = binomial_z(k, n as f64, (-tau).exp());
        assert!(z.abs() < 4.0, "ray {i}: τ = {tau}, transmitted {k} of {n}, z = {z}");
    }
}

/// The voxel dose grid (a shared tally: one copy of the sums for all worker threads) gives the
/// same bits on 1 and 2 threads, and when the run's chunks are run in two parts, either added
/// into one result or run separately and merged (the checkpoint and shard paths).
#[test]
fn voxel_dose_bits_do_not_depend_on_threads_or_splitting() {
    use dosemill_engine::transport::{run_chunks_into, run_chunks_with, RunResult};
    let o = PhysicsOptions::default();
    let (mats, rho) = materials(&o);
    let g = Arc::new(heterogeneous(&rho));
    let lib = library();
    let scorers = vec![
        Scorer::VoxelDose(Box::new(VoxelDose::new(DoseEstimator::Analog, g.clone(), [1, 1, 1], None, lib.clone()))),
        Scorer::VoxelDose(Box::new(VoxelDose::new(DoseEstimator::TrackLength, g.clone(), [2, 2, 2], None, lib.clone()))),
    ];
    let p = voxel_problem((*g).clone(), mats, broad_beam(), scorers, VoxelTracking::Woodcock);
    let mut s1 = settings(20_000, 5, 1);
    s1.chunk_histories = 1000;
    let mut s2 = s1.clone();
    s2.threads = 2;
    let one = run(&p, &s1);
    let two = run(&p, &s2);
    let chunks: Vec<u64> = (0..20).collect();
    let mut into = RunResult::empty(&p);
    run_chunks_into(&p, &s2, &chunks[12..], None, None, &mut into);
    run_chunks_into(&p, &s2, &chunks[..12], None, None, &mut into);
    let mut merged = run_chunks_with(&p, &s1, &chunks[..7], None, None);
    merged.merge(&run_chunks_with(&p, &s2, &chunks[7..], None, None));
    for s in 0..2 {
        let reference = one.scorers[s].tally().raw();
        assert!(reference.0.iter().any(|&v| v > 0), "score {s} is empty");
        for (what, r) in [("2 threads", &two), ("two calls into one result", &into), ("merged parts", &merged)] {
            assert!(r.scorers[s].tally().raw() == reference, "score {s}: {what} differs from 1 thread");
        }
    }
    assert_eq!(into.histories, 20_000);
    assert_eq!(merged.chunks, chunks);
}

/// Uncollided transmission equals exp(−∫μ ds) (binomial |z| < 4) where the local majorants
/// take their other paths: per-voxel densities varying across the phantom (so many bricks
/// lead with a different density that the majorant classes group by material), and a lead bar
/// of material index 65 (bricks beyond the 64 cached materials fall back to the grid-wide
/// majorant).
#[test]
fn uncollided_transmission_with_per_voxel_densities_and_the_global_fallback() {
    let o = PhysicsOptions::default();
    let water = material("water", 1.0, WATER, &o);
    let lead = material("lead", 11.35, LEAD, &o);
    let dims = [40usize, 40, 72];
    let n: usize = dims.iter().product();
    let ijk = |i: usize| [i % dims[0], (i / dims[0]) % dims[1], i / (dims[0] * dims[1])];
    let bar = |c: [usize; 3]| (10..15).contains(&c[2]) && (13..27).contains(&c[0]) && (17..23).contains(&c[1]);
    let layout = GridLayout { dims, voxel_size_cm: Vec3::new(0.3, 0.3, 0.3), origin_cm: Vec3::new(-6.0, -6.0, 0.0) };
    for wide in [false, true] {
        let (mats, names, idx, density): (Vec<_>, Vec<String>, Vec<u8>, Option<Vec<f32>>) = if wide {
            let mats = (0..66).map(|k| if k == 65 { lead.clone() } else { water.clone() }).collect();
            (mats, (0..66).map(|k| format!("m{k}")).collect(), (0..n).map(|i| if bar(ijk(i)) { 65 } else { 0 }).collect(), None)
        } else {
            let dens = (0..n).map(|i| { let [x, y, z] = ijk(i); if bar([x, y, z]) { 11.35 } else { 0.3 + 0.02 * z as f32 + 0.01 * x as f32 + 0.001 * y as f32 } }).collect();
            (vec![water.clone(), lead.clone()], vec!["water".into(), "lead".into()], (0..n).map(|i| bar(ijk(i)) as u8).collect(), Some(dens))
        };
        let mut g = VoxelGrid::new(layout, MaterialIndices::U8(idx), density, names).unwrap();
        g.set_nominal_densities(&mats.iter().map(|m| m.density_g_cm3).collect::<Vec<_>>()).unwrap();
        let b = g.bounds();
        let g = g.with_world(World { medium: None, bounds: Aabb::new(b.min_cm - Vec3::new(1.0, 1.0, 2.0), b.max_cm + Vec3::new(1.0, 1.0, 1.0)) }).unwrap();
        if wide {
            assert!(g.majorant_classes().iter().all(|c| c.iter().all(|&(m, _)| m != 65)), "the lead bar's bricks use the grid-wide majorant");
        } else {
            assert!(g.majorant_classes().len() <= 2, "classes grouped by leading material: {}", g.majorant_classes().len());
        }
        for (i, (x, y)) in [(0.1, 0.2), (-4.3, 3.1)].into_iter().enumerate() {
            let dir = Vec3::new(0.03, -0.01, 1.0).normalised();
            let start = Vec3::new(x, y, -1.0);
            let src = Source::new(Emission::Pencil { origin_cm: start, direction: dir }, EnergySpectrum::Mono(100.0));
            let p = voxel_problem(g.clone(), mats.clone(), src, vec![Scorer::transmitted_spectrum(99.5, 1.0, 1, false)], VoxelTracking::Woodcock);
            let tau = optical_depth(&p.geometry, &p.materials, start, dir, 100.0, 100.0);
            assert!(tau > 0.5, "ray {i} crosses material: τ = {tau}");
            let histories = 200_000u64;
            let r = run(&p, &settings(histories, 41 + i as u64 + 2 * wide as u64, 2));
            let (m, _) = r.scorers[0].tally().mean_and_sigma(histories);
            let k = m[0] * histories as f64;
            let z = binomial_z(k, histories as f64, (-tau).exp());
            assert!(z.abs() < 4.0, "wide {wide} ray {i}: τ = {tau}, transmitted {k} of {histories}, z = {z}");
        }
    }
}
