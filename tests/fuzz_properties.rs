//! Properties of the engine's sampling over many random inputs (proptest, bounded cases):
//! energies and directions are finite, directions stay unit vectors, scattered energies stay
//! within the kinematic limits, and source probabilities are positive and sum to one.
//!
//! Compton kinematics: E'/E = 1 / (1 + k (1 − cos θ)), k = E / 511 keV, so E'/E lies in
//! [1/(1+2k), 1] (any textbook, e.g. Attix, "Introduction to Radiological Physics", ch. 7).

use dosemill_engine::physics::{compton, isotropic, rotate};
use dosemill_engine::rng::history_stream;
use dosemill_engine::source::{AliasTable, Emission, EnergySpectrum, Field, Source};
use dosemill_geometry::Vec3;
use proptest::prelude::*;

const ELECTRON_REST_KEV: f64 = 510.998_95; // CODATA 2018

fn unit(v: Vec3) -> bool {
    v.is_finite() && (v.norm() - 1.0).abs() < 1e-12
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 300, failure_persistence: None, ..ProptestConfig::default() })]

    #[test]
    fn compton_sampling_stays_within_kinematics(kev in 1.0f64..300.0, z in 1u32..=92, bound: bool, seed: u64) {
        let el = dosemill_xsdata::elements().get(z).unwrap();
        let mut rng = history_stream(seed, 0);
        let k = kev / ELECTRON_REST_KEV;
        for _ in 0..200 {
            let (ratio, cos) = compton::sample(kev, el, bound, &mut rng);
            prop_assert!(ratio.is_finite() && cos.is_finite());
            prop_assert!((-1.0..=1.0).contains(&cos), "cos θ = {cos}");
            prop_assert!(ratio > 0.0 && ratio <= 1.0 + 1e-12, "E'/E = {ratio}");
            prop_assert!(ratio >= 1.0 / (1.0 + 2.0 * k) - 1e-12, "E'/E = {ratio} below the Compton edge");
            // Without Doppler broadening the energy follows the angle exactly.
            let expect = 1.0 / (1.0 + k * (1.0 - cos));
            prop_assert!((ratio - expect).abs() < 1e-9, "E'/E {ratio} vs {expect}");
        }
    }

    #[test]
    fn rotation_keeps_unit_length_and_angle(seed: u64, cos in -1.0f64..=1.0) {
        let mut rng = history_stream(seed, 1);
        let mut d = isotropic(&mut rng);
        prop_assert!(unit(d));
        for _ in 0..1000 {
            let next = rotate(d, cos, rng.azimuth());
            prop_assert!(unit(next), "|d| = {}", next.norm());
            prop_assert!((next.dot(d) - cos).abs() < 1e-9, "angle not kept: {} vs {cos}", next.dot(d));
            d = next;
        }
    }

    #[test]
    fn point_source_samples_unit_directions_and_listed_energies(seed: u64, w in prop::collection::vec(0.0f64..10.0, 1..20), r in 0.1f64..20.0, dist in 1.0f64..200.0) {
        prop_assume!(w.iter().any(|&x| x > 0.0));
        let table = AliasTable::new(&w).unwrap();
        let p = table.probabilities();
        prop_assert!((p.iter().sum::<f64>() - 1.0).abs() < 1e-12);
        for (pi, wi) in p.iter().zip(&w) {
            prop_assert!(*pi >= 0.0 && (*pi > 0.0) == (*wi > 0.0), "probability {pi} for weight {wi}");
        }
        let kev: Vec<f64> = (0..w.len()).map(|i| 20.0 + i as f64 * 5.0).collect();
        let src = Source::new(
            Emission::Point { origin_cm: Vec3::new(0.0, 0.0, -dist), direction: Vec3::new(0.0, 0.0, 1.0), field: Field::Circle { radius_cm: r }, field_distance_cm: dist, focal_spot_cm: [0.0, 0.0] },
            EnergySpectrum::Discrete { kev: kev.clone(), table },
        );
        let mut rng = history_stream(seed, 2);
        for _ in 0..200 {
            let (pos, dir, e) = src.sample(&mut rng);
            prop_assert!(pos.is_finite() && unit(dir));
            prop_assert!(dir.z > 0.0, "points away from the field");
            let i = kev.iter().position(|&k| k == e);
            prop_assert!(i.is_some_and(|i| w[i] > 0.0), "energy {e} not a listed line of positive weight");
            // The ray reaches the field plane inside the circle.
            let t = dist / dir.z;
            prop_assert!((dir.x * t).hypot(dir.y * t) <= r * (1.0 + 1e-9));
        }
    }
}
