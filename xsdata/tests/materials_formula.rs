//! Standard atomic weights and formula masses against outside references.

use dosemill_xsdata::formula::{atomic_weight, Formula, SYMBOLS};
use dosemill_xsdata::{library, Material, MaterialError};

/// xraydb 4.5.8 (PyPI), `xraydb.atomic_mass(z)` for z = 1..=98, printed with
/// `python3 -c "import xraydb; print([xraydb.atomic_mass(z) for z in range(1, 99)])"`.
#[rustfmt::skip]
const XRAYDB_ATOMIC_MASS: [f64; 98] = [
    1.0078, 4.0026, 6.94, 9.0122, 10.81, 12.011, 14.007, 15.999, 18.9984, 20.1797, // 1–10
    22.9898, 24.305, 26.9815, 28.085, 30.9738, 32.06, 35.453, 39.948, 39.0983, 40.078, // 11–20
    44.9559, 47.867, 50.9415, 51.996, 54.938, 55.845, 58.9332, 58.6934, 63.546, 65.38, // 21–30
    69.72, 72.63, 74.9216, 78.971, 79.904, 83.798, 85.4678, 87.62, 88.9058, 91.224, // 31–40
    92.9064, 95.95, 97.907, 101.07, 102.906, 106.42, 107.868, 112.414, 114.818, 118.71, // 41–50
    121.76, 127.6, 126.905, 131.293, 132.905, 137.327, 138.905, 140.116, 140.908, 144.242, // 51–60
    145.0, 150.36, 151.96, 157.25, 158.925, 162.5, 164.93, 167.259, 168.934, 173.045, // 61–70
    174.967, 178.49, 180.948, 183.84, 186.207, 190.23, 192.217, 195.084, 196.967, 200.592, // 71–80
    204.383, 207.2, 208.98, 209.0, 210.0, 222.0, 223.0, 226.0, 227.0, 232.038, // 81–90
    231.036, 238.029, 237.048, 239.052, 243.0, 247.0, 247.0, 251.0, // 91–98
];

/// xraylib 4.3.0 (PyPI), `xraylib.AtomicWeight(z)` for z = 1..=98, printed with
/// `python3 -c "import xraylib; print([xraylib.AtomicWeight(z) for z in range(1, 99)])"`.
/// Its table is rounded to about four significant figures and partly predates current IUPAC
/// values (e.g. Au 197.2, Ge 72.59), so it is checked at 0.25 %, not 0.01 %.
#[rustfmt::skip]
const XRAYLIB_ATOMIC_WEIGHT: [f64; 98] = [
    1.01, 4.0, 6.94, 9.01, 10.81, 12.01, 14.01, 16.0, 19.0, 20.18, // 1–10
    23.0, 24.32, 26.97, 28.09, 30.98, 32.07, 35.46, 39.94, 39.1, 40.08, // 11–20
    44.96, 47.9, 50.94, 52.0, 54.94, 55.85, 58.93, 58.69, 63.54, 65.38, // 21–30
    69.72, 72.59, 74.92, 78.96, 79.92, 83.8, 85.48, 87.62, 88.9, 91.22, // 31–40
    92.91, 95.95, 99.0, 101.07, 102.91, 106.4, 107.88, 112.41, 114.82, 118.69, // 41–50
    121.76, 127.6, 126.91, 131.3, 132.91, 137.36, 138.92, 140.13, 140.92, 144.27, // 51–60
    147.0, 150.35, 152.0, 157.26, 158.93, 162.51, 164.94, 167.27, 167.27, 173.04, // 61–70
    174.99, 178.5, 180.95, 183.92, 186.2, 190.2, 192.2, 195.09, 197.2, 200.61, // 71–80
    204.39, 207.21, 209.0, 209.0, 210.0, 222.0, 223.0, 226.02, 227.0, 232.0, // 81–90
    231.04, 238.07, 237.0, 239.1, 243.0, 247.0, 249.0, 251.0, // 91–98
];

/// Elements without a standard atomic weight (no stable isotope): libraries quote the mass of
/// different isotopes, so only agreement within 2.5 % is required for these.
const NO_STANDARD_WEIGHT: [u32; 14] = [43, 61, 84, 85, 86, 87, 88, 89, 93, 94, 95, 96, 97, 98];

#[test]
fn atomic_weights_match_xraydb_within_0_01_percent() {
    for z in 1..=98u32 {
        let ours = atomic_weight(z).unwrap();
        let reference = XRAYDB_ATOMIC_MASS[z as usize - 1];
        let rel = (ours - reference).abs() / reference;
        let tol = if NO_STANDARD_WEIGHT.contains(&z) {
            0.025
        } else if z == 1 {
            // xraydb quotes 1.0078, the mass of 1H; the IUPAC conventional value is 1.008
            // (interval 1.00784–1.00811). Compare against the interval instead.
            assert!((1.00784..=1.00811).contains(&ours), "H {ours}");
            continue;
        } else {
            1e-4
        };
        assert!(
            rel <= tol,
            "{} (Z={z}): ours {ours}, xraydb {reference}, {:.4} %",
            SYMBOLS[z as usize - 1],
            rel * 100.0
        );
    }
}

#[test]
fn atomic_weights_match_xraylib_to_its_precision() {
    for z in 1..=98u32 {
        if NO_STANDARD_WEIGHT.contains(&z) {
            continue;
        }
        let ours = atomic_weight(z).unwrap();
        let reference = XRAYLIB_ATOMIC_WEIGHT[z as usize - 1];
        let rel = (ours - reference).abs() / reference;
        if z == 69 {
            // xraylib 4.3.0 gives Tm the value of Er (167.27); the IUPAC value is 168.93.
            assert!((ours - 168.934).abs() < 0.001);
            continue;
        }
        assert!(
            rel <= 2.5e-3,
            "{} (Z={z}): ours {ours}, xraylib {reference}, {:.3} %",
            SYMBOLS[z as usize - 1],
            rel * 100.0
        );
    }
}

/// Molar masses (g/mol) of compounds: CRC Handbook of Chemistry and Physics, physical constants
/// of inorganic/organic compounds (from memory); hydroxyapatite and Gd2O2S as computed from the
/// IUPAC weights in those tables.
#[test]
fn formula_masses_match_published_molar_masses() {
    let cases = [
        ("H2O", 18.015),
        ("CaCO3", 100.086),
        ("CsI", 259.810),
        ("Gd2O2S", 378.56),
        ("Ca10(PO4)6(OH)2", 1004.62),
        ("C5H8O2", 100.117),
        ("NaCl", 58.443),
    ];
    for (f, published) in cases {
        let m = Formula::parse(f).unwrap().molar_mass_g_mol();
        let rel = (m - published).abs() / published;
        assert!(rel < 1e-4, "{f}: {m} vs {published} g/mol");
    }
}

#[test]
fn water_mass_fractions_match_nist_composition() {
    // NIST SRD 126 water composition (REFERENCES.md, from memory): H 0.111894, O 0.888106.
    // Stoichiometric H2O with the current IUPAC weights 1.008 / 15.999 gives H 0.111907; the NIST
    // value was computed with older weights. Required: agreement within 2e-4 relative (the weight
    // revisions of H and O move w_H by about 1e-4).
    let w = Formula::parse("H2O").unwrap().mass_fractions();
    assert_eq!(w[0].0, 1);
    assert!((w[0].1 - 0.111894).abs() / 0.111894 < 2e-4, "{}", w[0].1);
    assert!((w[1].1 - 0.888106).abs() / 0.888106 < 2e-4);
}

#[test]
fn normalisation_is_explicit() {
    // Air fractions from REFERENCES.md without argon: sum 0.987173, rejected unless normalised.
    let fr = [("C", 0.000124), ("N", 0.755268), ("O", 0.231781)];
    let err = Material::from_mass_fractions("air_no_ar", 1.2e-3, &fr, false, "test").unwrap_err();
    match &err {
        MaterialError::FractionSum { sum, .. } => assert!((sum - 0.987173).abs() < 1e-9),
        e => panic!("{e:?}"),
    }
    assert!(err.to_string().contains("0.987173") && err.to_string().contains("normalise"));
    let m = Material::from_mass_fractions("air_no_ar", 1.2e-3, &fr, true, "test").unwrap();
    let n = m.composition().iter().find(|c| c.0 == 7).unwrap().1;
    assert!((n - 0.755268 / 0.987173).abs() < 1e-12);
}

#[test]
fn library_compounds_use_formula_fractions() {
    // CsI: Cs 132.905/259.810 = 0.51155 (CRC molar masses, from memory).
    let csi = library::lookup("CsI").unwrap();
    let cs = csi.composition().iter().find(|c| c.0 == 55).unwrap().1;
    assert!((cs - 0.51155).abs() < 2e-5, "{cs}");
}
