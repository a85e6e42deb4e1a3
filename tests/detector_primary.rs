//! Detector primary images: the analog (Monte Carlo) primary image against the noiseless
//! ray-traced primary image of the same problem. The reference is Beer–Lambert attenuation
//! along each source-to-pixel ray (exact for uncollided photons) with the inverse-square law of
//! an isotropic point source, an answer from outside the Monte Carlo.

use dosemill_engine::score::detector::{DetectorScorer, CATEGORIES};
use dosemill_engine::score::Scorer;
use dosemill_engine::transport::{run, Problem, RunSettings};
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

fn deck(source: &str, response: &str, histories: u64) -> String {
    format!(
        r#"
[run]
histories = {histories}
seed = 11
fluorescence = true

[source]
{source}

[source.tube]
kvp = 80
filters = ["Al:2.5"]

[geometry]
kind = "slabs"
world = "vacuum"
start_z_cm = -12

[[geometry.layer]]
material = "water"
thickness_cm = 10

[[score]]
name = "image"
kind = "detector"
position_cm = [0, 0, 0]
size_cm = [20, 20]
pixel_pitch_cm = 2
{response}
"#
    )
}

/// Per-pixel z-test of the MC primary against the deterministic image (|z| < 4 for every
/// pixel, and at most 1 % of pixels beyond |z| = 3, binomial with p = 0.27 %), and the mean over
/// the face within 0.5 % and within 4σ.
fn check(p: &Problem, histories: u64) {
    let settings = RunSettings { histories, seed: 11, chunk_histories: 10_000, threads: 2, progress: false };
    let r = run(p, &settings);
    let d = detector(&r.scorers[0]);
    assert_eq!(CATEGORIES[0], "primary");
    let (mc, sigma) = d.image(0, r.histories);
    let det = d.setup.primary_deterministic.as_ref().expect("deterministic primary");
    let mut beyond3 = 0;
    let (mut sum_mc, mut sum_det, mut var) = (0.0, 0.0, 0.0);
    for i in 0..mc.len() {
        sum_mc += mc[i];
        sum_det += det[i];
        var += sigma[i] * sigma[i];
        if det[i] == 0.0 {
            assert_eq!(mc[i], 0.0, "pixel {i} outside the field scored primary");
            continue;
        }
        let z = (mc[i] - det[i]) / sigma[i];
        assert!(z.abs() < 4.0, "pixel {i}: MC {} ± {} vs deterministic {}", mc[i], sigma[i], det[i]);
        if z.abs() > 3.0 {
            beyond3 += 1;
        }
    }
    assert!(beyond3 <= mc.len() / 100 + 1, "{beyond3} pixels beyond 3σ");
    let rel = sum_mc / sum_det - 1.0;
    let z = (sum_mc - sum_det) / var.sqrt();
    eprintln!("face mean MC/deterministic − 1 = {rel:.5} (z = {z:.2})");
    assert!(rel.abs() < 0.005 && z.abs() < 4.0, "face mean MC/deterministic − 1 = {rel} (z = {z})");
}

#[test]
fn point_source_primary_matches_ray_tracing_absorbed_in_csi() {
    let source = r#"kind = "point"
position_cm = [0, 0, -100]
field = { shape = "rectangle", width_cm = 16, height_cm = 16 }
field_distance_cm = 100"#;
    let p = problem(&deck(source, "response = \"absorbed\"\nlayer = { material = \"csi\", thickness_cm = 0.06 }", 1));
    check(&p, 5_000_000);
}

#[test]
fn parallel_beam_primary_matches_ray_tracing_energy_fluence() {
    let source = r#"kind = "parallel"
position_cm = [0, 0, -20]
field = { shape = "circle", radius_cm = 7 }"#;
    let p = problem(&deck(source, "response = \"energy_fluence\"", 1));
    check(&p, 2_000_000);
}
