//! Checks of the embedded element tables that need no Python: structure, lookup, provenance,
//! errors, and comparison with handbook values and exact formulas.

mod common;

use common::SplitMix64;
use dosemill_xsdata::*;
use sha2::{Digest, Sha256};

/// Reference interpolation by bisection (the loader uses a direct index instead).
fn bisect_loglog(nodes: &[f64], values: &[f64], kev: f64) -> f64 {
    let n = nodes.len();
    let i = (nodes.partition_point(|e| *e <= kev).max(1) - 1).min(n - 2);
    let t = (kev / nodes[i]).ln() / (nodes[i + 1] / nodes[i]).ln();
    values[i] * (t * (values[i + 1] / values[i]).ln()).exp()
}

fn rel(a: f64, b: f64) -> f64 {
    (a / b - 1.0).abs()
}

// Source: the table format (element.rs header): nodes span 1–800 keV, ascending, every edge twice.
#[test]
fn grid_spans_range_with_duplicated_edges() {
    let t = elements();
    assert_eq!(t.all().len(), 98);
    let (mut lo, mut hi) = (usize::MAX, 0);
    for el in t.all() {
        let n = el.nodes_kev();
        assert_eq!(n[0], E_MIN_KEV);
        assert_eq!(*n.last().unwrap(), E_MAX_KEV);
        assert!(n.windows(2).all(|w| w[1] >= w[0]), "Z={} nodes not ascending", el.z);
        for &e in el.edges_kev() {
            let count = n.iter().filter(|x| **x == e).count();
            assert_eq!(count, 2, "Z={} edge {e} keV appears {count} times", el.z);
            let i = n.iter().position(|x| *x == e).unwrap();
            let p = el.photo_nodes_cm2_g();
            assert!(p[i + 1] > p[i], "Z={} no jump at edge {e}", el.z);
        }
        lo = lo.min(n.len());
        hi = hi.max(n.len());
    }
    println!("energy nodes per element: {lo}..{hi}");
    assert!(embedded_table_bytes().len() < 4_000_000, "table file should stay a few MB");
}

// Source: definition of log-log interpolation, evaluated by bisection as an independent reference.
#[test]
fn direct_index_lookup_matches_bisection() {
    let mut rng = SplitMix64(0x5eed_0001);
    for el in elements().all() {
        let nodes = el.nodes_kev();
        let mut energies: Vec<f64> = (0..2000).map(|_| (rng.uniform() * E_MAX_KEV.ln()).exp()).collect();
        energies.extend(nodes.iter().copied());
        energies.extend(el.edges_kev().iter().flat_map(|e| [e * (1.0 - 1e-12), e * (1.0 + 1e-12)]));
        for kev in energies {
            let i = el.interaction(kev);
            let cases = [
                (i.photo_cm2_g, el.photo_nodes_cm2_g()),
                (i.coherent_cm2_g, el.coherent_nodes_cm2_g()),
                (i.incoherent_cm2_g, el.incoherent_nodes_cm2_g()),
            ];
            for (got, values) in cases {
                let want = bisect_loglog(nodes, values, kev);
                assert!(rel(got, want) < 1e-12, "Z={} {kev} keV: {got} vs {want}", el.z);
            }
            assert_eq!(i.photo_cm2_g, el.photo_cm2_g(kev));
            assert_eq!(i.total_cm2_g(), el.total_cm2_g(kev));
        }
        // At an exact edge energy: the value above the edge.
        for &e in el.edges_kev() {
            let k = nodes.iter().position(|x| *x == e).unwrap();
            assert!(rel(el.photo_cm2_g(e), el.photo_nodes_cm2_g()[k + 1]) < 1e-12, "Z={} edge {e}", el.z);
            assert_eq!(el.photo_shell_shares(e), el.photo_shell_share_nodes()[k + 1]);
        }
    }
}

// Source: the stated clamps (F in [0, Z], F(0) = Z; S in [0, Z], S(0) = 0) and the definition of
// the interpolation (log-log where both ends are positive, else linear), checked by bisection.
#[test]
fn form_factor_and_incoherent_function() {
    let mut rng = SplitMix64(0x5eed_0002);
    for el in elements().all() {
        let z = el.z as f64;
        let x = el.x_nodes_inv_angstrom();
        assert_eq!(x[0], 0.0);
        assert!(*x.last().unwrap() >= 70.0);
        assert_eq!(el.form_factor(0.0), z);
        assert_eq!(el.incoherent_function(0.0), 0.0);
        for (f, s) in el.form_factor_nodes().iter().zip(el.incoherent_function_nodes()) {
            assert!((0.0..=z).contains(f) && (0.0..=z).contains(s), "Z={} F={f} S={s}", el.z);
        }
        for _ in 0..2000 {
            let q = 1e-4 * (rng.uniform() * (1e6f64).ln()).exp(); // 1e-4 .. 100 1/Å
            for (got, ys) in [
                (el.form_factor(q), el.form_factor_nodes()),
                (el.incoherent_function(q), el.incoherent_function_nodes()),
            ] {
                let i = (x.partition_point(|v| *v <= q) - 1).min(x.len() - 2);
                let want = if x[i] > 0.0 && ys[i] > 0.0 && ys[i + 1] > 0.0 {
                    let t = (q / x[i]).ln() / (x[i + 1] / x[i]).ln();
                    ys[i] * (t * (ys[i + 1] / ys[i]).ln()).exp()
                } else {
                    ys[i] + (ys[i + 1] - ys[i]) * (q - x[i]) / (x[i + 1] - x[i])
                };
                assert!((got - want).abs() <= 1e-12 * z, "Z={} x={q}: {got} vs {want}", el.z);
                assert!((0.0..=z).contains(&got));
            }
        }
    }
}

// Source: the jump-ratio model of subshell shares (share of a shell = 1 − 1/J of what the deeper
// shells leave), checked against the jump of the stored photo cross section at the K edge.
#[test]
fn shell_shares_follow_jump_ratios() {
    for el in elements().all() {
        let k_edge = el.shells()[0].edge_kev;
        for &kev in el.nodes_kev() {
            let s = el.photo_shell_shares(kev);
            assert!(s.iter().all(|v| (0.0..=1.0).contains(v)) && s.iter().sum::<f64>() <= 1.0 + 1e-12);
        }
        if k_edge > E_MIN_KEV * 1.01 {
            // The K jump of the photo data (within 0.5 % of the binding energy).
            let jump = *el.edges_kev().iter().find(|e| rel(**e, k_edge) < 5e-3).expect("K edge in grid");
            let k = el.nodes_kev().iter().position(|x| *x == jump).unwrap();
            let p = el.photo_nodes_cm2_g();
            let ratio = p[k + 1] / p[k];
            let share = el.photo_shell_shares(jump)[0];
            assert!((share - (1.0 - 1.0 / ratio)).abs() < 1e-9, "Z={}: K share {share}, jump {ratio}", el.z);
            assert_eq!(el.photo_shell_shares(jump * (1.0 - 1e-9))[0], 0.0, "Z={} K share below edge", el.z);
        }
    }
}

// Source: xsdata/data/provenance.toml must describe the embedded file and the committed generator;
// the xraylib version is the one pinned in .ci/requirements.txt.
#[test]
fn provenance_describes_embedded_tables() {
    let p = elements().provenance();
    let hex = |d: &[u8]| d.iter().map(|b| format!("{b:02x}")).collect::<String>();
    assert_eq!(p.tables_sha256, hex(&Sha256::digest(embedded_table_bytes())));
    let generator = std::fs::read(concat!(env!("CARGO_MANIFEST_DIR"), "/generate/make_tables.py")).unwrap();
    assert_eq!(p.generator_sha256, hex(&Sha256::digest(&generator)), "tables not made by the committed generator");
    assert_eq!(p.format_version, TABLE_FORMAT_VERSION);
    let req = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/../.ci/requirements.txt")).unwrap();
    let pin = req.lines().find_map(|l| l.strip_prefix("xraylib==")).expect("xraylib pinned");
    assert_eq!(p.source, format!("xraylib {}", pin.trim()));
    assert!(p.generated.len() >= 10 && p.generated.as_bytes()[4] == b'-');
}

// Source: the documented error contract of ElementTable / Element.
#[test]
fn errors_name_the_problem() {
    let t = elements();
    assert_eq!(t.get(0).unwrap_err(), XsError::NoSuchElement(0));
    assert_eq!(t.get(99).unwrap_err(), XsError::NoSuchElement(99));
    assert_eq!(t.get(82).unwrap().symbol, "Pb");
    assert_eq!(t.by_symbol("W").unwrap().z, 74);
    assert_eq!(t.by_symbol("pb").unwrap_err(), XsError::UnknownSymbol("pb".into()));
    let pb = t.get(82).unwrap();
    assert!(matches!(pb.try_total_cm2_g(800.5), Err(XsError::EnergyOutOfRange { max, .. }) if max == 800.0));
    assert!(pb.try_interaction(0.99).is_err());
    assert!(pb.try_total_cm2_g(800.0).is_ok() && pb.try_total_cm2_g(1.0).is_ok());
    let msg = XsError::EnergyOutOfRange { kev: 900.0, min: 1.0, max: 800.0 }.to_string();
    assert!(msg.contains("900") && msg.contains("800"));

    let bytes = embedded_table_bytes();
    let prov = t.provenance().clone();
    assert!(matches!(
        ElementTable::parse(&bytes[..bytes.len() / 2], prov.clone()),
        Err(TableFormatError::Truncated { .. })
    ));
    let mut bad = bytes.to_vec();
    bad[0] = b'X';
    assert!(matches!(ElementTable::parse(&bad, prov.clone()), Err(TableFormatError::Header(_))));
    let mut v2 = bytes.to_vec();
    v2[8] = 2;
    let err = ElementTable::parse(&v2, prov).err().unwrap().to_string();
    assert!(err.contains("version 2") && err.contains("make_tables.py"), "{err}");
}

// Source: REFERENCES.md "Edge and line energies" (X-ray data booklet values, from memory).
// Criterion: within 10 eV (handbook compilations of these energies differ by a few eV).
#[test]
fn handbook_edge_and_line_energies() {
    let t = elements();
    for (sym, k_edge) in [("I", 33.169), ("W", 69.525), ("Pb", 88.004), ("Mo", 20.000), ("Rh", 23.220), ("Cu", 8.979), ("Al", 1.560)] {
        let got = t.by_symbol(sym).unwrap().shells()[0].edge_kev;
        assert!((got - k_edge).abs() < 0.010, "{sym} K edge {got} keV vs handbook {k_edge}");
    }
    // Kα1 = KL3, Kα2 = KL2, Kβ1 = KM3 (IUPAC).
    for (sym, label, kev) in [("W", "KL3", 59.318), ("W", "KL2", 57.982), ("W", "KM3", 67.244), ("Mo", "KL3", 17.479), ("Mo", "KM3", 19.608), ("Rh", "KL3", 20.216)] {
        let line = t.by_symbol(sym).unwrap().line(Shell::K, label).unwrap_or_else(|| panic!("{sym} {label} missing"));
        assert!((line.kev - kev).abs() < 0.010, "{sym} {label} {} keV vs handbook {kev}", line.kev);
    }
    let w = t.by_symbol("W").unwrap();
    assert_eq!(w.line(Shell::K, "KL3").unwrap().from, Shell::L3);
    assert_eq!(w.line(Shell::K, "KL2").unwrap().from, Shell::L2);
    assert_eq!(w.line(Shell::K, "KM3").unwrap().from, Shell::Outer);
}

// Source: REFERENCES.md mass attenuation table (NIST SRD 126, Hubbell & Seltzer, from memory).
// Criterion: 2 % (independent compilations of μ/ρ agree to about 1–2 % away from edges, common
// practice); the coherent part here comes from our own F(x) integral.
#[test]
fn mass_attenuation_vs_nist_table() {
    let t = elements();
    let table: [(f64, [f64; 3]); 9] = [
        (20.0, [3.441, 33.79, 86.36]),
        (30.0, [1.128, 10.92, 30.32]),
        (40.0, [0.5685, 4.862, 14.36]),
        (50.0, [0.3681, 2.613, 8.041]),
        (60.0, [0.2778, 1.593, 5.021]),
        (80.0, [0.2018, 0.7630, 2.419]),
        (100.0, [0.1704, 0.4584, 5.549]),
        (150.0, [0.1378, 0.2217, 2.014]),
        (200.0, [f64::NAN, 0.1559, 0.9985]),
    ];
    let mut worst = (0.0, "", 0.0);
    for (kev, row) in table {
        for (sym, want) in ["Al", "Cu", "Pb"].into_iter().zip(row) {
            if want.is_nan() {
                continue;
            }
            let got = t.by_symbol(sym).unwrap().total_cm2_g(kev);
            let d = got / want - 1.0;
            if d.abs() > f64::abs(worst.0) {
                worst = (d, sym, kev);
            }
            assert!(d.abs() < 0.02, "{sym} {kev} keV: {got} vs NIST {want} ({:+.2} %)", 100.0 * d);
        }
    }
    println!("largest deviation from the NIST table: {:+.2} % ({} at {} keV)", 100.0 * worst.0, worst.1, worst.2);
    // Lead K edge (88.0045 keV): 1.910 just below, 7.683 just above (same source).
    let pb = t.by_symbol("Pb").unwrap();
    let jump = *pb.edges_kev().last().unwrap();
    let below = pb.total_cm2_g(jump * (1.0 - 1e-9));
    let above = pb.total_cm2_g(88.0045);
    assert!(rel(below, 1.910) < 0.02, "Pb below K edge {below}");
    assert!(rel(above, 7.683) < 0.02, "Pb above K edge {above}");
}

// Source: Klein–Nishina total cross section (exact formula, REFERENCES.md). For hydrogen above
// 300 keV, S(x) < 1 only within a few degrees of forward scattering, so the bound incoherent
// cross section equals N_A/A σ_KN to better than 0.1 % (estimate of the forward-cone deficit);
// criterion 0.3 %.
#[test]
fn hydrogen_incoherent_tends_to_klein_nishina() {
    let h = elements().get(1).unwrap();
    for kev in [300.0, 500.0, 800.0] {
        let k = kev / ELECTRON_REST_KEV;
        let re2 = CLASSICAL_ELECTRON_RADIUS_CM * CLASSICAL_ELECTRON_RADIUS_CM;
        let l = (1.0 + 2.0 * k).ln();
        let sigma = 2.0 * std::f64::consts::PI * re2
            * ((1.0 + k) / (k * k) * (2.0 * (1.0 + k) / (1.0 + 2.0 * k) - l / k) + l / (2.0 * k)
                - (1.0 + 3.0 * k) / ((1.0 + 2.0 * k) * (1.0 + 2.0 * k)));
        let want = sigma * AVOGADRO / h.atomic_weight;
        let got = h.incoherent_cm2_g(kev);
        assert!(got < want && rel(got, want) < 3e-3, "H {kev} keV: {got} vs KN {want}");
    }
    // Thomson limit of the formula, as a check of the formula itself.
    let k = 1e-4;
    let l = (1.0f64 + 2.0 * k).ln();
    let f = (1.0 + k) / (k * k) * (2.0 * (1.0 + k) / (1.0 + 2.0 * k) - l / k) + l / (2.0 * k) - (1.0 + 3.0 * k) / ((1.0 + 2.0 * k) * (1.0 + 2.0 * k));
    let thomson_barn = 2.0 * std::f64::consts::PI * CLASSICAL_ELECTRON_RADIUS_CM.powi(2) * f * 1e24;
    assert!((thomson_barn - 0.66525).abs() < 0.001, "{thomson_barn}");
}
