//! Small pieces of the protocol module against outside references.

use dosemill_engine::protocol::dosimetry::{field_solid_angle_sr, rectangle_solid_angle_sr, Estimate};
use dosemill_engine::protocol::format::line_col;
use dosemill_engine::protocol::{incident_air_kerma_mgy, report::base64};
use dosemill_engine::source::Field;

// RFC 4648 section 10 test vectors.
#[test]
fn base64_matches_rfc_4648_vectors() {
    for (raw, enc) in [("", ""), ("f", "Zg=="), ("fo", "Zm8="), ("foo", "Zm9v"), ("foob", "Zm9vYg=="), ("fooba", "Zm9vYmE="), ("foobar", "Zm9vYmFy")] {
        assert_eq!(base64(raw.as_bytes()), enc);
    }
}

// Geometry: a cube face seen from the cube's centre subtends 4π/6 sr; a disc of radius r at
// distance d subtends 2π(1 − d/√(d² + r²)).
#[test]
fn solid_angles() {
    let w = rectangle_solid_angle_sr(2.0, 2.0, 1.0);
    assert!((w - 4.0 * std::f64::consts::PI / 6.0).abs() < 1e-12, "{w}");
    let c = field_solid_angle_sr(&Field::Circle { radius_cm: 3.0 }, 4.0);
    assert!((c - std::f64::consts::TAU * (1.0 - 0.8)).abs() < 1e-12, "{c}");
}

// First-order propagation for independent quantities (GUM, JCGM 100:2008, eq. 10): for a ratio
// the relative variances add.
#[test]
fn ratio_and_product_uncertainty() {
    let a = Estimate::new(3.0, 0.03);
    let b = Estimate::new(2.0, 0.04);
    let r = a.ratio(b);
    assert!((r.value - 1.5).abs() < 1e-15);
    assert!((r.sigma - 1.5 * (0.01f64.powi(2) + 0.02f64.powi(2)).sqrt()).abs() < 1e-15);
    let p = a.product(Estimate::exact(2.0));
    assert!((p.sigma - 0.06).abs() < 1e-15);
}

// Worked by hand: 50 µGy/mAs at 1 m, 10 mAs, 50 cm → 50 × 10 × 4 = 2000 µGy = 2 mGy.
#[test]
fn inverse_square_incident_air_kerma() {
    assert!((incident_air_kerma_mgy(50.0, 10.0, 50.0) - 2.0).abs() < 1e-12);
}

#[test]
fn line_and_column_of_offsets() {
    let t = "ab\ncde\nf";
    assert_eq!(line_col(t, 0), (1, 1));
    assert_eq!(line_col(t, 4), (2, 2));
    assert_eq!(line_col(t, 7), (3, 1));
}

// The on-axis plane-kerma scorer: a 60 keV pencil beam in vacuum crossing a disc of radius r
// scores exactly E·(μen/ρ)/(πr²) per history, and the water/air kerma ratio of the same photons
// equals the ratio of the NIST SRD 126 μen/ρ values at 60 keV (0.03190/0.03041, REFERENCES.md,
// from memory) within 1 %.
#[test]
fn plane_kerma_of_a_pencil_beam() {
    use dosemill_engine::physics::PhysicsOptions;
    use dosemill_engine::protocol::dosimetry::{emission_of, slab_problem, BeamShape};
    use dosemill_engine::score::{axial::PlaneKerma, Scorer};
    use dosemill_engine::source::EnergySpectrum;
    use dosemill_engine::transport::{run, RunSettings};
    use std::sync::Arc;
    let air = Arc::new(dosemill_xsdata::library::lookup("air").unwrap());
    let water = Arc::new(dosemill_xsdata::library::lookup("water").unwrap());
    let r = 0.3;
    let sc = PlaneKerma::new([0.0, 0.0], r, vec![5.0, 50.0], vec![air.clone(), water.clone()]).unwrap();
    let p = slab_problem(&water, 0.0, 10.0, 1.0, None, emission_of(&BeamShape::Pencil, 10.0), EnergySpectrum::Mono(60.0), vec![Scorer::PlaneKerma(sc.clone())], &PhysicsOptions::default()).unwrap();
    let res = run(&p, &RunSettings { histories: 1000, seed: 1, chunk_histories: 100, threads: 1, progress: false });
    let (m, s) = res.scorers[0].tally().mean_and_sigma(res.histories);
    let expected = 60.0 * air.muen_rho_cm2_g(60.0).unwrap() / (std::f64::consts::PI * r * r);
    for plane in 0..2 {
        let k_air = m[sc.bin(plane, 0, 0)];
        assert!((k_air / expected - 1.0).abs() < 1e-9, "{k_air} vs {expected}");
        assert_eq!(m[sc.bin(plane, 0, 1)], k_air, "all towards +z");
        assert_eq!(m[sc.bin(plane, 0, 2)], 0.0);
        assert!(s[sc.bin(plane, 0, 0)] < 1e-9 * k_air, "no spread for a monoenergetic pencil");
        let ratio = m[sc.bin(plane, 1, 0)] / k_air;
        assert!((ratio / (0.03190 / 0.03041) - 1.0).abs() < 0.01, "water/air {ratio}");
    }
}
