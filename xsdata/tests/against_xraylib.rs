//! Checks of the embedded element tables against general-purpose reference libraries evaluated at
//! test time through tests/reference/reference_values.py: xraylib (the source library) and
//! xraydb's Chantler tables (an independent compilation). Skipped with a message when python3
//! lacks the library, except under CI=true, where that is a failure.

mod common;

use common::{away_from, numbers, python_has, reference, SplitMix64};
use dosemill_xsdata::*;

fn rel(a: f64, b: f64) -> f64 {
    a / b - 1.0
}

/// All energies to keep away from: the photo data's jumps and every xraylib EdgeEnergy.
fn edges_by_z() -> Vec<Vec<f64>> {
    let input: String = (1..=98).map(|z| format!("{z}\n")).collect();
    let lines = reference("edges", &input);
    lines
        .iter()
        .zip(elements().all())
        .map(|(line, el)| {
            let mut e = numbers(line);
            e.extend_from_slice(el.edges_kev());
            e
        })
        .collect()
}

// Source: xraylib CS_Photo, CS_Total, CS_Rayl, CS_Compt at 1000 random (Z, E) points (fixed seed),
// each at least 1 % away from every edge. Criterion: interpolation within 0.2 % of the function it
// tabulates — CS_Photo for the photo cross section, and for coherent and incoherent the
// generator's own integrals over the stored F and S (make_tables.py ScatteringIntegrals) evaluated
// at the point. The deviations of our total from CS_Total (whose coherent part comes from a
// different form-factor integral) are printed, not asserted.
#[test]
fn interpolation_vs_xraylib_at_random_points() {
    if !python_has("xraylib") || !python_has("numpy") {
        return;
    }
    let t = elements();
    let edges = edges_by_z();
    let mut rng = SplitMix64(20_261_201);
    let mut points = Vec::new();
    while points.len() < 1000 {
        let z = 1 + (rng.next_u64() % 98) as u32;
        let kev = (rng.uniform() * E_MAX_KEV.ln()).exp();
        if away_from(kev, &edges[z as usize - 1], 0.01) {
            points.push((z, kev));
        }
    }
    let input: String = points.iter().map(|(z, e)| format!("{z} {e:.17e}\n")).collect();
    let answers = reference("photo-total", &input);
    assert_eq!(answers.len(), points.len());
    let mut worst = [(0.0f64, 0u32, 0.0f64); 6];
    let mut total_over = 0;
    for (&(z, kev), line) in points.iter().zip(&answers) {
        let r = numbers(line);
        let (cs_photo, cs_total, cs_rayl, cs_compt, coh_ref, inc_ref) = (r[0], r[1], r[2], r[3], r[4], r[5]);
        let i = t.get(z).unwrap().interaction(kev);
        let devs = [
            rel(i.photo_cm2_g, cs_photo),
            rel(i.coherent_cm2_g, coh_ref),
            rel(i.incoherent_cm2_g, inc_ref),
            rel(i.total_cm2_g(), cs_total),
            rel(i.coherent_cm2_g, cs_rayl),
            rel(i.incoherent_cm2_g, cs_compt),
        ];
        for (w, d) in worst.iter_mut().zip(devs) {
            if d.abs() > w.0.abs() {
                *w = (d, z, kev);
            }
        }
        if devs[3].abs() > 2e-3 {
            total_over += 1;
        }
    }
    let names = ["photo vs CS_Photo", "coherent vs own F integral", "incoherent vs own S integral", "total vs CS_Total", "coherent vs CS_Rayl", "incoherent vs CS_Compt"];
    for (n, w) in names.iter().zip(&worst) {
        println!("{n:32} largest deviation {:+.3} % (Z={}, {:.3} keV)", 100.0 * w.0, w.1, w.2);
    }
    println!("points with total off CS_Total by more than 0.2 %: {total_over} of 1000");
    for (n, w) in names.iter().zip(&worst).take(3) {
        assert!(w.0.abs() < 2e-3, "{n}: {:+.3} % at Z={} {} keV", 100.0 * w.0, w.1, w.2);
    }
}

// Source: xraylib EdgeEnergy, FluorYield and LineEnergy for every element and every stored line;
// the tables copy them, so they must agree to rounding. Every jump of the photo data lies within
// 5 % of some EdgeEnergy of the element.
#[test]
fn edges_yields_and_lines_match_xraylib() {
    if !python_has("xraylib") {
        return;
    }
    let t = elements();
    let input: String = (1..=98).map(|z| format!("{z}\n")).collect();
    let shells = reference("shells", &input);
    let edges = reference("edges", &input);
    let mut requests = String::new();
    let mut expect = Vec::new();
    for el in t.all() {
        let r = numbers(&shells[el.z as usize - 1]);
        for (s, data) in el.shells().iter().enumerate() {
            assert_eq!(data.edge_kev, r[2 * s], "Z={} shell {s} edge", el.z);
            if data.lines.is_empty() {
                // No radiative rates tabulated: stored as ω = 0 (documented in ShellData).
                assert_eq!(data.fluorescence_yield, 0.0, "Z={} shell {s}", el.z);
            } else {
                assert_eq!(data.fluorescence_yield, r[2 * s + 1], "Z={} shell {s} yield", el.z);
            }
            for (line, label) in data.lines.iter().zip(el.line_labels(data.shell)) {
                requests.push_str(&format!("{} {label}\n", el.z));
                expect.push((el.z, label.clone(), line.kev));
            }
        }
        let all = numbers(&edges[el.z as usize - 1]);
        for &j in el.edges_kev() {
            assert!(all.iter().any(|e| (j / e - 1.0).abs() < 0.05), "Z={} photo edge {j} keV far from any EdgeEnergy", el.z);
        }
    }
    let got = reference("lines", &requests);
    for ((z, label, kev), line) in expect.iter().zip(&got) {
        let want: f64 = line.parse().unwrap();
        assert_eq!(*kev, want, "Z={z} {label}");
    }
    println!("{} line energies compared", expect.len());
}

// Source: xraylib FluorYield (ω_K of Pb, W, Cu), RadRate normalisation (K lines sum to 1) and
// JumpFactor: the K share just above the K edge must equal 1 − 1/J_K with xraylib's tabulated
// jump factor within 0.5 % (criterion). The K share from CS_Photo_Partial just above the edge is
// printed beside it (that function is unreliable for low Z, see REFERENCES.md).
#[test]
fn fluorescence_data_sanity() {
    if !python_has("xraylib") {
        return;
    }
    let t = elements();
    let input: String = (1..=98).map(|z| format!("{z}\n")).collect();
    let shells = reference("shells", &input);
    for (sym, z) in [("Pb", 82u32), ("W", 74), ("Cu", 29)] {
        let r = numbers(&shells[z as usize - 1]);
        let el = t.by_symbol(sym).unwrap();
        assert_eq!(el.shells()[0].fluorescence_yield, r[1], "{sym} ω_K");
        assert!(r[1] > 0.4, "{sym} ω_K {}", r[1]);
    }
    let mut worst_partial: (f64, u32) = (0.0, 0);
    for el in t.all() {
        for data in el.shells() {
            if data.fluorescence_yield > 0.0 {
                let sum: f64 = data.lines.iter().map(|l| l.share).sum();
                assert!((sum - 1.0).abs() < 1e-12, "Z={} {:?} line shares sum to {sum}", el.z, data.shell);
                assert!(data.lines.iter().all(|l| l.kev > 0.0 && l.kev < data.edge_kev));
            }
        }
        let k = &el.shells()[0];
        assert!(k.lines.iter().all(|l| l.from != Shell::K));
        let r = numbers(&shells[el.z as usize - 1]);
        let (jump_factor, partial) = (r[8], r[9]);
        if k.edge_kev > 1.02 {
            let share = el.photo_shell_shares(k.edge_kev * 1.002)[0];
            let want = 1.0 - 1.0 / jump_factor;
            assert!((share / want - 1.0).abs() < 5e-3, "Z={}: K share {share} vs 1-1/J {want}", el.z);
            if partial.is_finite() && (share / partial - 1.0).abs() > worst_partial.0.abs() {
                worst_partial = (share / partial - 1.0, el.z);
            }
        }
    }
    println!("K share vs CS_Photo_Partial just above the K edge: largest deviation {:+.2} % (Z={})", 100.0 * worst_partial.0, worst_partial.1);
}

// Source: xraydb.mu_chantler (Chantler's tables, a compilation independent of xraylib's), every
// element it covers (Z = 1–92) on 25 energies 10–500 keV, at least 1 % from any edge.
// Criterion: within 7 % of Chantler at every point, except where the source library itself
// (xraylib's CS_Total) differs from Chantler by more than 7 %: there the two compilations
// disagree and our tables cannot be closer to Chantler than their source; at those points our
// total must stay within 2 % of CS_Total, and they are listed. Measured: 13 of 2284 points are
// such disagreements (H and He at 20–40 keV, where Chantler's scattering exceeds the
// free-electron Klein–Nishina value by 8–11 %; He, Mg and U at 250–500 keV; Rb at 13.9 keV);
// largest deviation from Chantler +8.9 % (Mg, 500 keV).
#[test]
fn total_vs_chantler_tables() {
    if !python_has("xraylib") || !python_has("xraydb") {
        return;
    }
    let t = elements();
    let edges = edges_by_z();
    let mut points = Vec::new();
    for z in 1..=92u32 {
        for k in 0..25 {
            let kev = 10.0 * (50.0f64).powf(k as f64 / 24.0);
            if away_from(kev, &edges[z as usize - 1], 0.01) {
                points.push((z, kev));
            }
        }
    }
    let input: String = points.iter().map(|(z, e)| format!("{z} {e:.17e}\n")).collect();
    let answers = reference("chantler", &input);
    let mut worst = (0.0f64, 0u32, 0.0f64);
    let mut over = Vec::new();
    let mut disagreements = Vec::new();
    for (&(z, kev), line) in points.iter().zip(&answers) {
        let mut cols = line.split_whitespace().map(|v| v.parse::<f64>().unwrap());
        let (want, source_total) = (cols.next().unwrap(), cols.next().unwrap());
        assert!(want.is_finite(), "Chantler value missing for Z={z} at {kev} keV");
        let ours = t.get(z).unwrap().total_cm2_g(kev);
        let d = rel(ours, want);
        if d.abs() > 0.07 {
            if rel(source_total, want).abs() > 0.07 && rel(ours, source_total).abs() < 0.02 {
                disagreements.push(format!("Z={z} {kev:.1} keV {:+.2} % (xraylib {:+.2} %)", 100.0 * d, 100.0 * rel(source_total, want)));
            } else {
                over.push(format!("Z={z} {kev:.1} keV {:+.2} %", 100.0 * d));
            }
        }
        if d.abs() > worst.0.abs() {
            worst = (d, z, kev);
        }
    }
    println!("{} points; largest deviation from Chantler: {:+.2} % (Z={}, {:.1} keV)", points.len(), 100.0 * worst.0, worst.1, worst.2);
    println!("compilations disagree (xraylib also beyond 7 %): {}", disagreements.join("; "));
    println!("beyond 7 % otherwise: {}", over.join("; "));
    assert!(over.is_empty(), "{} points beyond 7 % from Chantler: {}", over.len(), over.join("; "));
}
