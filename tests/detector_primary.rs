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

/// A focal spot: the MC primary (start points drawn over a 1.0 × 0.6 cm spot, aperture
/// 6.4 × 6.4 cm at 40 cm, so the field edge at u, v = ±8 cm on the detector has penumbrae of
/// 1.5 and 0.9 cm straddling the pixel boundaries there) against the ray-traced
/// image averaged over 8 × 8 spot points and 8 × 8 sub-pixel points.
#[test]
fn focal_spot_primary_matches_ray_tracing() {
    let source = r#"kind = "point"
position_cm = [0, 0, -100]
field = { shape = "rectangle", width_cm = 6.4, height_cm = 6.4 }
field_distance_cm = 40
focal_spot_cm = [1.0, 0.6]"#;
    let p = problem(&deck(source, "response = \"energy_fluence\"\nprimary_subpixels = 8\nprimary_focal_points = 8", 1));
    check(&p, 3_000_000);
}

/// Geometric unsharpness (textbook imaging geometry, e.g. Bushberg et al., *The Essential
/// Physics of Medical Imaging*, from memory): a uniform focal spot of width f, an edge at
/// distance d from the focus and the image plane at D give a linear penumbra of width
/// U = f (D − d)/d centred on the edge's projection. Here f = 1 cm along u, the aperture edge
/// at d = 40 cm (u = 2.8 cm), D = 100 cm: U = 1.5 cm around u = 7 cm (a geometry where the
/// penumbra's width depends on where each ray crosses the aperture plane, unlike D = 2d). Read off the noiseless
/// primary at 0.05 cm pitch, divided by the inverse-square × cosine factor of a point focus:
/// - pixels wholly beyond 7 + U/2 are exactly dark, those wholly before 7 − U/2 are at the
///   plateau (within 1e-3: the spot's 1/r² spread is ~1e-4), and the pixel just inside 7 + U/2
///   is lit;
/// - every pixel matches the pixel average of the exact linear ramp within 1/(2·16) (the
///   largest error of a 16-point midpoint rule over the spot for a step) + 1e-3;
/// - the integral of the profile equals the sharp edge's position within 1e-3 cm (exact for a
///   symmetric midpoint rule: the mean of the step positions is the centre's).
#[test]
fn focal_spot_penumbra_is_the_geometric_unsharpness() {
    let (d_ap, big_d, f, edge, p): (f64, f64, f64, f64, f64) = (40.0, 100.0, 1.0, 7.0, 0.05);
    let deck = format!(
        r#"
[run]
histories = 1
seed = 1

[source]
kind = "point"
position_cm = [0, 0, -100]
field = {{ shape = "rectangle", width_cm = 5.6, height_cm = 5.6 }}
field_distance_cm = {d_ap}
focal_spot_cm = [{f}, 0]
energy_kev = 60

[geometry]
kind = "slabs"
world = "vacuum"
start_z_cm = -12

[[geometry.layer]]
material = "air"
thickness_cm = 0.1

[[score]]
name = "edge"
kind = "detector"
position_cm = [{edge}, 0, 0]
size_cm = [3, 0.05]
pixel_pitch_cm = {p}
response = "photon_fluence"
primary_subpixels = 32
primary_focal_points = 16
"#
    );
    let pr = problem(&deck);
    let d = detector(&pr.scorers[0]);
    let img = d.setup.primary_deterministic.as_ref().expect("deterministic primary");
    assert_eq!(img.len(), 60);
    let u_big = f * (big_d - d_ap) / d_ap;
    // Point-focus density: |cos θ| / (Ω r²), Ω of the 5.6 × 5.6 cm aperture at 40 cm; the air's
    // attenuation (0.1 cm at 60 keV, 2e-5) is left in.
    let a2 = 5.6f64 * 5.6;
    let omega = 4.0 * (a2 / ((a2 + 4.0 * d_ap * d_ap) * (a2 + 4.0 * d_ap * d_ap)).sqrt()).asin();
    let mut integral = 0.0;
    for (i, &v) in img.iter().enumerate() {
        let (lo, hi) = (edge - 1.5 + i as f64 * p, edge - 1.5 + (i + 1) as f64 * p);
        let u = 0.5 * (lo + hi);
        let r2 = u * u + big_d * big_d;
        let plateau = big_d / r2.sqrt() / (omega * r2);
        let ratio = v / plateau;
        // Exact ramp: 1 before edge − U/2, 0 after edge + U/2; its pixel average.
        let ramp = |x: f64| ((edge + 0.5 * u_big - x) / u_big).clamp(0.0, 1.0);
        let prim = |x: f64| {
            // ∫ ramp from lo to x (piecewise: constant 1, linear, 0).
            let a = edge - 0.5 * u_big;
            let b = edge + 0.5 * u_big;
            let y = x.clamp(lo, hi);
            let part1 = (y.min(a) - lo).max(0.0);
            let (s, t) = (lo.max(a), y.min(b));
            let part2 = if t > s { (t - s) * 0.5 * (ramp(s) + ramp(t)) } else { 0.0 };
            part1 + part2
        };
        let expected = prim(hi) / p;
        assert!((ratio - expected).abs() < 1.0 / 32.0 + 1e-3, "pixel [{lo:.2}, {hi:.2}]: {ratio} vs ramp {expected}");
        if lo >= edge + 0.5 * u_big - 1e-9 {
            assert_eq!(v, 0.0, "pixel [{lo:.2}, {hi:.2}] beyond the penumbra is lit");
        }
        if hi <= edge - 0.5 * u_big + 1e-9 {
            assert!((ratio - 1.0).abs() < 1e-3, "pixel [{lo:.2}, {hi:.2}] before the penumbra: {ratio}");
        }
        if (hi - (edge + 0.5 * u_big)).abs() < 1e-9 {
            assert!(v > 0.0, "the last pixel inside the penumbra is dark");
        }
        integral += ratio * p;
    }
    assert!((integral - 1.5).abs() < 1e-3, "∫ profile = {integral} cm, sharp edge at 1.5 cm from the face's start");
}
