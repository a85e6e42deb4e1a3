//! Scatter-to-primary ratio and scatter fraction behind water slabs (forced detection, coarse
//! pixels for speed). Expectations from outside the engine: SPR grows with object thickness
//! and with field size (more scattering volume seen by the central pixel); for 20 cm of water,
//! a 30 × 30 cm field, no grid and an 80 kV beam, central SPR values of about 3 to 7 are common
//! practice in radiography and cone-beam imaging literature (quoted from memory).

use dosemill_engine::score::detector::DetectorScorer;
use dosemill_engine::score::Scorer;
use dosemill_engine::transport::{run, RunSettings};
use std::path::Path;

fn spr(thickness_cm: f64, field_cm: f64, response: &str, histories: u64) -> (f64, f64, f64) {
    let deck = format!(
        r#"
[run]
histories = 1

[source]
kind = "point"
position_cm = [0, 0, -100]
field = {{ shape = "rectangle", width_cm = {field_cm}, height_cm = {field_cm} }}
field_distance_cm = 100

[source.tube]
kvp = 80
filters = ["Al:2.5"]

[geometry]
kind = "slabs"
world = "vacuum"
start_z_cm = {start}

[[geometry.layer]]
material = "water"
thickness_cm = {thickness_cm}

[[score]]
name = "image"
kind = "detector"
position_cm = [0, 0, 0]
size_cm = [40, 40]
pixel_pitch_cm = 2.5
{response}
forced_detection = true
"#,
        start = -2.0 - thickness_cm
    );
    let d = dosemill_engine::deck::load_str(&deck, Path::new("runs/detector_test.toml")).unwrap_or_else(|e| panic!("{e:?}"));
    let p = dosemill_engine::setup::build(&d.resolved).unwrap_or_else(|e| panic!("{e}")).0;
    let r = run(&p, &RunSettings { histories, seed: 9, chunk_histories: 2_000, threads: 2, progress: false });
    let Scorer::Detector(det) = &r.scorers[0] else { panic!() };
    let det: &DetectorScorer = det;
    let s = det.summary(r.histories);
    let (q, qs) = s.spr_roi_deterministic.unwrap();
    let (p_roi, _) = det.setup.primary_deterministic_roi.unwrap();
    let sf = q / (1.0 + q);
    eprintln!("{thickness_cm} cm water, {field_cm} cm field: SPR {q:.3} ± {qs:.3}, scatter fraction {sf:.3} (MC-primary SPR {:.3}, primary {p_roi:.4e})", s.spr_roi.0);
    (q, qs, sf)
}

#[test]
fn spr_rises_with_thickness_and_field_and_is_common_practice_for_20_cm() {
    // The signal of a caesium iodide flat panel (0.6 mm), the detector behind most quoted values.
    let csi = "response = \"absorbed\"\nlayer = { material = \"csi\", thickness_cm = 0.06 }";
    let (t10, s10, _) = spr(10.0, 30.0, csi, 8_000);
    let (t20, s20, sf20) = spr(20.0, 30.0, csi, 30_000);
    let (small, ss, _) = spr(20.0, 10.0, csi, 8_000);
    // Energy fluence, for the record (printed, not checked against the range).
    spr(20.0, 30.0, "response = \"energy_fluence\"", 30_000);
    assert!(t20 - t10 > 4.0 * (s10 * s10 + s20 * s20).sqrt(), "thickness: {t10} → {t20}");
    assert!(t20 - small > 4.0 * (ss * ss + s20 * s20).sqrt(), "field: {small} → {t20}");
    assert!((3.0..=7.0).contains(&t20), "central SPR for 20 cm water, 30 cm field: {t20}");
    assert!((sf20 - t20 / (1.0 + t20)).abs() < 1e-12 && sf20 > 0.7);
}

/// The region of interest is set from the deck (`roi_size_cm`): its mean scatter is the mean of
/// the scatter image over the pixels whose centres lie in the centred rectangle (here 3 × 1
/// pixels of an 11 × 11 face), not over the default 5 × 5 cm.
#[test]
fn roi_size_from_the_deck() {
    use dosemill_engine::score::detector::{summary, CATEGORIES};
    let deck = |roi: &str| {
        format!(
            r#"
[run]
histories = 1
[source]
kind = "point"
position_cm = [0, 0, -100]
field = {{ shape = "rectangle", width_cm = 10, height_cm = 10 }}
field_distance_cm = 100
energy_kev = 60
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
size_cm = [11, 11]
pixel_pitch_cm = 1
{roi}
"#
        )
    };
    let scatter = CATEGORIES.iter().position(|c| *c == "scatter").unwrap();
    for (roi, cols, rows) in [("roi_size_cm = [3, 1]", 3usize, 1usize), ("", 5, 5)] {
        let d = dosemill_engine::deck::load_str(&deck(roi), Path::new("runs/detector_test.toml")).unwrap_or_else(|e| panic!("{e:?}"));
        let p = dosemill_engine::setup::build(&d.resolved).unwrap_or_else(|e| panic!("{e}")).0;
        let r = run(&p, &RunSettings { histories: 40_000, seed: 4, chunk_histories: 2_000, threads: 2, progress: false });
        let Scorer::Detector(det) = &r.scorers[0] else { panic!() };
        let (img, _) = det.image(scatter, r.histories);
        let mut sum = 0.0;
        for iv in (5 - rows / 2)..=(5 + rows / 2) {
            for iu in (5 - cols / 2)..=(5 + cols / 2) {
                sum += img[iv * 11 + iu];
            }
        }
        let want = sum / (cols * rows) as f64;
        let got = det.summary(r.histories).mean[summary::ROI_SCATTER];
        assert!(want > 0.0 && (got / want - 1.0).abs() < 1e-9, "`{roi}`: ROI mean {got} vs pixel mean {want}");
    }
}
