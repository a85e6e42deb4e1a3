//! Materials: a name, a density, a composition by mass fraction and where that composition comes
//! from. Cross sections follow from the element tables by Bragg additivity,
//! (μ/ρ)_material = Σ_i w_i (μ/ρ)_i.
//!
//! ```
//! use dosemill_xsdata::material::Material;
//! let water = Material::from_formula("water", "H2O", 1.0, "stoichiometric H2O").unwrap();
//! let mu = water.mu_per_cm(60.0).unwrap();
//! assert!(mu > 0.0);
//! ```

use std::sync::{Arc, OnceLock};

use crate::derived::EnergyAbsorptionTable;
use crate::formula::{self, Formula, FormulaError};
use crate::{elements, XsError, E_MAX_KEV, E_MIN_KEV};

/// Tolerance on the sum of mass fractions (|Σw − 1|).
pub const FRACTION_SUM_TOLERANCE: f64 = 1e-6;

/// Errors from building or using a material.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum MaterialError {
    /// Mass fractions do not sum to 1.
    #[error("material `{material}`: mass fractions sum to {sum:.9}, not 1 (tolerance {tolerance:e}); correct the fractions, or build it with normalise = true to scale them to sum to 1")]
    FractionSum {
        /// Material name.
        material: String,
        /// The sum found.
        sum: f64,
        /// The tolerance applied.
        tolerance: f64,
    },
    /// A mass fraction that is negative or not finite.
    #[error(
        "material `{material}`: mass fraction {value} of `{component}` must be a finite number ≥ 0"
    )]
    BadFraction {
        /// Material name.
        material: String,
        /// Element symbol or component material name.
        component: String,
        /// The value given.
        value: f64,
    },
    /// Density that is not a positive finite number.
    #[error(
        "material `{material}`: density {density_g_cm3} g/cm3 must be a positive finite number"
    )]
    BadDensity {
        /// Material name.
        material: String,
        /// The value given (g/cm³).
        density_g_cm3: f64,
    },
    /// No components given (or all fractions zero).
    #[error("material `{material}`: composition is empty; give at least one element with a fraction > 0")]
    EmptyComposition {
        /// Material name.
        material: String,
    },
    /// Unknown element symbol in a composition.
    #[error("material `{material}`: unknown element symbol `{symbol}` (use symbols such as `H`, `Ca`, `Pb`)")]
    UnknownElement {
        /// Material name.
        material: String,
        /// The symbol given.
        symbol: String,
    },
    /// Atomic number outside 1..=98.
    #[error("material `{material}`: atomic number {z} is outside the data range 1–98")]
    NoSuchZ {
        /// Material name.
        material: String,
        /// The atomic number given.
        z: u32,
    },
    /// A chemical formula that does not parse.
    #[error(transparent)]
    Formula(#[from] FormulaError),
    /// Unknown material name.
    #[error("unknown material `{name}`; nearest valid names: {}. Run `dosemill materials` for the full list, or give a pure element by symbol (e.g. `Al`)", suggestions.join(", "))]
    UnknownMaterial {
        /// The name asked for.
        name: String,
        /// The nearest library names (edit distance).
        suggestions: Vec<String>,
    },
    /// A pure element for which no standard density is known.
    #[error("element `{symbol}` has no standard density in the library; build it with Material::pure_element_with_density")]
    NoStandardDensity {
        /// Element symbol.
        symbol: String,
    },
    /// Photon energy outside the tabulated range.
    #[error("photon energy {kev} keV is outside the data range {min}–{max} keV")]
    EnergyOutOfRange {
        /// The energy asked for (keV).
        kev: f64,
        /// Lowest valid energy (keV).
        min: f64,
        /// Highest valid energy (keV).
        max: f64,
    },
    /// Iodine concentration that is negative, not finite or too high for the density model.
    #[error(
        "iodine concentration {mg_per_ml} mg I/mL must be ≥ 0 and below {max_mg_per_ml} mg I/mL"
    )]
    BadConcentration {
        /// The value given (mg I per mL of solution).
        mg_per_ml: f64,
        /// Highest accepted value.
        max_mg_per_ml: f64,
    },
    /// An error from the element tables.
    #[error(transparent)]
    Data(#[from] XsError),
}

/// A homogeneous material.
#[derive(Debug, Clone)]
pub struct Material {
    name: String,
    density_g_cm3: f64,
    /// (Z, mass fraction), ascending Z, fractions > 0 summing to 1.
    composition: Vec<(u32, f64)>,
    source: String,
    /// Cached μtr/ρ and μen/ρ table, built on first use of the fast path.
    absorption: OnceLock<Arc<EnergyAbsorptionTable>>,
}

impl PartialEq for Material {
    fn eq(&self, other: &Self) -> bool {
        self.name == other.name
            && self.density_g_cm3 == other.density_g_cm3
            && self.composition == other.composition
            && self.source == other.source
    }
}

/// Check that `kev` lies in the data range; the error names the value and the range.
pub fn check_energy(kev: f64) -> Result<(), MaterialError> {
    if kev.is_finite() && (E_MIN_KEV..=E_MAX_KEV).contains(&kev) {
        Ok(())
    } else {
        Err(MaterialError::EnergyOutOfRange {
            kev,
            min: E_MIN_KEV,
            max: E_MAX_KEV,
        })
    }
}

impl Material {
    /// Build from (Z, mass fraction) pairs. Fractions must be ≥ 0 and sum to 1 within
    /// [`FRACTION_SUM_TOLERANCE`]; with `normalise = true` any positive sum is scaled to 1 instead.
    /// Repeated elements are merged; zero fractions are dropped.
    pub fn from_mass_fractions_z(
        name: &str,
        density_g_cm3: f64,
        fractions: &[(u32, f64)],
        normalise: bool,
        source: &str,
    ) -> Result<Material, MaterialError> {
        check_density(name, density_g_cm3)?;
        let mut by_z = [0.0f64; 99];
        for &(z, w) in fractions {
            if !(1..=98).contains(&z) {
                return Err(MaterialError::NoSuchZ {
                    material: name.to_string(),
                    z,
                });
            }
            if !w.is_finite() || w < 0.0 {
                return Err(MaterialError::BadFraction {
                    material: name.to_string(),
                    component: formula::symbol_of_z(z).unwrap_or("?").to_string(),
                    value: w,
                });
            }
            by_z[z as usize] += w;
        }
        let sum: f64 = by_z.iter().sum();
        if sum <= 0.0 {
            return Err(MaterialError::EmptyComposition {
                material: name.to_string(),
            });
        }
        if (sum - 1.0).abs() > FRACTION_SUM_TOLERANCE && !normalise {
            return Err(MaterialError::FractionSum {
                material: name.to_string(),
                sum,
                tolerance: FRACTION_SUM_TOLERANCE,
            });
        }
        // Within tolerance the small residue is removed too, so stored fractions sum to 1.
        let scale = 1.0 / sum;
        let composition = by_z
            .iter()
            .enumerate()
            .filter(|(_, &w)| w > 0.0)
            .map(|(z, &w)| (z as u32, w * scale))
            .collect();
        Ok(Material {
            name: name.to_string(),
            density_g_cm3,
            composition,
            source: source.to_string(),
            absorption: OnceLock::new(),
        })
    }

    /// Build from (element symbol, mass fraction) pairs, e.g. `[("H", 0.111894), ("O", 0.888106)]`.
    /// Symbols are case sensitive as in the periodic table. See [`Material::from_mass_fractions_z`].
    pub fn from_mass_fractions(
        name: &str,
        density_g_cm3: f64,
        fractions: &[(&str, f64)],
        normalise: bool,
        source: &str,
    ) -> Result<Material, MaterialError> {
        let mut by_z = Vec::with_capacity(fractions.len());
        for &(sym, w) in fractions {
            let z = formula::z_of_symbol(sym).ok_or_else(|| MaterialError::UnknownElement {
                material: name.to_string(),
                symbol: sym.to_string(),
            })?;
            by_z.push((z, w));
        }
        Material::from_mass_fractions_z(name, density_g_cm3, &by_z, normalise, source)
    }

    /// Build from a chemical formula (see [`crate::formula`]), e.g. `"CaCO3"`.
    pub fn from_formula(
        name: &str,
        formula_text: &str,
        density_g_cm3: f64,
        source: &str,
    ) -> Result<Material, MaterialError> {
        let f = Formula::parse(formula_text)?;
        Material::from_mass_fractions_z(name, density_g_cm3, &f.mass_fractions(), false, source)
    }

    /// A pure element of atomic number `z` at the given density.
    pub fn pure_element_with_density(
        z: u32,
        density_g_cm3: f64,
        source: &str,
    ) -> Result<Material, MaterialError> {
        let symbol = formula::symbol_of_z(z).ok_or_else(|| MaterialError::NoSuchZ {
            material: format!("Z={z}"),
            z,
        })?;
        Material::from_mass_fractions_z(symbol, density_g_cm3, &[(z, 1.0)], false, source)
    }

    /// Mixture of materials by mass fraction (Bragg additivity): element fractions are
    /// Σ_j f_j w_ij. Component fractions must sum to 1 (or set `normalise`). The density of a
    /// mixture is not implied by its components; give it.
    pub fn mixture(
        name: &str,
        density_g_cm3: f64,
        components: &[(&Material, f64)],
        normalise: bool,
        source: &str,
    ) -> Result<Material, MaterialError> {
        check_density(name, density_g_cm3)?;
        let mut sum = 0.0;
        for &(m, f) in components {
            if !f.is_finite() || f < 0.0 {
                return Err(MaterialError::BadFraction {
                    material: name.to_string(),
                    component: m.name.clone(),
                    value: f,
                });
            }
            sum += f;
        }
        if sum <= 0.0 {
            return Err(MaterialError::EmptyComposition {
                material: name.to_string(),
            });
        }
        if (sum - 1.0).abs() > FRACTION_SUM_TOLERANCE && !normalise {
            return Err(MaterialError::FractionSum {
                material: name.to_string(),
                sum,
                tolerance: FRACTION_SUM_TOLERANCE,
            });
        }
        let mut by_z = Vec::new();
        for &(m, f) in components {
            for &(z, w) in &m.composition {
                by_z.push((z, f * w / sum));
            }
        }
        Material::from_mass_fractions_z(name, density_g_cm3, &by_z, false, source)
    }

    /// Iodine dissolved in water at `mg_per_ml` milligrams of iodine per millilitre of solution.
    ///
    /// Density model (ideal mixing, volumes additive): the iodine occupies the volume it would have
    /// as the element at 4.93 g/cm³ (solid iodine density, from memory), water fills the rest at
    /// 1.000 g/cm³, so ρ = 1 + c·(1 − 1/4.93) with c in g/mL. Real contrast agents are denser
    /// because of their organic carrier (which this model leaves out). The iodine mass fraction is
    /// c/ρ. Accepted range 0 ≤ c < 4930 mg/mL (the solution would be pure iodine at the top).
    pub fn iodine_solution(mg_per_ml: f64) -> Result<Material, MaterialError> {
        const IODINE_DENSITY_G_CM3: f64 = 4.93;
        let max = IODINE_DENSITY_G_CM3 * 1000.0;
        if !mg_per_ml.is_finite() || !(0.0..max).contains(&mg_per_ml) {
            return Err(MaterialError::BadConcentration {
                mg_per_ml,
                max_mg_per_ml: max,
            });
        }
        let c = mg_per_ml / 1000.0;
        let density = 1.0 + c * (1.0 - 1.0 / IODINE_DENSITY_G_CM3);
        let w_i = c / density;
        let water = crate::formula::Formula::parse("H2O")
            .expect("valid formula")
            .mass_fractions();
        let mut by_z: Vec<(u32, f64)> = water.iter().map(|&(z, w)| (z, w * (1.0 - w_i))).collect();
        by_z.push((53, w_i));
        Material::from_mass_fractions_z(
            &format!("iodine_solution_{mg_per_ml}mg_ml"),
            density,
            &by_z,
            false,
            "iodine in water; stoichiometric H2O, ideal-mixing density model (see Material::iodine_solution)",
        )
    }

    /// The same material with another name.
    pub fn with_name(mut self, name: &str) -> Material {
        self.name = name.to_string();
        self
    }

    /// The same composition at another density (g/cm³), e.g. a compressed powder or a gas at
    /// another pressure.
    pub fn with_density(&self, density_g_cm3: f64) -> Result<Material, MaterialError> {
        check_density(&self.name, density_g_cm3)?;
        Ok(Material {
            density_g_cm3,
            absorption: self.absorption.clone(),
            ..self.clone()
        })
    }

    /// Material name.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// Density (g/cm³).
    pub fn density_g_cm3(&self) -> f64 {
        self.density_g_cm3
    }

    /// Composition: (Z, mass fraction), ascending Z, fractions > 0 summing to 1.
    pub fn composition(&self) -> &[(u32, f64)] {
        &self.composition
    }

    /// Where the composition and density come from.
    pub fn source(&self) -> &str {
        &self.source
    }

    /// Composition as text, e.g. `H 0.111894, O 0.888106`.
    pub fn composition_text(&self) -> String {
        self.composition
            .iter()
            .map(|&(z, w)| format!("{} {:.6}", formula::symbol_of_z(z).unwrap_or("?"), w))
            .collect::<Vec<_>>()
            .join(", ")
    }

    fn sum_over_elements(
        &self,
        kev: f64,
        f: impl Fn(&crate::Element, f64) -> f64,
    ) -> Result<f64, MaterialError> {
        check_energy(kev)?;
        let table = elements();
        let mut acc = 0.0;
        for &(z, w) in &self.composition {
            acc += w * f(table.get(z)?, kev);
        }
        Ok(acc)
    }

    /// Mass attenuation coefficient μ/ρ (cm²/g), coherent scattering included.
    pub fn mu_rho_cm2_g(&self, kev: f64) -> Result<f64, MaterialError> {
        self.sum_over_elements(kev, |e, k| e.total_cm2_g(k))
    }

    /// μ/ρ without coherent scattering (cm²/g): photoelectric + incoherent.
    pub fn mu_rho_no_coherent_cm2_g(&self, kev: f64) -> Result<f64, MaterialError> {
        self.sum_over_elements(kev, |e, k| e.photo_cm2_g(k) + e.incoherent_cm2_g(k))
    }

    /// Photoelectric part of μ/ρ (cm²/g).
    pub fn photo_cm2_g(&self, kev: f64) -> Result<f64, MaterialError> {
        self.sum_over_elements(kev, |e, k| e.photo_cm2_g(k))
    }

    /// Coherent (Rayleigh) part of μ/ρ (cm²/g).
    pub fn coherent_cm2_g(&self, kev: f64) -> Result<f64, MaterialError> {
        self.sum_over_elements(kev, |e, k| e.coherent_cm2_g(k))
    }

    /// Incoherent (bound Compton) part of μ/ρ (cm²/g).
    pub fn incoherent_cm2_g(&self, kev: f64) -> Result<f64, MaterialError> {
        self.sum_over_elements(kev, |e, k| e.incoherent_cm2_g(k))
    }

    /// Linear attenuation coefficient μ (1/cm), coherent included.
    pub fn mu_per_cm(&self, kev: f64) -> Result<f64, MaterialError> {
        Ok(self.mu_rho_cm2_g(kev)? * self.density_g_cm3)
    }

    /// Mass energy-absorption coefficient μen/ρ (cm²/g), fast path: log–log interpolation in a
    /// table built on first use (see [`crate::derived`] for the physics and the table's accuracy).
    /// Use [`crate::derived::coefficients`] for the value computed directly.
    pub fn muen_rho_cm2_g(&self, kev: f64) -> Result<f64, MaterialError> {
        check_energy(kev)?;
        Ok(self.absorption_table()?.muen_rho_cm2_g(kev))
    }

    /// Mass energy-transfer coefficient μtr/ρ (cm²/g), fast path as for [`Material::muen_rho_cm2_g`].
    pub fn mutr_rho_cm2_g(&self, kev: f64) -> Result<f64, MaterialError> {
        check_energy(kev)?;
        Ok(self.absorption_table()?.mutr_rho_cm2_g(kev))
    }

    /// The cached μtr/ρ, μen/ρ table of this material (built on first call).
    pub fn absorption_table(&self) -> Result<&EnergyAbsorptionTable, MaterialError> {
        if let Some(t) = self.absorption.get() {
            return Ok(t);
        }
        let t = Arc::new(EnergyAbsorptionTable::build(self)?);
        Ok(self.absorption.get_or_init(|| t))
    }
}

fn check_density(name: &str, density_g_cm3: f64) -> Result<(), MaterialError> {
    if density_g_cm3.is_finite() && density_g_cm3 > 0.0 {
        Ok(())
    } else {
        Err(MaterialError::BadDensity {
            material: name.to_string(),
            density_g_cm3,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fraction_sum_error_names_sum_and_offers_normalisation() {
        let e = Material::from_mass_fractions("x", 1.0, &[("H", 0.1), ("O", 0.8)], false, "test")
            .unwrap_err();
        match &e {
            MaterialError::FractionSum { sum, .. } => assert!((sum - 0.9).abs() < 1e-12),
            other => panic!("wrong error {other:?}"),
        }
        let msg = e.to_string();
        assert!(
            msg.contains("0.9000000") && msg.contains("normalise"),
            "{msg}"
        );
        let m = Material::from_mass_fractions("x", 1.0, &[("H", 0.1), ("O", 0.8)], true, "test")
            .unwrap();
        let s: f64 = m.composition().iter().map(|c| c.1).sum();
        assert!((s - 1.0).abs() < 1e-15);
        assert!((m.composition()[0].1 - 0.1 / 0.9).abs() < 1e-15);
    }

    #[test]
    fn within_tolerance_is_accepted_and_rescaled() {
        let m = Material::from_mass_fractions_z("x", 1.0, &[(1, 0.5), (8, 0.5000005)], false, "t")
            .unwrap();
        let s: f64 = m.composition().iter().map(|c| c.1).sum();
        assert!((s - 1.0).abs() < 1e-15);
        assert!(
            Material::from_mass_fractions_z("x", 1.0, &[(1, 0.5), (8, 0.500002)], false, "t")
                .is_err()
        );
    }

    #[test]
    fn bad_inputs_are_typed() {
        assert!(matches!(
            Material::from_mass_fractions("x", 1.0, &[("Xx", 1.0)], false, "t"),
            Err(MaterialError::UnknownElement { .. })
        ));
        assert!(matches!(
            Material::from_mass_fractions_z("x", 1.0, &[(99, 1.0)], false, "t"),
            Err(MaterialError::NoSuchZ { z: 99, .. })
        ));
        assert!(matches!(
            Material::from_mass_fractions_z("x", 0.0, &[(1, 1.0)], false, "t"),
            Err(MaterialError::BadDensity { .. })
        ));
        assert!(matches!(
            Material::from_mass_fractions_z("x", 1.0, &[(1, -0.1), (8, 1.1)], false, "t"),
            Err(MaterialError::BadFraction { .. })
        ));
        assert!(matches!(
            check_energy(0.5),
            Err(MaterialError::EnergyOutOfRange { .. })
        ));
        assert!(matches!(
            check_energy(801.0),
            Err(MaterialError::EnergyOutOfRange { .. })
        ));
        assert!(check_energy(1.0).is_ok() && check_energy(800.0).is_ok());
    }

    #[test]
    fn mixture_is_mass_weighted() {
        let a = Material::from_formula("water", "H2O", 1.0, "t").unwrap();
        let b = Material::from_mass_fractions_z("c", 2.0, &[(6, 1.0)], false, "t").unwrap();
        let m = Material::mixture("m", 1.5, &[(&a, 0.25), (&b, 0.75)], false, "t").unwrap();
        let w = |mat: &Material, z: u32| {
            mat.composition()
                .iter()
                .find(|c| c.0 == z)
                .map(|c| c.1)
                .unwrap_or(0.0)
        };
        assert!((w(&m, 6) - 0.75).abs() < 1e-12);
        assert!((w(&m, 8) - 0.25 * w(&a, 8)).abs() < 1e-12);
        assert!(Material::mixture("m", 1.5, &[(&a, 0.25), (&b, 0.7)], false, "t").is_err());
    }

    #[test]
    fn iodine_solution_density_model() {
        let m = Material::iodine_solution(300.0).unwrap();
        let rho = 1.0 + 0.3 * (1.0 - 1.0 / 4.93);
        assert!((m.density_g_cm3() - rho).abs() < 1e-12);
        let w_i = m.composition().iter().find(|c| c.0 == 53).unwrap().1;
        // mass of iodine per mL = w_I · ρ = 0.300 g
        assert!((w_i * m.density_g_cm3() - 0.3).abs() < 1e-12);
        assert!(Material::iodine_solution(-1.0).is_err());
    }
}
