//! Angular distributions of bound Compton and Rayleigh scattering vs the densities computed
//! independently by numerical integration from the tables: Klein–Nishina × S(x,Z) and
//! Thomson × F²(x,Z) (Hubbell et al. 1975 form of the binding correction; data from xraylib).

use dosemill_engine::physics::{compton, rayleigh, rayleigh::RayleighTable};
use dosemill_engine::rng::history_stream;

fn simpson(f: impl Fn(f64) -> f64, a: f64, b: f64, n: usize) -> f64 {
    let n = n + n % 2;
    let h = (b - a) / n as f64;
    let mut s = f(a) + f(b);
    for i in 1..n {
        s += f(a + i as f64 * h) * if i % 2 == 1 { 4.0 } else { 2.0 };
    }
    s * h / 3.0
}

/// χ² of sampled cos θ against density `pdf` over `bins` equal bins; returns χ².
fn chi_square(samples: &[f64], pdf: impl Fn(f64) -> f64, bins: usize) -> f64 {
    let total = simpson(&pdf, -1.0, 1.0, 20_000);
    let mut counts = vec![0f64; bins];
    for &c in samples {
        counts[(((c + 1.0) / 2.0 * bins as f64) as usize).min(bins - 1)] += 1.0;
    }
    let n = samples.len() as f64;
    let mut chi2 = 0.0;
    let mut used = 0;
    for b in 0..bins {
        let lo = -1.0 + 2.0 * b as f64 / bins as f64;
        let e = n * simpson(&pdf, lo, lo + 2.0 / bins as f64, 400) / total;
        if e >= 5.0 {
            chi2 += (counts[b] - e).powi(2) / e;
            used += 1;
        }
    }
    assert!(used > bins / 2);
    chi2
}

/// Criterion: χ² below the 99.99th percentile of χ²(49 dof) = 94.6 (scipy.stats.chi2.ppf); bins
/// with fewer than 5 expected counts are left out, which only lowers the degrees of freedom.
#[test]
fn bound_compton_angles_follow_s_weighted_klein_nishina() {
    let table = dosemill_xsdata::elements();
    for (i, (z, kev)) in [(6u32, 20.0), (8, 60.0), (82, 20.0), (82, 100.0)].into_iter().enumerate() {
        let el = table.get(z).unwrap();
        let mut rng = history_stream(300 + i as u64, 0);
        let samples: Vec<f64> = (0..1_000_000).map(|_| compton::sample(kev, el, true, &mut rng).1).collect();
        let chi2 = chi_square(&samples, |c| compton::dsigma_domega_cm2(kev, c, el), 50);
        assert!(chi2 < 94.6, "Z={z} {kev} keV: chi2 = {chi2}");
    }
}

#[test]
fn rayleigh_angles_follow_thomson_times_form_factor_squared() {
    let table = dosemill_xsdata::elements();
    for (i, (z, kev)) in [(8u32, 20.0), (8, 60.0), (82, 30.0), (82, 100.0)].into_iter().enumerate() {
        let el = table.get(z).unwrap();
        let t = RayleighTable::new(el);
        let mut rng = history_stream(400 + i as u64, 0);
        let samples: Vec<f64> = (0..1_000_000).map(|_| t.sample(kev, &mut rng)).collect();
        let chi2 = chi_square(&samples, |c| rayleigh::dsigma_domega_cm2(kev, c, el), 50);
        assert!(chi2 < 94.6, "Z={z} {kev} keV: chi2 = {chi2}");
    }
}

/// The coherent cross section implied by the sampling table agrees with the tabulated coherent
/// cross section (both from the same F(x,Z)) within 0.5 % from 10 to 500 keV.
#[test]
fn coherent_cross_section_is_consistent_with_the_sampled_form_factor() {
    let table = dosemill_xsdata::elements();
    for z in [1u32, 6, 8, 13, 29, 53, 74, 82] {
        let el = table.get(z).unwrap();
        let t = RayleighTable::new(el);
        for kev in [10.0, 30.0, 60.0, 100.0, 200.0, 500.0] {
            let per_atom = t.cross_section_cm2(kev);
            let mass = per_atom * dosemill_xsdata::AVOGADRO / el.atomic_weight;
            let tab = el.coherent_cm2_g(kev);
            assert!((mass / tab - 1.0).abs() < 5e-3, "Z={z} {kev} keV: table-implied {mass} vs tabulated {tab}");
        }
    }
}
