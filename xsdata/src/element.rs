//! Per-element interaction data: cross sections on an energy grid with edges as duplicated
//! energies, subshell shares of photoabsorption, atomic form factor F(x,Z), incoherent
//! scattering function S(x,Z), fluorescence yields and radiative lines.
//!
//! API CONTRACT (other crates code against exactly these signatures; do not rename).

/// Errors from the data tables.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum XsError {
    /// Energy outside the tabulated range.
    #[error("photon energy {kev} keV is outside the data range {min}–{max} keV")]
    EnergyOutOfRange {
        /// The energy asked for (keV).
        kev: f64,
        /// Lowest tabulated energy (keV).
        min: f64,
        /// Highest tabulated energy (keV).
        max: f64,
    },
    /// Atomic number outside 1..=98.
    #[error("atomic number {0} is outside the data range 1–98")]
    NoSuchElement(u32),
    /// Unknown element symbol.
    #[error("unknown element symbol `{0}`")]
    UnknownSymbol(String),
}

/// The shells whose vacancies dosemill follows (the rest are lumped).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Shell {
    /// K shell.
    K,
    /// L1 subshell.
    L1,
    /// L2 subshell.
    L2,
    /// L3 subshell.
    L3,
    /// Any outer shell (M and beyond): its vacancy is not followed.
    Outer,
}

/// A radiative transition filling a vacancy in a shell.
#[derive(Debug, Clone, PartialEq)]
pub struct Line {
    /// Emitted photon energy (keV).
    pub kev: f64,
    /// Probability of this line given that the vacancy decays radiatively (lines of one shell sum to 1).
    pub share: f64,
    /// The shell the electron comes from, i.e. where the new vacancy is left.
    pub from: Shell,
}

/// Data for one followed shell (K, L1, L2, L3) of one element. Absent shells have edge 0.
#[derive(Debug, Clone, PartialEq)]
pub struct ShellData {
    /// Which shell.
    pub shell: Shell,
    /// Absorption edge (binding) energy (keV); 0 where the element has no such shell.
    pub edge_kev: f64,
    /// Fluorescence yield ω (probability that a vacancy decays by emitting a photon).
    pub fluorescence_yield: f64,
    /// Radiative lines, shares summing to 1 (empty where ω = 0).
    pub lines: Vec<Line>,
    /// Coster–Kronig transfer probabilities for L1 and L2 vacancies: (to L2, to L3); zeros otherwise.
    pub coster_kronig: (f64, f64),
}

/// Interaction data of one element.
#[derive(Debug, Clone)]
pub struct Element {
    /// Atomic number.
    pub z: u32,
    /// Chemical symbol ("H", "Pb").
    pub symbol: String,
    /// Standard atomic weight (g/mol).
    pub atomic_weight: f64,
    // private fields: the implementation chooses the layout
}

impl Element {
    /// Photoelectric mass cross section (cm²/g); at an edge energy the value above the edge.
    pub fn photo_cm2_g(&self, kev: f64) -> f64 { let _ = kev; todo!() }
    /// Coherent (Rayleigh) mass cross section (cm²/g), consistent with [`Element::form_factor`].
    pub fn coherent_cm2_g(&self, kev: f64) -> f64 { let _ = kev; todo!() }
    /// Bound incoherent (Compton) mass cross section (cm²/g), consistent with [`Element::incoherent_function`].
    pub fn incoherent_cm2_g(&self, kev: f64) -> f64 { let _ = kev; todo!() }
    /// Total mass attenuation coefficient μ/ρ (cm²/g), coherent included.
    pub fn total_cm2_g(&self, kev: f64) -> f64 { let _ = kev; todo!() }
    /// Shares of the photoelectric cross section at `kev` taken by K, L1, L2, L3 (the rest is outer shells).
    pub fn photo_shell_shares(&self, kev: f64) -> [f64; 4] { let _ = kev; todo!() }
    /// Energy nodes of this element's cross-section grid (keV), ascending; each edge appears twice.
    pub fn nodes_kev(&self) -> &[f64] { todo!() }
    /// All absorption edges inside the data range (keV), ascending (K, L, M, … as tabulated).
    pub fn edges_kev(&self) -> &[f64] { todo!() }
    /// Atomic form factor F(x, Z), x = sin(θ/2)/λ in 1/Å; clamped to [0, Z].
    pub fn form_factor(&self, x_inv_angstrom: f64) -> f64 { let _ = x_inv_angstrom; todo!() }
    /// Incoherent scattering function S(x, Z); clamped to [0, Z].
    pub fn incoherent_function(&self, x_inv_angstrom: f64) -> f64 { let _ = x_inv_angstrom; todo!() }
    /// The momentum-transfer nodes (1/Å) on which F and S are tabulated, ascending, first node 0.
    pub fn x_nodes_inv_angstrom(&self) -> &[f64] { todo!() }
    /// Data for K, L1, L2, L3 in that order.
    pub fn shells(&self) -> &[ShellData; 4] { todo!() }
}

/// All elements Z = 1..=98, parsed once from the embedded tables.
pub struct ElementTable {
    // private
}

impl ElementTable {
    /// The element with atomic number `z` (1..=98).
    pub fn get(&self, z: u32) -> Result<&Element, XsError> { let _ = z; todo!() }
    /// The element with chemical symbol `symbol` (case as in the periodic table, e.g. "Pb").
    pub fn by_symbol(&self, symbol: &str) -> Result<&Element, XsError> { let _ = symbol; todo!() }
    /// Where the tables came from.
    pub fn provenance(&self) -> &crate::Provenance { todo!() }
}

/// The embedded element tables (parsed on first use, then shared).
pub fn elements() -> &'static ElementTable { todo!() }
