//! Forced detection (next-event estimation) against the analog estimate of the same scatter
//! images: two independent runs (different seeds) of the same problem must agree pixel by
//! pixel within their combined statistical uncertainties. The criterion: Σ z² over the pixels
//! of each image below the 99.9th percentile of χ² with that many degrees of freedom (Wilson–
//! Hilferty approximation, standard statistics texts), and every |z| < 4.5.

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

/// Water in vacuum: single Compton, single Rayleigh, multiple and total scatter images.
#[test]
fn forced_detection_matches_analog_scatter_in_water() {
    let layers = "[[geometry.layer]]\nmaterial = \"water\"\nthickness_cm = 10";
    let analog = go(&problem(&deck(layers, false, "", "vacuum")), 1_500_000, 1);
    let forced = go(&problem(&deck(layers, true, "", "vacuum")), 60_000, 2);
    compare(&analog, &forced, &[1, 2, 3, 5]);
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
    let analog = go(&problem(&deck(layers, false, extra, "air")), 1_000_000, 3);
    let forced = go(&problem(&deck(layers, true, extra, "air")), 60_000, 4);
    compare(&analog, &forced, &[4, 5]);
}
