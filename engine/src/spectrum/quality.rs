//! Beam quality from a spectrum: narrow-beam, air-kerma-weighted quantities.
//!
//! Air kerma K = Σ Φ_i E_i (μen/ρ)_air(E_i) over continuum bins (at bin centres) and lines.
//! HVLs are thicknesses t with K(t) = K(0)/2 (first) and K(t) = K(0)/4 minus the first
//! (second), K(t) = Σ Φ_i E_i (μen/ρ)_air(E_i) exp(−μ(E_i) t), found by bisection.

use serde::Serialize;

use super::data;
use super::model::{compute_spectrum, SpectrumOptions};
use super::tube::{Filter, Tube};
use super::{Spectrum, SpectrumError};

/// J per keV.
const JOULE_PER_KEV: f64 = 1.602_176_634e-16;
/// Largest thickness searched by the HVL root-finder (mm).
const HVL_SEARCH_MAX_MM: f64 = 200.0;

/// Beam-quality figures of a spectrum.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BeamQuality {
    /// Air kerma per mAs at 1 m (µGy/mAs), from the spectrum by the inverse square law.
    pub air_kerma_ugy_per_mas_1m: f64,
    /// First half-value layer (mm Al).
    pub hvl1_mm_al: f64,
    /// Second half-value layer (mm Al).
    pub hvl2_mm_al: f64,
    /// Homogeneity coefficient HVL1/HVL2 (aluminium).
    pub homogeneity: f64,
    /// First half-value layer (mm Cu).
    pub hvl1_mm_cu: f64,
    /// Second half-value layer (mm Cu).
    pub hvl2_mm_cu: f64,
    /// Fluence-weighted mean energy (keV).
    pub mean_kev_fluence: f64,
    /// Air-kerma-weighted mean energy (keV).
    pub mean_kev_air_kerma: f64,
}

/// Per-component (energy, fluence, kerma contribution) with kerma in µGy per mAs.
fn kerma_terms(s: &Spectrum) -> Result<Vec<(f64, f64, f64)>, SpectrumError> {
    s.components()
        .into_iter()
        .map(|(e, phi)| {
            // Φ per mm² → per cm² (×100); keV → J; cm²/g → per kg (×1000); Gy → µGy.
            let k = phi * 100.0 * e * JOULE_PER_KEV * data::air_muen_rho(e)? * 1000.0 * 1e6;
            Ok((e, phi, k))
        })
        .collect()
}

/// Air kerma (µGy per mAs) at the spectrum's own distance.
pub fn air_kerma_ugy_per_mas(s: &Spectrum) -> Result<f64, SpectrumError> {
    Ok(kerma_terms(s)?.iter().map(|t| t.2).sum())
}

/// Thickness (mm) of `material` that brings the kerma down to `fraction` of its open value.
fn thickness_for_fraction(
    terms: &[(f64, f64, f64)],
    material: &str,
    fraction: f64,
) -> Result<f64, SpectrumError> {
    let m = data::material(material)?;
    let rho = m.density_g_cm3();
    let mu_per_mm: Vec<f64> = terms
        .iter()
        .map(|t| Ok(data::mu_rho(&m, t.0)? * rho * 0.1))
        .collect::<Result<_, SpectrumError>>()?;
    let k0: f64 = terms.iter().map(|t| t.2).sum();
    if k0.is_nan() || k0 <= 0.0 {
        return Err(SpectrumError::EmptyBeam);
    }
    let ratio = |x: f64| terms.iter().zip(&mu_per_mm).map(|(t, m)| t.2 * (-m * x).exp()).sum::<f64>() / k0;
    let mut hi = 1e-3;
    while ratio(hi) > fraction {
        hi *= 2.0;
        if hi > HVL_SEARCH_MAX_MM {
            return Err(SpectrumError::Data(format!("no {material} thickness below {HVL_SEARCH_MAX_MM} mm halves this beam")));
        }
    }
    let mut lo = 0.0;
    for _ in 0..100 {
        let mid = 0.5 * (lo + hi);
        if ratio(mid) > fraction {
            lo = mid;
        } else {
            hi = mid;
        }
        if hi - lo < 1e-9 * hi.max(1e-6) {
            break;
        }
    }
    Ok(0.5 * (lo + hi))
}

/// First and second HVL (mm) of `material`.
pub fn hvls_mm(s: &Spectrum, material: &str) -> Result<(f64, f64), SpectrumError> {
    let terms = kerma_terms(s)?;
    let h1 = thickness_for_fraction(&terms, material, 0.5)?;
    let q = thickness_for_fraction(&terms, material, 0.25)?;
    Ok((h1, q - h1))
}

impl BeamQuality {
    /// Computes every figure from `s`.
    pub fn of(s: &Spectrum) -> Result<Self, SpectrumError> {
        let terms = kerma_terms(s)?;
        let k: f64 = terms.iter().map(|t| t.2).sum();
        let phi: f64 = terms.iter().map(|t| t.1).sum();
        if k.is_nan() || k <= 0.0 {
            return Err(SpectrumError::EmptyBeam);
        }
        let (h1, h2) = hvls_mm(s, "Al")?;
        let (c1, c2) = hvls_mm(s, "Cu")?;
        Ok(BeamQuality {
            air_kerma_ugy_per_mas_1m: k * (s.distance_cm / 100.0).powi(2),
            hvl1_mm_al: h1,
            hvl2_mm_al: h2,
            homogeneity: h1 / h2,
            hvl1_mm_cu: c1,
            hvl2_mm_cu: c2,
            mean_kev_fluence: terms.iter().map(|t| t.0 * t.1).sum::<f64>() / phi,
            mean_kev_air_kerma: terms.iter().map(|t| t.0 * t.2).sum::<f64>() / k,
        })
    }
}

/// Thickness (mm) of `material` to add to `tube` (after its own filters) so that the first HVL
/// in aluminium equals `target_hvl_mm_al`; the spectrum is recomputed at every step.
pub fn solve_added_filtration(
    tube: &Tube,
    options: &SpectrumOptions,
    material: &str,
    target_hvl_mm_al: f64,
) -> Result<f64, SpectrumError> {
    solve_added_filtration_for(tube, options, material, target_hvl_mm_al, "Al")
}

/// As [`solve_added_filtration`], with the HVL measured in `hvl_material` (e.g. "Cu" for
/// orthovoltage beams); `target_hvl_mm` in mm of that material.
pub fn solve_added_filtration_for(
    tube: &Tube,
    options: &SpectrumOptions,
    material: &str,
    target_hvl_mm: f64,
    hvl_material: &str,
) -> Result<f64, SpectrumError> {
    let target_hvl_mm_al = target_hvl_mm;
    const MAX_MM: f64 = 50.0;
    let hvl_with = |t_mm: f64| -> Result<f64, SpectrumError> {
        let mut t = tube.clone();
        if t_mm > 0.0 {
            t.filters.push(Filter { material: material.to_string(), thickness_mm: t_mm });
        }
        let s = compute_spectrum(&t, options)?;
        Ok(hvls_mm(&s, hvl_material)?.0)
    };
    let start = hvl_with(0.0)?;
    let unreachable = |start| SpectrumError::TargetUnreachable {
        material: material.to_string(),
        target_mm_al: target_hvl_mm_al,
        start_mm_al: start,
        max_mm: MAX_MM,
    };
    if start > target_hvl_mm_al {
        return Err(unreachable(start));
    }
    let mut hi = 0.05;
    while hvl_with(hi)? < target_hvl_mm_al {
        hi *= 2.0;
        if hi > MAX_MM {
            return Err(unreachable(start));
        }
    }
    let mut lo = 0.0;
    for _ in 0..60 {
        let mid = 0.5 * (lo + hi);
        if hvl_with(mid)? < target_hvl_mm_al {
            lo = mid;
        } else {
            hi = mid;
        }
        if hi - lo < 1e-5 {
            break;
        }
    }
    Ok(0.5 * (lo + hi))
}
