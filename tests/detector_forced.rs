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
use dosemill_geometry::Vec3;
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

/// Compton directions steered toward the face (`forced_detection_steer`: a share s drawn
/// uniformly in solid angle over the face, the weight corrected by p/q, q = (1 − s) p + s g;
/// `score/detector/steer.rs`).
///
/// First the sampler itself, from a point 8 cm in front of the face, off the oxygen of water at
/// 60 keV, against the transport's own Compton sampler (bound, Klein–Nishina × S): the mean
/// factor E_q[p/q] = ∫ p dΩ = 1, the weighted means of cos θ and of E'/E equal the physical
/// ones, and the weighted share of directions toward the face equals the physical share while
/// the unweighted share is larger (z-tests, |z| < 4, 2·10⁵ draws each).
///
/// Then whole runs: forced detection with steering against analog (per-pixel χ² and face sums),
/// the energy deposited in the water, and the analog crossings of scattered photons in the ROI
/// (kept in the forced run's summary), |z| < 4.
#[test]
fn steered_compton_directions_keep_images_and_deposits_unbiased() {
    use dosemill_engine::rng::history_stream;
    let layers = "[[geometry.layer]]\nmaterial = \"water\"\nthickness_cm = 10";
    let water = "\n[[score]]\nname = \"water\"\nkind = \"layer_energy\"\n";
    let steered = problem(&deck(layers, true, &format!("forced_detection_steer = 0.5\n{water}"), "vacuum"));
    let setup = &detector(&steered.scorers[0]).setup;
    assert!(setup.steers() && setup.spec.fd_steer == 0.5, "the deck key reaches the scorer");

    let (kev, n) = (60.0f64, 200_000u64);
    let pos = Vec3::new(3.0, -2.0, -8.0);
    let dir = Vec3::new(0.0, 0.6, 0.8);
    let water_m = &steered.materials[0];
    let oxygen = water_m.components.iter().position(|c| c.element.z == 8).expect("water has oxygen");
    let element = water_m.components[oxygen].element;
    let toward = |d: Vec3| -> f64 {
        if d.z <= 0.0 {
            return 0.0;
        }
        let t = -pos.z / d.z;
        ((pos.x + d.x * t).abs() <= 12.0 && (pos.y + d.y * t).abs() <= 12.0) as u8 as f64
    };
    // Per draw: (factor, factor·cos, factor·ratio, factor·[toward], [toward]).
    let mut sums = [[0.0f64; 5]; 2];
    let mut sq = [[0.0f64; 5]; 2];
    for i in 0..n {
        let mut rng = history_stream(77, i);
        let (d, ratio, f) = setup.steer_incoherent(pos, dir, kev, kev.ln(), 0, oxygen, element, true, &mut rng);
        let v = [f, f * dir.dot(d), f * ratio, f * toward(d), toward(d)];
        let mut rng = history_stream(78, i);
        let (r2, c2) = dosemill_engine::physics::compton::sample(kev, element, true, &mut rng);
        let d2 = dosemill_engine::physics::rotate(dir, c2, rng.azimuth());
        let a = [1.0, c2, r2, toward(d2), toward(d2)];
        for k in 0..5 {
            sums[0][k] += v[k];
            sq[0][k] += v[k] * v[k];
            sums[1][k] += a[k];
            sq[1][k] += a[k] * a[k];
        }
    }
    let stat = |j: usize, k: usize| {
        let m = sums[j][k] / n as f64;
        (m, ((sq[j][k] / n as f64 - m * m) / (n as f64 - 1.0)).sqrt())
    };
    let (mf, sf) = stat(0, 0);
    eprintln!("mean factor {mf:.5} ± {sf:.1e}");
    assert!(((mf - 1.0) / sf).abs() < 4.0, "E[p/q] = {mf} ± {sf}");
    for (k, what) in [(1, "cos θ"), (2, "E'/E"), (3, "share toward the face")] {
        let ((a, sa), (b, sb)) = (stat(0, k), stat(1, k));
        let z = (a - b) / (sa * sa + sb * sb).sqrt();
        eprintln!("{what}: steered (weighted) {a:.5} ± {sa:.1e}, physical {b:.5} ± {sb:.1e}, z = {z:.2}");
        assert!(z.abs() < 4.0, "{what}: {a} ± {sa} vs {b} ± {sb}");
    }
    let (raw, _) = stat(0, 4);
    let (phys, _) = stat(1, 3);
    // Unweighted, a share s = 0.5 goes to the face by construction: s + (1 − s) × the physical
    // share (binomial σ ≈ 10⁻³ each; bound 0.01).
    eprintln!("share toward the face: unweighted {raw:.4}, physical {phys:.4}");
    assert!((raw - (0.5 + 0.5 * phys)).abs() < 0.01, "unweighted share {raw} vs 0.5 + 0.5 × {phys}");

    let (analog, sa) = batches(&problem(&deck(layers, false, water, "vacuum")), 300_000, 41);
    let (forced, sfc) = batches(&steered, 60_000, 42);
    compare(&analog, &forced, &[1, 2, 3, 5]);
    compare_face_sums(&sa, &sfc, &[1, 2, 3, 5]);
    let (ea, ua) = analog.scorers[1].tally().mean_and_sigma(analog.histories);
    let (eb, ub) = forced.scorers[1].tally().mean_and_sigma(forced.histories);
    let z = (ea[0] - eb[0]) / (ua[0].powi(2) + ub[0].powi(2)).sqrt();
    eprintln!("energy in the water: analog {:.5} ± {:.1e} keV, steered {:.5} ± {:.1e} keV, z = {z:.2}", ea[0], ua[0], eb[0], ub[0]);
    assert!(z.abs() < 4.0, "energy in the water: analog {} ± {} vs steered {} ± {}", ea[0], ua[0], eb[0], ub[0]);
    let a = detector(&analog.scorers[0]).summary(analog.histories);
    let s = detector(&forced.scorers[0]).summary(forced.histories);
    let (ma, sga) = (a.mean[summary::ROI_SCATTER], a.sigma[summary::ROI_SCATTER]);
    let (ms, sgs) = (s.mean[summary::ROI_SCATTER_ANALOG], s.sigma[summary::ROI_SCATTER_ANALOG]);
    let z = (ma - ms) / (sga * sga + sgs * sgs).sqrt();
    eprintln!("ROI scatter crossings: analog run {ma:.4e} ± {sga:.1e}, steered run {ms:.4e} ± {sgs:.1e}, z = {z:.2}");
    assert!(z.abs() < 4.0, "ROI scatter crossings {ma} ± {sga} vs {ms} ± {sgs}");
}
