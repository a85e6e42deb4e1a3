//! Forced detection (next-event estimation) against the analog estimate of the same scatter
//! images: two independent runs (different seeds) of the same problem must agree pixel by
//! pixel within their combined statistical uncertainties. The criterion: Σ z² over the pixels
//! of each image below the 99.9th percentile of χ² with that many degrees of freedom (Wilson–
//! Hilferty approximation, standard statistics texts), and every |z| < 4.5.
//!
//! Face sums per category (a biased estimator shows there first: a 1 % deficit spread over the
//! pixels passes the per-pixel χ²): each estimator runs in 10 independent batches (own seeds);
//! the σ of a face sum is the spread of its batch values, which includes the correlations
//! between pixels of one history. Criterion: |z| < 4 (Student t with ≈ 18 degrees of freedom,
//! two-sided p ≈ 10⁻³; standard tables).

use dosemill_engine::score::detector::{summary, DetectorScorer, CATEGORIES};
use dosemill_engine::score::Scorer;
use dosemill_engine::transport::{run, Problem, RunResult, RunSettings};
use std::path::Path;

fn problem(deck: &str) -> Problem {
    let d = dosemill_engine::deck::load_str(deck, Path::new("runs/detector_test.toml")).unwrap_or_else(|e| panic!("{e:?}"));
    dosemill_engine::setup::build(&d.resolved).unwrap_or_else(|e| panic!("{e}")).0
}

fn detector(s: &Scorer) -> &DetectorScorer {
    match s {
        Scorer::Detector(d) => d,
        _ => panic!("not a detector"),
    }
}

fn deck(layers: &str, forced: bool, extra: &str, world: &str) -> String {
    format!(
        r#"
[run]
histories = 1
fluorescence = true

[source]
kind = "point"
position_cm = [0, 0, -100]
field = {{ shape = "rectangle", width_cm = 16, height_cm = 16 }}
field_distance_cm = 100

[source.tube]
kvp = 80
filters = ["Al:2.5"]

[geometry]
kind = "slabs"
world = "{world}"
start_z_cm = -14

{layers}

[[score]]
name = "image"
kind = "detector"
position_cm = [0, 0, 0]
size_cm = [24, 24]
pixel_pitch_cm = 4
forced_detection = {forced}
{extra}
"#
    )
}

fn go(p: &Problem, histories: u64, seed: u64) -> RunResult {
    run(p, &RunSettings { histories, seed, chunk_histories: 5_000, threads: 2, progress: false })
}

const BATCHES: u64 = 10;

/// `BATCHES` runs of `histories` each (seeds `seed`, `seed + 100`, …): the merged result and,
/// per category, the face sum of each batch.
fn batches(p: &Problem, histories: u64, seed: u64) -> (RunResult, Vec<Vec<f64>>) {
    let mut merged: Option<RunResult> = None;
    let mut sums = vec![Vec::new(); CATEGORIES.len()];
    for b in 0..BATCHES {
        let r = go(p, histories, seed + 100 * b);
        let d = detector(&r.scorers[0]);
        for (c, s) in sums.iter_mut().enumerate() {
            s.push(d.image(c, r.histories).0.iter().sum::<f64>());
        }
        match &mut merged {
            None => merged = Some(r),
            Some(m) => {
                // Batches use different seeds: merge the tallies as independent histories.
                for (a, b) in m.scorers.iter_mut().zip(&r.scorers) {
                    a.tally_mut().merge(b.tally());
                }
                m.histories += r.histories;
            }
        }
    }
    (merged.expect("at least one batch"), sums)
}

/// Face sums of both estimators per category: batch means and |z| < 4 (module docs).
fn compare_face_sums(a: &[Vec<f64>], b: &[Vec<f64>], categories: &[usize]) {
    let stats = |v: &[f64]| {
        let n = v.len() as f64;
        let m = v.iter().sum::<f64>() / n;
        let var = v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1.0);
        (m, (var / n).sqrt())
    };
    for &c in categories {
        let (ma, sa) = stats(&a[c]);
        let (mb, sb) = stats(&b[c]);
        let z = (ma - mb) / (sa * sa + sb * sb).sqrt();
        eprintln!("{} face sum: analog {ma:.5e} ± {sa:.2e}, forced {mb:.5e} ± {sb:.2e}, forced/analog {:.4}, z = {z:.2}", CATEGORIES[c], mb / ma);
        assert!(z.abs() < 4.0, "{} face sum: analog {ma} ± {sa} vs forced {mb} ± {sb} (z = {z:.2})", CATEGORIES[c]);
    }
}

/// χ² 99.9th percentile for `k` degrees of freedom (Wilson–Hilferty).
fn chi2_999(k: f64) -> f64 {
    let z = 3.090;
    k * (1.0 - 2.0 / (9.0 * k) + z * (2.0 / (9.0 * k)).sqrt()).powi(3)
}

fn compare(a: &RunResult, b: &RunResult, categories: &[usize]) {
    let (da, db) = (detector(&a.scorers[0]), detector(&b.scorers[0]));
    for &c in categories {
        let (ma, sa) = da.image(c, a.histories);
        let (mb, sb) = db.image(c, b.histories);
        let mut chi2 = 0.0;
        let mut k = 0.0;
        for i in 0..ma.len() {
            let s = (sa[i] * sa[i] + sb[i] * sb[i]).sqrt();
            if s == 0.0 {
                continue;
            }
            let z = (ma[i] - mb[i]) / s;
            assert!(z.abs() < 4.5, "{} pixel {i}: analog {} ± {} vs forced {} ± {}", CATEGORIES[c], ma[i], sa[i], mb[i], sb[i]);
            chi2 += z * z;
            k += 1.0;
        }
        let sum_a: f64 = ma.iter().sum();
        let sum_b: f64 = mb.iter().sum();
        let va: f64 = sa.iter().map(|x| x * x).sum();
        let vb: f64 = sb.iter().map(|x| x * x).sum();
        eprintln!("{}: chi2 {chi2:.1} / {k} pixels; face sums analog {sum_a:.4e} forced {sum_b:.4e} (z ≈ {:.2}, pixel covariances neglected)", CATEGORIES[c], (sum_a - sum_b) / (va + vb).sqrt());
        assert!(k > 0.0 && chi2 < chi2_999(k), "{}: chi2 {chi2} over {k} pixels", CATEGORIES[c]);
    }
}

/// Water in vacuum: single Compton, single Rayleigh, multiple and total scatter images, with the
/// default next-event sampling (one point per flight, Russian roulette, coherent directions
/// also drawn from their own law), without the coherent technique, and from the transport's
/// collisions without roulette.
#[test]
fn forced_detection_matches_analog_scatter_in_water() {
    let layers = "[[geometry.layer]]\nmaterial = \"water\"\nthickness_cm = 10";
    let (analog, sa) = batches(&problem(&deck(layers, false, "", "vacuum")), 600_000, 1);
    let (forced, sf) = batches(&problem(&deck(layers, true, "", "vacuum")), 24_000, 2);
    compare(&analog, &forced, &[1, 2, 3, 5]);
    compare_face_sums(&sa, &sf, &[1, 2, 3, 5]);
    // Without the second technique for coherent directions, with three next-event points over
    // the face, both set from the deck.
    let p = problem(&deck(layers, true, "forced_detection_coherent_directions = false\nforced_detection_face_points = 3", "vacuum"));
    match &p.scorers[0] {
        Scorer::Detector(d) => assert!(!d.setup.spec.fd_coherent_sampling && d.setup.spec.fd_face_points == 3, "deck keys reach the scorer"),
        _ => panic!("not a detector"),
    }
    let (forced_coh, sc) = batches(&p, 24_000, 5);
    compare(&analog, &forced_coh, &[1, 2, 3, 5]);
    compare_face_sums(&sa, &sc, &[1, 2, 3, 5]);
    // Next-event points from the transport's own collisions, without Russian roulette or the
    // coherent technique.
    let p = problem(&deck(layers, true, "forced_detection_from = \"collisions\"\nforced_detection_roulette_below = 0\nforced_detection_coherent_directions = false", "vacuum"));
    match &p.scorers[0] {
        Scorer::Detector(d) => assert!(!d.setup.spec.fd_along_flights && d.setup.spec.fd_roulette_below == 0.0, "deck keys reach the scorer"),
        _ => panic!("not a detector"),
    }
    let (forced_col, sl) = batches(&p, 24_000, 6);
    compare(&analog, &forced_col, &[1, 2, 3, 5]);
    compare_face_sums(&sa, &sl, &[1, 2, 3, 5]);
    // The ROI mean of the forced estimate against the analog crossings of the same FD run.
    let s = detector(&forced.scorers[0]).summary(forced.histories);
    let z = (s.mean[summary::ROI_SCATTER] - s.mean[summary::ROI_SCATTER_ANALOG]) / s.sigma[summary::ROI_SCATTER_ANALOG];
    assert!(z.abs() < 4.0, "ROI scatter forced {} vs analog {} ± {}", s.mean[summary::ROI_SCATTER], s.mean[summary::ROI_SCATTER_ANALOG], s.sigma[summary::ROI_SCATTER_ANALOG]);
}

/// A caesium iodide layer fluoresces (K lines of I and Cs at 28–36 keV): forced detection of
/// fluorescence emission (cascade drawn with the scorer's own stream) against analog, with the
/// absorbed-energy response, in air.
#[test]
fn forced_detection_matches_analog_fluorescence_and_scatter_behind_csi() {
    let layers = "[[geometry.layer]]\nmaterial = \"water\"\nthickness_cm = 4\n\n[[geometry.layer]]\nmaterial = \"csi\"\nthickness_cm = 0.05";
    let extra = "response = \"absorbed\"\nlayer = { material = \"gd2o2s\", thickness_cm = 0.02 }";
    let (analog, sa) = batches(&problem(&deck(layers, false, extra, "air")), 100_000, 3);
    let (forced, sf) = batches(&problem(&deck(layers, true, extra, "air")), 6_000, 4);
    compare(&analog, &forced, &[4, 5]);
    compare_face_sums(&sa, &sf, &[1, 2, 3, 4, 5]);
}

/// A voxel phantom (water block with a bone sphere and an air cavity, in air): forced
/// detection along flights walks voxel rays; scatter images and face sums against analog.
#[test]
fn forced_detection_matches_analog_behind_a_voxel_phantom() {
    let deck = |forced: bool| {
        format!(
            r#"
[run]
histories = 1

[source]
kind = "point"
position_cm = [0, 0, -100]
field = {{ shape = "rectangle", width_cm = 16, height_cm = 16 }}
field_distance_cm = 100

[source.tube]
kvp = 80
filters = ["Al:2.5"]

[geometry]
kind = "voxels"
world = "air"
voxels = [16, 16, 8]
voxel_size_cm = [1, 1, 1]
origin_cm = [-8, -8, -12]

[geometry.phantom]
fill = "water"

[[geometry.phantom.shape]]
kind = "sphere"
center_cm = [2, -1, -8]
radius_cm = 2.5
material = "cortical_bone"
region = "bone"

[[geometry.phantom.shape]]
kind = "box"
center_cm = [-3, 3, -6]
half_size_cm = [2, 2, 1]
material = "air"
region = "cavity"

[[score]]
name = "image"
kind = "detector"
position_cm = [0, 0, 0]
size_cm = [24, 24]
pixel_pitch_cm = 4
forced_detection = {forced}
"#
        )
    };
    let (analog, sa) = batches(&problem(&deck(false)), 200_000, 7);
    let (forced, sf) = batches(&problem(&deck(true)), 10_000, 8);
    compare(&analog, &forced, &[1, 2, 3, 5]);
    compare_face_sums(&sa, &sf, &[1, 2, 3, 5]);
}

/// Source energies drawn toward the detector (`[source.energy_bias]`: q ∝ p × max(floor,
/// transmission to the face centre), each photon starting with weight p/q) keep every score's
/// expectation: analog images (primary included) and face sums with the bias against analog
/// without it, forced detection with the bias against analog, the energy deposited in the
/// water (z-test, |z| < 4), and energy conservation history by history (deposited + escaped =
/// weight × energy, 1e-12 relative).
#[test]
fn energy_bias_keeps_images_and_deposits_unbiased() {
    let layers = "[[geometry.layer]]\nmaterial = \"water\"\nthickness_cm = 10";
    let water = "\n[[score]]\nname = \"water\"\nkind = \"layer_energy\"\n";
    let bias = format!("{water}\n[source.energy_bias]\ntoward = \"image\"\nfloor = 0.05\n");
    let biased_problem = problem(&deck(layers, false, &bias, "vacuum"));
    let weights = biased_problem.source.energy_bias.as_ref().expect("the deck's bias reaches the source").weights().to_vec();
    let (lo, hi) = weights.iter().fold((f64::INFINITY, 0f64), |(a, b), w| (a.min(*w), b.max(*w)));
    eprintln!("start weights {lo:.3}–{hi:.3}");
    assert!(hi / lo > 5.0, "the bias is not a no-op: weights {lo}–{hi}");

    let (analog, sa) = batches(&problem(&deck(layers, false, water, "vacuum")), 300_000, 21);
    let (biased, sb) = batches(&biased_problem, 300_000, 22);
    compare(&analog, &biased, &[0, 1, 2, 3, 5]);
    compare_face_sums(&sa, &sb, &[0, 1, 2, 3, 5]);
    let (ea, ua) = analog.scorers[1].tally().mean_and_sigma(analog.histories);
    let (eb, ub) = biased.scorers[1].tally().mean_and_sigma(biased.histories);
    let z = (ea[0] - eb[0]) / (ua[0].powi(2) + ub[0].powi(2)).sqrt();
    eprintln!("energy in the water: analog {:.5} ± {:.1e} keV, biased {:.5} ± {:.1e} keV, z = {z:.2}", ea[0], ua[0], eb[0], ub[0]);
    assert!(z.abs() < 4.0, "energy in the water: analog {} ± {} vs biased {} ± {}", ea[0], ua[0], eb[0], ub[0]);

    let (forced, sf) = batches(&problem(&deck(layers, true, &bias, "vacuum")), 24_000, 23);
    compare(&analog, &forced, &[1, 2, 3, 5]);
    compare_face_sums(&sa, &sf, &[1, 2, 3, 5]);

    let mut scorers = biased_problem.scorers.clone();
    for h in 0..20_000 {
        let o = biased_problem.run_history(24, h, &mut scorers);
        assert!((o.deposited_kev + o.escaped_kev - o.incident_kev).abs() <= 1e-12 * o.incident_kev, "history {h}: {o:?}");
    }
}

/// `[source.field_bias]` (start rays drawn toward the detector's ROI, weights Z / b_c): the
/// analog images (primary included) and the energy deposited in the water keep their means
/// against the unbiased source (per-pixel χ², face sums and a z-test, |z| < 4); forced detection
/// with both biases agrees with the analog images; energy is conserved history by history with
/// the weights.
#[test]
fn field_bias_keeps_images_and_deposits_unbiased() {
    let layers = "[[geometry.layer]]\nmaterial = \"water\"\nthickness_cm = 10";
    let water = "\n[[score]]\nname = \"water\"\nkind = \"layer_energy\"\n";
    let bias = format!("{water}\n[source.field_bias]\ntoward = \"image\"\nlength_cm = 1.5\n");
    let biased_problem = problem(&deck(layers, false, &bias, "vacuum"));
    let fb = biased_problem.source.field_bias.as_ref().expect("the deck's bias reaches the source");
    let (lo, hi) = fb.weights().iter().fold((f64::INFINITY, 0f64), |(a, b), w| (a.min(*w), b.max(*w)));
    eprintln!("field cells {:?}, start weights {lo:.3}–{hi:.3}, acceptance {:.3}", fb.cells(), fb.acceptance());
    assert!(hi / lo > 5.0, "the bias is not a no-op: weights {lo}–{hi}");

    let (analog, sa) = batches(&problem(&deck(layers, false, water, "vacuum")), 300_000, 31);
    let (biased, sb) = batches(&biased_problem, 300_000, 32);
    compare(&analog, &biased, &[0, 1, 2, 3, 5]);
    compare_face_sums(&sa, &sb, &[0, 1, 2, 3, 5]);
    let (ea, ua) = analog.scorers[1].tally().mean_and_sigma(analog.histories);
    let (eb, ub) = biased.scorers[1].tally().mean_and_sigma(biased.histories);
    let z = (ea[0] - eb[0]) / (ua[0].powi(2) + ub[0].powi(2)).sqrt();
    eprintln!("energy in the water: analog {:.5} ± {:.1e} keV, biased {:.5} ± {:.1e} keV, z = {z:.2}", ea[0], ua[0], eb[0], ub[0]);
    assert!(z.abs() < 4.0, "energy in the water: analog {} ± {} vs biased {} ± {}", ea[0], ua[0], eb[0], ub[0]);

    let both = format!("{bias}\n[source.energy_bias]\ntoward = \"image\"\n");
    let (forced, sf) = batches(&problem(&deck(layers, true, &both, "vacuum")), 24_000, 33);
    compare(&analog, &forced, &[1, 2, 3, 5]);
    compare_face_sums(&sa, &sf, &[1, 2, 3, 5]);

    let mut scorers = biased_problem.scorers.clone();
    for h in 0..20_000 {
        let o = biased_problem.run_history(34, h, &mut scorers);
        assert!((o.deposited_kev + o.escaped_kev - o.incident_kev).abs() <= 1e-12 * o.incident_kev, "history {h}: {o:?}");
    }
}
