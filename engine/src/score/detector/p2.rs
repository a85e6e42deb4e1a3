//! Reference problem P2 (imaging scatter): an 80 kV tube (2.5 mm Al), a point source collimated
//! to a 30 × 30 cm field at 100 cm, a 20 cm water slab ending 2 cm before the detector, and a
//! 40 × 40 cm detector at 100 cm (energy-fluence response, no grid), in vacuum. The figure of
//! merit is the efficiency 1/(σ_rel² T) of the mean scatter in the central ROI (5 × 5 cm for
//! the reference figure, [`REFERENCE_ROI_CM`]).

use super::{summary, DetectorScorer};
use crate::score::Scorer;
use crate::transport::{run, Problem, RunSettings};

/// Side of the central ROI of the reference figure (cm).
pub const REFERENCE_ROI_CM: f64 = 5.0;

/// How P2's detector is scored.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Estimator {
    /// Photons crossing the face (no variance reduction).
    Analog,
    /// Forced detection (next-event points along flights, default settings).
    Forced,
    /// Forced detection with the source energies biased toward the detector
    /// (`[source.energy_bias]`, default floor).
    ForcedEnergyBias,
    /// Forced detection with the energy bias and the start rays biased toward the ROI
    /// (`[source.field_bias]`, default length and floor).
    ForcedBothBiases,
    /// Both biases and Compton directions steered toward the face
    /// (`forced_detection_steer = 0.3`, [`STEER`]).
    ForcedSteered,
}

/// The steered share of Compton directions of [`Estimator::ForcedSteered`] (chosen on P2, README).
pub const STEER: f64 = 0.3;

impl Estimator {
    /// The label the benchmarks print.
    pub fn label(self) -> &'static str {
        match self {
            Estimator::Analog => "analog",
            Estimator::Forced => "forced detection",
            Estimator::ForcedEnergyBias => "forced + energy bias",
            Estimator::ForcedBothBiases => "forced + both biases",
            Estimator::ForcedSteered => "forced + biases + steer",
        }
    }
}

/// The deck of P2 with the given pixel pitch (cm; 0.2 for the reference), ROI side (cm),
/// estimator and histories.
pub fn deck(pixel_pitch_cm: f64, roi_cm: f64, estimator: Estimator, histories: u64) -> String {
    let forced_detection = estimator != Estimator::Analog;
    let energy_bias = match estimator {
        Estimator::ForcedEnergyBias => "\n[source.energy_bias]\ntoward = \"image\"\n",
        Estimator::ForcedBothBiases | Estimator::ForcedSteered => "\n[source.energy_bias]\ntoward = \"image\"\n\n[source.field_bias]\ntoward = \"image\"\n",
        _ => "",
    };
    let steer = if estimator == Estimator::ForcedSteered { format!("forced_detection_steer = {STEER}\n") } else { String::new() };
    format!(
        r#"# P2: imaging scatter reference problem (demo scenario).
[run]
histories = {histories}
seed = 2
histories_per_chunk = 2000

[source]
kind = "point"
position_cm = [0, 0, -100]
field = {{ shape = "rectangle", width_cm = 30, height_cm = 30 }}
field_distance_cm = 100

[source.tube]
kvp = 80
filters = ["Al:2.5"]
{energy_bias}
[geometry]
kind = "slabs"
world = "vacuum"
start_z_cm = -22

[[geometry.layer]]
name = "water"
material = "water"
thickness_cm = 20

[[score]]
name = "image"
kind = "detector"
position_cm = [0, 0, 0]
size_cm = [40, 40]
pixel_pitch_cm = {pixel_pitch_cm}
roi_size_cm = {roi_cm}
response = "energy_fluence"
forced_detection = {forced_detection}
{steer}"#
    )
}

/// The P2 problem.
pub fn problem(pixel_pitch_cm: f64, roi_cm: f64, estimator: Estimator) -> Problem {
    let text = deck(pixel_pitch_cm, roi_cm, estimator, 1);
    let d = crate::deck::load_str(&text, std::path::Path::new("p2.toml")).expect("P2 deck is valid");
    crate::setup::build(&d.resolved).expect("P2 sets up").0
}

/// One estimator's result on P2.
#[derive(Debug, Clone, Copy)]
pub struct Estimate {
    /// Histories run.
    pub histories: u64,
    /// Mean ROI scatter (keV/cm² per history).
    pub roi_scatter: f64,
    /// Its standard error.
    pub roi_scatter_sigma: f64,
    /// ROI SPR (scatter over the deterministic primary).
    pub spr_roi: f64,
    /// Wall time of the run (s).
    pub wall_time_s: f64,
    /// Efficiency 1/(σ_rel² T) (1/s).
    pub efficiency_per_s: f64,
}

/// Runs P2 with one estimator.
pub fn estimate(pixel_pitch_cm: f64, roi_cm: f64, estimator: Estimator, histories: u64, seed: u64, threads: usize) -> Estimate {
    let p = problem(pixel_pitch_cm, roi_cm, estimator);
    let r = run(&p, &RunSettings { histories, seed, chunk_histories: 2_000, threads, progress: false });
    let Scorer::Detector(d) = &r.scorers[0] else { unreachable!("P2 has one detector") };
    let d: &DetectorScorer = d;
    let s = d.summary(r.histories);
    let (m, sg) = (s.mean[summary::ROI_SCATTER], s.sigma[summary::ROI_SCATTER]);
    let rel = sg / m;
    Estimate {
        histories: r.histories,
        roi_scatter: m,
        roi_scatter_sigma: sg,
        spr_roi: s.spr_roi_deterministic.map(|x| x.0).unwrap_or(f64::NAN),
        wall_time_s: r.wall_time_s,
        efficiency_per_s: 1.0 / (rel * rel * r.wall_time_s),
    }
}

/// Analog and forced-detection estimates of P2 and the efficiency gain of the latter
/// (`estimator`: any but [`Estimator::Analog`]).
pub fn efficiency_gain(pixel_pitch_cm: f64, roi_cm: f64, estimator: Estimator, analog_histories: u64, forced_histories: u64, seed: u64, threads: usize) -> (Estimate, Estimate, f64) {
    let a = estimate(pixel_pitch_cm, roi_cm, Estimator::Analog, analog_histories, seed, threads);
    let f = estimate(pixel_pitch_cm, roi_cm, estimator, forced_histories, seed, threads);
    let gain = f.efficiency_per_s / a.efficiency_per_s;
    (a, f, gain)
}
