//! μ/ρ and μen/ρ of water, dry air, aluminium, copper and lead against NIST Standard Reference
//! Database 126 (Hubbell & Seltzer, "Tables of X-Ray Mass Attenuation Coefficients and Mass
//! Energy-Absorption Coefficients"), values as listed in REFERENCES.md (from memory).
//! Criteria: μ/ρ within 1 %, μen/ρ within 2 % at every listed energy; lead's K edge within 1.5 %
//! on both sides. Run with `--nocapture` to see the deviation table.

use dosemill_xsdata::{coefficients, elements, library};

const KEV: [f64; 9] = [20.0, 30.0, 40.0, 50.0, 60.0, 80.0, 100.0, 150.0, 200.0];

/// μ/ρ (cm²/g), NIST SRD 126 (from memory); NaN = not listed.
#[rustfmt::skip]
const MU_RHO: [(&str, [f64; 9]); 5] = [
    ("water", [0.8096, 0.3756, 0.2683, 0.2269, 0.2059, 0.1837, 0.1707, 0.1505, 0.1370]),
    ("air", [0.7779, 0.3538, 0.2485, 0.2080, 0.1875, 0.1662, 0.1541, 0.1356, 0.1233]),
    ("aluminium", [3.441, 1.128, 0.5685, 0.3681, 0.2778, 0.2018, 0.1704, 0.1378, f64::NAN]),
    ("copper", [33.79, 10.92, 4.862, 2.613, 1.593, 0.7630, 0.4584, 0.2217, 0.1559]),
    ("lead", [86.36, 30.32, 14.36, 8.041, 5.021, 2.419, 5.549, 2.014, 0.9985]),
];

/// μen/ρ (cm²/g), NIST SRD 126 (from memory); NaN = not listed.
#[rustfmt::skip]
const MUEN_RHO: [(&str, [f64; 9]); 3] = [
    ("water", [0.5503, 0.1557, 0.06947, 0.04223, 0.03190, 0.02597, 0.02546, 0.02764, 0.02967]),
    ("air", [0.5389, 0.1537, 0.06833, 0.04098, 0.03041, 0.02407, 0.02325, 0.02496, 0.02672]),
    ("aluminium", [3.094, 0.8778, 0.3601, 0.1840, 0.1099, 0.05511, 0.03794, 0.02827, f64::NAN]),
];

fn dev(ours: f64, nist: f64) -> f64 {
    (ours - nist) / nist
}

#[test]
fn mu_rho_within_1_percent_of_nist() {
    let mut failures = Vec::new();
    eprintln!(
        "{:<10} {:>6} {:>10} {:>10} {:>8}",
        "material", "keV", "ours", "NIST", "dev %"
    );
    for (name, values) in MU_RHO {
        let m = library::lookup(name).unwrap();
        for (kev, nist) in KEV.iter().zip(values) {
            if nist.is_nan() {
                continue;
            }
            let ours = m.mu_rho_cm2_g(*kev).unwrap();
            let d = dev(ours, nist);
            eprintln!(
                "{name:<10} {kev:>6} {ours:>10.5} {nist:>10.5} {:>8.3}",
                d * 100.0
            );
            if d.abs() > 0.01 {
                failures.push(format!(
                    "{name} {kev} keV: {ours} vs {nist} ({:.2} %)",
                    d * 100.0
                ));
            }
        }
    }
    assert!(failures.is_empty(), "μ/ρ outside 1 %: {failures:#?}");
}

#[test]
fn muen_rho_within_2_percent_of_nist() {
    let mut failures = Vec::new();
    eprintln!(
        "{:<10} {:>6} {:>10} {:>10} {:>8} {:>10} {:>8}",
        "material", "keV", "direct", "NIST", "dev %", "table", "dev %"
    );
    for (name, values) in MUEN_RHO {
        let m = library::lookup(name).unwrap();
        for (kev, nist) in KEV.iter().zip(values) {
            if nist.is_nan() {
                continue;
            }
            let direct = coefficients(&m, *kev).unwrap().muen_rho_cm2_g;
            let fast = m.muen_rho_cm2_g(*kev).unwrap();
            let (d1, d2) = (dev(direct, nist), dev(fast, nist));
            eprintln!(
                "{name:<10} {kev:>6} {direct:>10.5} {nist:>10.5} {:>8.3} {fast:>10.5} {:>8.3}",
                d1 * 100.0,
                d2 * 100.0
            );
            for (what, d, v) in [("direct", d1, direct), ("table", d2, fast)] {
                if d.abs() > 0.02 {
                    failures.push(format!(
                        "{name} {kev} keV ({what}): {v} vs {nist} ({:.2} %)",
                        d * 100.0
                    ));
                }
            }
        }
    }
    assert!(failures.is_empty(), "μen/ρ outside 2 %: {failures:#?}");
}

#[test]
fn lead_k_edge_within_1_5_percent() {
    // NIST SRD 126 (from memory): Pb K edge 88.0045 keV, μ/ρ 1.910 just below, 7.683 just above.
    let pb = library::lookup("lead").unwrap();
    let el = elements().get(82).unwrap();
    let edge = el
        .edges_kev()
        .iter()
        .copied()
        .min_by(|a, b| (a - 88.0045).abs().total_cmp(&(b - 88.0045).abs()))
        .unwrap();
    assert!(
        (edge - 88.0045).abs() < 0.05,
        "Pb K edge in the tables at {edge} keV"
    );
    let below = pb.mu_rho_cm2_g(edge * (1.0 - 1e-6)).unwrap();
    let above = pb.mu_rho_cm2_g(edge).unwrap();
    let above2 = pb.mu_rho_cm2_g(edge * (1.0 + 1e-6)).unwrap();
    eprintln!(
        "Pb K edge {edge} keV: below {below:.4} ({:.3} %), above {above:.4} ({:.3} %)",
        dev(below, 1.910) * 100.0,
        dev(above, 7.683) * 100.0
    );
    assert!(dev(below, 1.910).abs() <= 0.015, "below edge {below}");
    assert!(dev(above, 7.683).abs() <= 0.015, "above edge {above}");
    assert!(
        (above2 - above).abs() / above < 1e-4,
        "value at the edge is the above-edge value"
    );
}

#[test]
fn coefficients_are_consistent() {
    // Narrow-beam relations (Beer–Lambert): HVL = ln2/μ, TVL = ln10/μ, mfp = 1/μ, μ = (μ/ρ)·ρ.
    let al = library::lookup("Al").unwrap();
    let c = coefficients(&al, 30.0).unwrap();
    assert!((c.mu_per_cm - c.mu_rho_cm2_g * 2.699).abs() < 1e-12 * c.mu_per_cm);
    assert!((c.hvl_cm * c.mu_per_cm - std::f64::consts::LN_2).abs() < 1e-12);
    assert!((c.tvl_cm * c.mu_per_cm - std::f64::consts::LN_10).abs() < 1e-12);
    assert!((c.mfp_cm * c.mu_per_cm - 1.0).abs() < 1e-12);
    assert!(c.mu_rho_no_coherent_cm2_g < c.mu_rho_cm2_g);
    assert!(c.muen_rho_cm2_g <= c.mutr_rho_cm2_g && c.mutr_rho_cm2_g < c.mu_rho_no_coherent_cm2_g);
    // Energies outside the tables are a typed error naming the value and the range.
    let e = coefficients(&al, 900.0).unwrap_err().to_string();
    assert!(e.contains("900") && e.contains("1–800"), "{e}");
}
