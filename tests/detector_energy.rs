//! Energy conservation between the detector and the escape scorer: a detector just behind the
//! exit face of a laterally infinite slab, in vacuum, large enough to catch every photon that
//! leaves forward, scores (energy-fluence response × pixel area, summed) exactly the forward
//! escaping energy — history by history for analog crossings (so to rounding), and within
//! statistics for forced detection (an unbiased estimate of the same expectation). The forced
//! detection check keeps a 3 cm vacuum gap, so that photons missing the 10 m face (leaving
//! within 0.35° of the face plane) carry a fraction of the energy far below 1e-3.

use dosemill_engine::score::detector::DetectorScorer;
use dosemill_engine::score::Scorer;
use dosemill_engine::transport::{run, Problem, RunSettings};
use std::path::Path;

fn problem(forced: bool, gap_cm: f64) -> Problem {
    let deck = format!(
        r#"
[run]
histories = 1

[source]
kind = "point"
position_cm = [0, 0, -50]
field = {{ shape = "circle", radius_cm = 10 }}
field_distance_cm = 50

[source.tube]
kvp = 80
filters = ["Al:2.5"]

[geometry]
kind = "slabs"
world = "vacuum"
start_z_cm = -8

[[geometry.layer]]
material = "water"
thickness_cm = 8

[[score]]
name = "escape"
kind = "escape"

[[score]]
name = "image"
kind = "detector"
position_cm = [0, 0, {gap_cm}]
size_cm = [1000, 1000]
pixel_pitch_cm = 100
response = "energy_fluence"
forced_detection = {forced}
"#
    );
    let d = dosemill_engine::deck::load_str(&deck, Path::new("runs/detector_test.toml")).unwrap_or_else(|e| panic!("{e:?}"));
    dosemill_engine::setup::build(&d.resolved).unwrap_or_else(|e| panic!("{e}")).0
}

fn detector(s: &Scorer) -> &DetectorScorer {
    match s {
        Scorer::Detector(d) => d,
        _ => panic!("not a detector"),
    }
}

/// (forward escape energy, its σ, detector energy, its σ) in keV per history.
fn energies(forced: bool, gap_cm: f64, histories: u64) -> (f64, f64, f64, f64) {
    let p = problem(forced, gap_cm);
    let r = run(&p, &RunSettings { histories, seed: 7, chunk_histories: 5_000, threads: 2, progress: false });
    let (esc, esc_s) = r.scorers[0].tally().mean_and_sigma(r.histories);
    let d = detector(&r.scorers[1]);
    let area = 100.0 * 100.0;
    let (mut e, mut v) = (0.0, 0.0);
    {
        // The total image (category 6), pixel sums; pixel covariances are neglected in σ.
        let (m, s) = d.image(6, r.histories);
        e += m.iter().sum::<f64>() * area;
        v += s.iter().map(|x| x * x).sum::<f64>() * area * area;
    }
    (esc[0], esc_s[0], e, v.sqrt())
}

#[test]
fn analog_detector_energy_equals_forward_escape_energy() {
    let (esc, _, det, _) = energies(false, 0.001, 200_000);
    eprintln!("forward escape {esc} keV, detector {det} keV per history");
    assert!(esc > 1.0);
    assert!((det / esc - 1.0).abs() < 1e-9, "detector {det} vs escape {esc}");
}

#[test]
fn forced_detection_energy_equals_forward_escape_energy_within_statistics() {
    let (esc, esc_s, det, det_s) = energies(true, 3.0, 40_000);
    let z = (det - esc) / (esc_s * esc_s + det_s * det_s).sqrt();
    eprintln!("forward escape {esc} ± {esc_s} keV, forced detection {det} ± {det_s} keV (z = {z:.2})");
    assert!(z.abs() < 4.0, "z = {z}");
}
