//! P2 efficiency measurement (slow; run with `-- --ignored --nocapture`): analog vs forced
//! detection for the ROI mean scatter, at the reference 2 mm pitch. Prints the figures; the
//! assertion is only that both estimates agree within 4σ (the same expectation).

use dosemill_engine::score::detector::p2;

#[test]
#[ignore]
fn p2_forced_detection_efficiency_gain() {
    let pitch: f64 = std::env::var("DOSEMILL_P2_PITCH_CM").ok().and_then(|s| s.parse().ok()).unwrap_or(0.2);
    for est in [p2::Estimator::Forced, p2::Estimator::ForcedEnergyBias, p2::Estimator::ForcedBothBiases, p2::Estimator::ForcedSteered] {
        let (a, f, gain) = p2::efficiency_gain(pitch, p2::REFERENCE_ROI_CM, est, 1_000_000, 100_000, 2, 1);
        eprintln!("analog: {a:?}\n{}: {f:?}\ngain {gain:.1}", est.label());
        let z = (a.roi_scatter - f.roi_scatter) / (a.roi_scatter_sigma.powi(2) + f.roi_scatter_sigma.powi(2)).sqrt();
        eprintln!("z = {z:.2}");
        assert!(z.abs() < 4.0);
    }
}
