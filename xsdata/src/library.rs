//! The built-in materials library: named compounds and tissues with their published sources, plus
//! every pure element by chemical symbol (`Al`, `Cu`, `W`, …) at its standard density.
//!
//! Names are lowercase and matched case-insensitively; element symbols are matched
//! case-insensitively too (`al`, `AL` → aluminium). An unknown name gives
//! [`MaterialError::UnknownMaterial`] listing the nearest valid names.
//!
//! ```
//! let water = dosemill_xsdata::library::lookup("water").unwrap();
//! let al = dosemill_xsdata::library::lookup("Al").unwrap();
//! assert_eq!(al.density_g_cm3(), 2.699);
//! # let _ = water;
//! ```
//!
//! All compositions and densities below were written from memory of the named published tables.

use crate::formula;
use crate::material::{Material, MaterialError};

/// How a library entry's composition is given.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Composition {
    /// A chemical formula (mass fractions from standard atomic weights).
    Formula(&'static str),
    /// Mass fractions by atomic number, as published (sum to 1).
    Fractions(&'static [(u32, f64)]),
}

/// One named material of the library.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LibraryEntry {
    /// Lookup name (lowercase).
    pub name: &'static str,
    /// Other accepted names.
    pub aliases: &'static [&'static str],
    /// Short description.
    pub description: &'static str,
    /// Density (g/cm³).
    pub density_g_cm3: f64,
    /// Composition.
    pub composition: Composition,
    /// Published source of composition and density.
    pub source: &'static str,
}

impl LibraryEntry {
    /// Build the material.
    pub fn material(&self) -> Material {
        let m = match self.composition {
            Composition::Formula(f) => {
                Material::from_formula(self.name, f, self.density_g_cm3, self.source)
            }
            Composition::Fractions(w) => Material::from_mass_fractions_z(
                self.name,
                self.density_g_cm3,
                w,
                false,
                self.source,
            ),
        };
        m.expect("library entries are valid (checked by tests)")
    }
}

const NIST_ELEMENT: &str = "pure element; density as listed in NIST SRD 126 (from memory)";

/// The named materials (pure elements by symbol are in addition to these).
#[rustfmt::skip]
pub static LIBRARY: &[LibraryEntry] = &[
    LibraryEntry {
        name: "water",
        aliases: &["h2o"],
        description: "liquid water",
        density_g_cm3: 1.0,
        composition: Composition::Fractions(&[(1, 0.111894), (8, 0.888106)]),
        source: "NIST SRD 126 (Hubbell & Seltzer), water, liquid (from memory)",
    },
    LibraryEntry {
        name: "air",
        aliases: &["dry_air"],
        description: "dry air near sea level",
        density_g_cm3: 1.205e-3,
        composition: Composition::Fractions(&[(6, 0.000124), (7, 0.755268), (8, 0.231781), (18, 0.012827)]),
        source: "NIST SRD 126 (Hubbell & Seltzer), air, dry (near sea level) (from memory)",
    },
    LibraryEntry {
        name: "soft_tissue",
        aliases: &["tissue"],
        description: "soft tissue, four-component model",
        density_g_cm3: 1.0,
        composition: Composition::Fractions(&[(1, 0.101172), (6, 0.111000), (7, 0.026000), (8, 0.761828)]),
        source: "ICRU four-component soft tissue (ICRU Report 33), as listed in NIST SRD 126 (from memory)",
    },
    LibraryEntry {
        name: "adipose",
        aliases: &["adipose_tissue", "fat"],
        description: "adipose tissue (adult)",
        density_g_cm3: 0.95,
        composition: Composition::Fractions(&[
            (1, 0.114), (6, 0.598), (7, 0.007), (8, 0.278), (11, 0.001), (16, 0.001), (17, 0.001),
        ]),
        source: "ICRU Report 44 (1989), adipose tissue (adult) (from memory)",
    },
    LibraryEntry {
        name: "muscle",
        aliases: &["skeletal_muscle"],
        description: "skeletal muscle (adult)",
        density_g_cm3: 1.05,
        composition: Composition::Fractions(&[
            (1, 0.102), (6, 0.143), (7, 0.034), (8, 0.710), (11, 0.001), (15, 0.002), (16, 0.003),
            (17, 0.001), (19, 0.004),
        ]),
        source: "ICRU Report 44 (1989), skeletal muscle (adult) (from memory)",
    },
    LibraryEntry {
        name: "cortical_bone",
        aliases: &["bone"],
        description: "cortical bone (adult)",
        density_g_cm3: 1.92,
        composition: Composition::Fractions(&[
            (1, 0.034), (6, 0.155), (7, 0.042), (8, 0.435), (11, 0.001), (12, 0.002), (15, 0.103),
            (16, 0.003), (20, 0.225),
        ]),
        source: "ICRU Report 44 (1989), cortical bone (adult) (from memory)",
    },
    LibraryEntry {
        name: "lung",
        aliases: &["lung_inflated"],
        description: "lung tissue, inflated",
        density_g_cm3: 0.26,
        composition: Composition::Fractions(&[
            (1, 0.103), (6, 0.105), (7, 0.031), (8, 0.749), (11, 0.002), (15, 0.002), (16, 0.003),
            (17, 0.003), (19, 0.002),
        ]),
        source: "ICRU Report 44 (1989), lung tissue (adult), inflated density (from memory)",
    },
    LibraryEntry {
        name: "breast_glandular",
        aliases: &["glandular"],
        description: "glandular breast tissue",
        density_g_cm3: 1.04,
        composition: Composition::Fractions(&[
            (1, 0.102), (6, 0.184), (7, 0.032), (8, 0.677), (15, 0.00125), (16, 0.00125), (19, 0.00125),
            (20, 0.00125),
        ]),
        source: "Hammerstein et al., Radiology 130 (1979) 485, glandular tissue (from memory)",
    },
    LibraryEntry {
        name: "breast_adipose",
        aliases: &[],
        description: "adipose breast tissue",
        density_g_cm3: 0.93,
        composition: Composition::Fractions(&[
            (1, 0.112), (6, 0.619), (7, 0.017), (8, 0.251), (15, 0.00025), (16, 0.00025), (19, 0.00025),
            (20, 0.00025),
        ]),
        source: "Hammerstein et al., Radiology 130 (1979) 485, adipose tissue (from memory)",
    },
    LibraryEntry {
        name: "pmma",
        aliases: &["acrylic", "perspex"],
        description: "polymethyl methacrylate (C5H8O2)n",
        density_g_cm3: 1.19,
        composition: Composition::Formula("C5H8O2"),
        source: "stoichiometric C5H8O2; density as listed in NIST SRD 126 (from memory)",
    },
    LibraryEntry {
        name: "polyethylene",
        aliases: &["pe"],
        description: "polyethylene (C2H4)n",
        density_g_cm3: 0.94,
        composition: Composition::Formula("C2H4"),
        source: "stoichiometric C2H4; density as listed in NIST SRD 126 (from memory)",
    },
    LibraryEntry {
        name: "beryllium",
        aliases: &[],
        description: "beryllium (tube windows)",
        density_g_cm3: 1.848,
        composition: Composition::Fractions(&[(4, 1.0)]),
        source: NIST_ELEMENT,
    },
    LibraryEntry {
        name: "aluminium",
        aliases: &["aluminum"],
        description: "aluminium (filters, HVL)",
        density_g_cm3: 2.699,
        composition: Composition::Fractions(&[(13, 1.0)]),
        source: NIST_ELEMENT,
    },
    LibraryEntry {
        name: "copper",
        aliases: &[],
        description: "copper (filters)",
        density_g_cm3: 8.96,
        composition: Composition::Fractions(&[(29, 1.0)]),
        source: NIST_ELEMENT,
    },
    LibraryEntry {
        name: "molybdenum",
        aliases: &[],
        description: "molybdenum (anodes, filters)",
        density_g_cm3: 10.22,
        composition: Composition::Fractions(&[(42, 1.0)]),
        source: NIST_ELEMENT,
    },
    LibraryEntry {
        name: "rhodium",
        aliases: &[],
        description: "rhodium (anodes, filters)",
        density_g_cm3: 12.41,
        composition: Composition::Fractions(&[(45, 1.0)]),
        source: NIST_ELEMENT,
    },
    LibraryEntry {
        name: "tin",
        aliases: &[],
        description: "tin (filters)",
        density_g_cm3: 7.31,
        composition: Composition::Fractions(&[(50, 1.0)]),
        source: NIST_ELEMENT,
    },
    LibraryEntry {
        name: "tungsten",
        aliases: &["wolfram"],
        description: "tungsten (anodes)",
        density_g_cm3: 19.3,
        composition: Composition::Fractions(&[(74, 1.0)]),
        source: NIST_ELEMENT,
    },
    LibraryEntry {
        name: "lead",
        aliases: &[],
        description: "lead (shielding)",
        density_g_cm3: 11.35,
        composition: Composition::Fractions(&[(82, 1.0)]),
        source: NIST_ELEMENT,
    },
    LibraryEntry {
        name: "csi",
        aliases: &["cesium_iodide", "caesium_iodide"],
        description: "caesium iodide (scintillator)",
        density_g_cm3: 4.51,
        composition: Composition::Formula("CsI"),
        source: "stoichiometric CsI; density as listed in NIST SRD 126 (from memory)",
    },
    LibraryEntry {
        name: "gd2o2s",
        aliases: &["gos", "gadox"],
        description: "gadolinium oxysulfide (phosphor), bulk density",
        density_g_cm3: 7.44,
        composition: Composition::Formula("Gd2O2S"),
        source: "stoichiometric Gd2O2S; density as listed in NIST SRD 126 (from memory)",
    },
    LibraryEntry {
        name: "selenium_amorphous",
        aliases: &["a_se", "a-se"],
        description: "amorphous selenium (direct-conversion detectors)",
        density_g_cm3: 4.28,
        composition: Composition::Fractions(&[(34, 1.0)]),
        source: "pure Se; density of amorphous selenium 4.28 g/cm3 (handbook value, from memory)",
    },
];

/// The named materials of the library, in a fixed order (pure elements by symbol come in addition).
pub fn library() -> &'static [LibraryEntry] {
    LIBRARY
}

/// Standard densities of the elements (g/cm³) at room temperature; gases at 20 °C and 1 atm.
/// Index = Z − 1. Values as listed in NIST SRD 126 / CRC Handbook (from memory); `None` where no
/// bulk density is established (At, Fr).
#[rustfmt::skip]
pub static ELEMENT_DENSITY_G_CM3: [Option<f64>; 98] = [
    Some(8.375e-5), Some(1.663e-4), Some(0.534), Some(1.848), Some(2.37), Some(2.0), // H–C (C: graphite, as NIST)
    Some(1.165e-3), Some(1.332e-3), Some(1.580e-3), Some(8.385e-4), // N–Ne
    Some(0.971), Some(1.74), Some(2.699), Some(2.33), Some(2.2), Some(2.0), Some(2.995e-3), Some(1.662e-3), // Na–Ar
    Some(0.862), Some(1.55), Some(2.989), Some(4.54), Some(6.11), Some(7.18), Some(7.44), Some(7.874), // K–Fe
    Some(8.9), Some(8.902), Some(8.96), Some(7.133), Some(5.904), Some(5.323), Some(5.73), Some(4.5), // Co–Se
    Some(3.12), Some(3.478e-3), // Br (liquid), Kr
    Some(1.532), Some(2.54), Some(4.469), Some(6.506), Some(8.57), Some(10.22), Some(11.5), Some(12.41), // Rb–Ru
    Some(12.41), Some(12.02), Some(10.5), Some(8.65), Some(7.31), Some(7.31), Some(6.691), Some(6.24), // Rh–Te
    Some(4.93), Some(5.485e-3), Some(1.873), Some(3.5), Some(6.154), Some(6.657), Some(6.71), Some(6.9), // I–Nd
    Some(7.22), Some(7.46), Some(5.243), Some(7.9), Some(8.229), Some(8.55), Some(8.795), Some(9.066), // Pm–Er
    Some(9.321), Some(6.73), Some(9.84), Some(13.31), Some(16.654), Some(19.3), Some(21.02), Some(22.57), // Tm–Os
    Some(22.42), Some(21.45), Some(19.32), Some(13.546), Some(11.72), Some(11.35), Some(9.747), Some(9.32), // Ir–Po
    None, Some(9.066e-3), None, Some(5.0), Some(10.07), Some(11.72), Some(15.37), Some(18.95), // At–U
    Some(20.25), Some(19.84), Some(13.67), Some(13.51), Some(14.78), Some(15.1), // Np–Cf
];

/// The pure element `symbol` (case-insensitive) at its standard density.
pub fn element_material(symbol: &str) -> Result<Material, MaterialError> {
    let z =
        formula::z_of_symbol_ignore_case(symbol).ok_or_else(|| MaterialError::UnknownMaterial {
            name: symbol.to_string(),
            suggestions: nearest_names(symbol, 5),
        })?;
    let sym = formula::symbol_of_z(z).expect("z in range");
    let density =
        ELEMENT_DENSITY_G_CM3[z as usize - 1].ok_or_else(|| MaterialError::NoStandardDensity {
            symbol: sym.to_string(),
        })?;
    Material::from_mass_fractions_z(sym, density, &[(z, 1.0)], false, NIST_ELEMENT)
}

/// Look up a material by library name or alias (case-insensitive), or a pure element by symbol.
/// Unknown names give [`MaterialError::UnknownMaterial`] with the nearest valid names.
pub fn lookup(name: &str) -> Result<Material, MaterialError> {
    let key = name.trim();
    for e in LIBRARY {
        if e.name.eq_ignore_ascii_case(key) || e.aliases.iter().any(|a| a.eq_ignore_ascii_case(key))
        {
            return Ok(e.material());
        }
    }
    if formula::z_of_symbol_ignore_case(key).is_some() {
        return element_material(key);
    }
    Err(MaterialError::UnknownMaterial {
        name: name.to_string(),
        suggestions: nearest_names(key, 5),
    })
}

/// The `n` valid names (library names, aliases and element symbols) nearest to `name` by edit
/// distance (case-insensitive), nearest first.
pub fn nearest_names(name: &str, n: usize) -> Vec<String> {
    let key = name.to_ascii_lowercase();
    let mut cands: Vec<(usize, usize, String)> = Vec::new();
    let mut order = 0usize;
    for e in LIBRARY {
        cands.push((edit_distance(&key, e.name), order, e.name.to_string()));
        order += 1;
        for a in e.aliases {
            cands.push((edit_distance(&key, a), order, a.to_string()));
            order += 1;
        }
    }
    for s in formula::SYMBOLS {
        // Symbols only when the query is short: a long word is never "near" a 1–2 letter symbol.
        if key.len() <= 3 {
            cands.push((
                edit_distance(&key, &s.to_ascii_lowercase()),
                order,
                s.to_string(),
            ));
            order += 1;
        }
    }
    cands.sort();
    cands.into_iter().take(n).map(|c| c.2).collect()
}

/// Levenshtein edit distance (insertions, deletions, substitutions), on bytes.
pub fn edit_distance(a: &str, b: &str) -> usize {
    let a = a.as_bytes();
    let b = b.as_bytes();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    let mut cur = vec![0usize; b.len() + 1];
    for i in 1..=a.len() {
        cur[0] = i;
        for j in 1..=b.len() {
            let sub = prev[j - 1] + usize::from(a[i - 1] != b[j - 1]);
            cur[j] = sub.min(prev[j] + 1).min(cur[j - 1] + 1);
        }
        std::mem::swap(&mut prev, &mut cur);
    }
    prev[b.len()]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_entry_builds_and_sums_to_one() {
        for e in LIBRARY {
            if let Composition::Fractions(w) = e.composition {
                let s: f64 = w.iter().map(|c| c.1).sum();
                assert!(
                    (s - 1.0).abs() <= 1e-6,
                    "{}: published fractions sum to {s}",
                    e.name
                );
            }
            let m = e.material();
            assert_eq!(m.name(), e.name);
            assert!(e
                .name
                .chars()
                .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_'));
        }
    }

    #[test]
    fn names_are_unique() {
        let mut all: Vec<String> = Vec::new();
        for e in LIBRARY {
            all.push(e.name.to_string());
            all.extend(e.aliases.iter().map(|a| a.to_string()));
        }
        let n = all.len();
        all.sort();
        all.dedup();
        assert_eq!(all.len(), n);
        // No library name shadows an element symbol.
        for a in &all {
            assert!(formula::z_of_symbol_ignore_case(a).is_none(), "{a}");
        }
    }

    #[test]
    fn lookup_is_case_insensitive_and_knows_elements() {
        assert_eq!(lookup("WATER").unwrap().name(), "water");
        assert_eq!(lookup("Skeletal_Muscle").unwrap().name(), "muscle");
        let al = lookup("Al").unwrap();
        assert_eq!(al.composition(), &[(13, 1.0)]);
        assert_eq!(al.density_g_cm3(), 2.699);
        assert_eq!(lookup("pb").unwrap().density_g_cm3(), 11.35);
        for s in ["Cu", "W", "Mo", "Rh", "Be", "Sn", "Pb", "Ag"] {
            assert!(lookup(s).is_ok(), "{s}");
        }
        assert!(matches!(
            lookup("At"),
            Err(MaterialError::NoStandardDensity { .. })
        ));
    }

    #[test]
    fn unknown_name_suggests_nearest() {
        match lookup("watr") {
            Err(MaterialError::UnknownMaterial { suggestions, .. }) => {
                assert_eq!(suggestions[0], "water")
            }
            other => panic!("{other:?}"),
        }
        match lookup("cortical-bone") {
            Err(e @ MaterialError::UnknownMaterial { .. }) => {
                assert!(e.to_string().contains("cortical_bone"), "{e}")
            }
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn edit_distance_basics() {
        assert_eq!(edit_distance("kitten", "sitting"), 3);
        assert_eq!(edit_distance("", "abc"), 3);
        assert_eq!(edit_distance("lung", "lung"), 0);
    }
}
