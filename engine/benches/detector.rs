//! P2 (imaging scatter) benchmark: time per batch of histories for the analog and the
//! forced-detection detector, and — printed once — the efficiency 1/(σ²T) of the ROI mean
//! scatter for both and their ratio. Fixed seeds. Coarse pixels (1 cm) keep the per-run set-up
//! short; `DOSEMILL_P2_PITCH_CM=0.2` runs the reference 2 mm pitch.

use criterion::{criterion_group, criterion_main, Criterion};
use dosemill_engine::score::detector::p2;
use dosemill_engine::transport::{run, RunSettings};

fn pitch() -> f64 {
    std::env::var("DOSEMILL_P2_PITCH_CM").ok().and_then(|s| s.parse().ok()).unwrap_or(1.0)
}

fn bench(c: &mut Criterion) {
    let pitch = pitch();
    let (a, f, gain) = p2::efficiency_gain(pitch, p2::REFERENCE_ROI_CM, p2::Estimator::Forced, 200_000, 10_000, 2, 1);
    let b = p2::estimate(pitch, p2::REFERENCE_ROI_CM, p2::Estimator::ForcedEnergyBias, 10_000, 2, 1);
    let d = p2::estimate(pitch, p2::REFERENCE_ROI_CM, p2::Estimator::ForcedBothBiases, 10_000, 2, 1);
    let e = p2::estimate(pitch, p2::REFERENCE_ROI_CM, p2::Estimator::ForcedSteered, 10_000, 2, 1);
    eprintln!(
        "P2 ({pitch} cm pixels): analog ROI scatter {:.4e} ± {:.2e} in {:.2} s (eff {:.3e}/s); forced {:.4e} ± {:.2e} in {:.2} s (eff {:.3e}/s); gain {gain:.1}; SPR {:.2}; forced + energy bias {:.4e} ± {:.2e} in {:.2} s (gain {:.1}); forced + both biases {:.4e} ± {:.2e} in {:.2} s (gain {:.1}); forced + biases + steer {:.4e} ± {:.2e} in {:.2} s (gain {:.1})",
        a.roi_scatter, a.roi_scatter_sigma, a.wall_time_s, a.efficiency_per_s, f.roi_scatter, f.roi_scatter_sigma, f.wall_time_s, f.efficiency_per_s, f.spr_roi, b.roi_scatter, b.roi_scatter_sigma, b.wall_time_s, b.efficiency_per_s / a.efficiency_per_s,
        d.roi_scatter, d.roi_scatter_sigma, d.wall_time_s, d.efficiency_per_s / a.efficiency_per_s,
        e.roi_scatter, e.roi_scatter_sigma, e.wall_time_s, e.efficiency_per_s / a.efficiency_per_s
    );
    for (est, name) in [(p2::Estimator::Analog, "analog"), (p2::Estimator::Forced, "forced"), (p2::Estimator::ForcedEnergyBias, "forced_energy_bias"), (p2::Estimator::ForcedBothBiases, "forced_both_biases"), (p2::Estimator::ForcedSteered, "forced_steered")] {
        let p = p2::problem(pitch, p2::REFERENCE_ROI_CM, est);
        let n = if est == p2::Estimator::Analog { 10_000 } else { 500 };
        c.bench_function(&format!("p2_{name}_{n}_histories"), |b| {
            b.iter(|| run(&p, &RunSettings { histories: n, seed: 2, chunk_histories: n, threads: 1, progress: false }))
        });
    }
}

criterion_group! { name = benches; config = Criterion::default().sample_size(10); targets = bench }
criterion_main!(benches);
