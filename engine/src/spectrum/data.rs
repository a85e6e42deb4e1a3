//! The project's interaction data as the spectrum model reads it: anode elements, filter
//! materials and dry air, all from `dosemill_xsdata` (tables generated from xraylib).

use std::sync::OnceLock;

use dosemill_xsdata::{elements, library, Element, Material, Shell};

use super::tube::Anode;
use super::SpectrumError;

/// One radiative line of a shell.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct ShellLine {
    /// Photon energy (keV).
    pub kev: f64,
    /// Share of the shell's radiative decays that emit this line.
    pub share: f64,
    /// Transition name, vacancy shell – donor shell, e.g. "K-L3".
    pub label: String,
}

/// Atomic data of one followed shell of the anode element.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct ShellInfo {
    /// "K", "L1", "L2", "L3".
    pub name: &'static str,
    /// Position in K, L1, L2, L3 (the index into photoabsorption shell shares).
    pub index: usize,
    /// Electrons in the filled shell.
    pub electrons: f64,
    /// Binding (edge) energy (keV); 0 if absent.
    pub edge_kev: f64,
    /// Fluorescence yield.
    pub fluorescence_yield: f64,
    /// Coster–Kronig transfer probabilities (to L2, to L3).
    pub coster_kronig: (f64, f64),
    /// Radiative lines.
    pub lines: Vec<ShellLine>,
}

fn shell_name(s: Shell) -> &'static str {
    match s {
        Shell::K => "K",
        Shell::L1 => "L1",
        Shell::L2 => "L2",
        Shell::L3 => "L3",
        Shell::Outer => "M+",
    }
}

/// The anode's element record.
pub(crate) fn anode_element(anode: Anode) -> Result<&'static Element, SpectrumError> {
    elements().by_symbol(anode.symbol()).map_err(|e| SpectrumError::Data(e.to_string()))
}

/// K, L1, L2, L3 of the anode element with their lines.
pub(crate) fn anode_shells(anode: Anode) -> Result<Vec<ShellInfo>, SpectrumError> {
    let el = anode_element(anode)?;
    Ok(el
        .shells()
        .iter()
        .enumerate()
        .map(|(index, s)| {
            let name = shell_name(s.shell);
            ShellInfo {
                name,
                index,
                electrons: if s.shell == Shell::L3 { 4.0 } else { 2.0 },
                edge_kev: s.edge_kev,
                fluorescence_yield: s.fluorescence_yield,
                coster_kronig: s.coster_kronig,
                lines: s
                    .lines
                    .iter()
                    .map(|l| ShellLine { kev: l.kev, share: l.share, label: format!("{name}-{}", shell_name(l.from)) })
                    .collect(),
            }
        })
        .collect())
}

/// A library material by name (case-insensitive; element symbols allowed).
pub(crate) fn material(name: &str) -> Result<Material, SpectrumError> {
    library::lookup(name).map_err(|e| match e {
        dosemill_xsdata::MaterialError::UnknownMaterial { .. } => SpectrumError::UnknownMaterial(e.to_string()),
        other => SpectrumError::Data(other.to_string()),
    })
}

/// Dry air from the library, built once (its μen/ρ table is cached inside).
pub(crate) fn air() -> Result<&'static Material, SpectrumError> {
    static AIR: OnceLock<Material> = OnceLock::new();
    if let Some(a) = AIR.get() {
        return Ok(a);
    }
    let a = material("air")?;
    Ok(AIR.get_or_init(|| a))
}

/// Absorption edges (keV) of every element of `m`.
pub(crate) fn material_edges_kev(m: &Material) -> Result<Vec<f64>, SpectrumError> {
    let mut out = Vec::new();
    for (z, _) in m.composition() {
        let el = elements().get(*z).map_err(|e| SpectrumError::Data(e.to_string()))?;
        out.extend_from_slice(el.edges_kev());
    }
    Ok(out)
}

/// μ/ρ (cm²/g) of `m` at `kev`.
pub(crate) fn mu_rho(m: &Material, kev: f64) -> Result<f64, SpectrumError> {
    m.mu_rho_cm2_g(kev).map_err(|e| SpectrumError::Data(e.to_string()))
}

/// μen/ρ (cm²/g) of dry air at `kev`.
pub(crate) fn air_muen_rho(kev: f64) -> Result<f64, SpectrumError> {
    air()?.muen_rho_cm2_g(kev).map_err(|e| SpectrumError::Data(e.to_string()))
}
