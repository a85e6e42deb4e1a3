//! Per-element interaction data: cross sections on an energy grid with edges as duplicated
//! energies, subshell shares of photoabsorption, atomic form factor F(x,Z), incoherent
//! scattering function S(x,Z), fluorescence yields and radiative lines.
//!
//! API CONTRACT (other crates code against exactly these signatures; do not rename).
//!
//! # Where the numbers come from
//! `xsdata/generate/make_tables.py` evaluates xraylib (version in [`crate::Provenance`]) and
//! writes `xsdata/data/elements.b7` (the binary tables in a text-safe 7-bit packing, see [`unpack7`]), embedded here with `include_bytes!`. The photoelectric cross
//! section is xraylib's; the coherent and incoherent cross sections are integrals of the stored
//! (clamped, interpolated) F and S, so that sampling angles from F and S is consistent with the
//! cross sections used for path lengths.
//!
//! # Interpolation
//! Cross sections: log-log between energy nodes. The grid is log-uniform (100 intervals per
//! decade, 1–800 keV), plus every jump of the photo cross section as a duplicated energy (value
//! below, value above), plus nodes added where log-log interpolation missed xraylib's photo cross
//! section by more than 0.03 %. Lookup uses a direct index: a per-element array maps each of
//! 4 × (uniform intervals) equal buckets in ln E to a node at or below the bucket, followed by a
//! short forward step. At an exact edge energy the value above the edge is returned. Shell shares
//! are linear in ln E (they are constant between edges). F and S: log-log where both ends of an
//! interval are positive, linear otherwise (the first interval, from x = 0, is linear).
//!
//! # Table format (version 1, little-endian)
//! ```text
//! header:  magic b"DMXSDATA", u32 format_version, u32 n_elements,
//!          f64 e_min_kev, f64 e_max_kev, u32 n_uniform_intervals,
//!          u32 n_x, f64 x[n_x]                  (1/Å; x[0] = 0, then log-uniform)
//! element: u32 z, [u8; 4] symbol (ASCII, NUL-padded), f64 atomic_weight (g/mol),
//!          u32 n, f64 energy_kev[n], f64 photo[n], f64 coherent[n], f64 incoherent[n] (cm²/g),
//!          f64 share_k[n], f64 share_l1[n], f64 share_l2[n], f64 share_l3[n],
//!          u32 n_edges, n_edges × (f64 edge_kev, u32 xraylib_shell (255 = unassigned)),
//!          f64 form_factor[n_x], f64 incoherent_function[n_x],
//!          4 × shell (K, L1, L2, L3): u32 shell_code, f64 edge_kev, f64 fluorescence_yield,
//!              f64 coster_kronig_to_l2, f64 coster_kronig_to_l3, u32 n_lines,
//!              n_lines × (f64 kev, f64 share, u32 from_code, [u8; 8] IUPAC label, NUL-padded)
//! trailer: magic b"DMXSEND\0"
//! ```
//! Shell codes: 0 K, 1 L1, 2 L2, 3 L3, 4 outer (M and beyond). An edge appears in the energy
//! array twice (below, then above); energies are non-decreasing.

use std::sync::OnceLock;

use crate::provenance::Provenance;
use crate::{E_MAX_KEV, E_MIN_KEV};

/// The table file, embedded at build time in its text-safe 7-bit packing (see [`unpack7`]).
const TABLE_PACKED: &[u8] = include_bytes!("../data/elements.b7");

/// Undoes the generator's text-safe packing: each 8-byte block (high bits set, 7 payload bits
/// each, most significant first) becomes 7 bytes; the stream starts with the table's length as
/// 8 little-endian bytes. Returns `None` for a damaged stream.
pub fn unpack7(packed: &[u8]) -> Option<Vec<u8>> {
    if packed.len() % 8 != 0 || packed.iter().any(|b| b & 0x80 == 0) {
        return None;
    }
    let mut stream = Vec::with_capacity(packed.len() / 8 * 7);
    for block in packed.chunks_exact(8) {
        let v = block.iter().fold(0u64, |acc, b| (acc << 7) | (b & 0x7F) as u64);
        stream.extend_from_slice(&v.to_be_bytes()[1..]);
    }
    let len = u64::from_le_bytes(stream.get(..8)?.try_into().ok()?) as usize;
    stream.get(8..8 + len).map(|d| d.to_vec())
}
/// Its provenance sidecar.
const PROVENANCE_TOML: &str = include_str!("../data/provenance.toml");

/// The table format version this loader reads.
pub const TABLE_FORMAT_VERSION: u32 = 1;
/// Highest atomic number in the tables.
pub const Z_MAX: u32 = 98;

const MAGIC: &[u8; 8] = b"DMXSDATA";
const END_MAGIC: &[u8; 8] = b"DMXSEND\0";
/// Lookup buckets per uniform grid interval.
const BUCKETS_PER_INTERVAL: usize = 4;

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

/// A malformed table file (only possible if `elements.bin` was damaged or hand-edited).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum TableFormatError {
    /// The file ended early.
    #[error("element tables: file ends at byte {offset} while reading {what}; regenerate it with xsdata/generate/make_tables.py --force")]
    Truncated {
        /// Byte offset where more data was expected.
        offset: usize,
        /// What was being read.
        what: &'static str,
    },
    /// Wrong magic bytes or version.
    #[error("element tables: {0}; regenerate them with xsdata/generate/make_tables.py --force")]
    Header(String),
    /// A value that cannot be right.
    #[error("element tables: element Z={z}: {what}; regenerate them with xsdata/generate/make_tables.py --force")]
    Invalid {
        /// Atomic number of the element concerned.
        z: u32,
        /// What is wrong.
        what: String,
    },
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

impl Shell {
    /// Index of a followed shell in [`Element::shells`] and [`Element::photo_shell_shares`]
    /// (K 0, L1 1, L2 2, L3 3); `None` for [`Shell::Outer`].
    pub fn index(self) -> Option<usize> {
        match self {
            Shell::K => Some(0),
            Shell::L1 => Some(1),
            Shell::L2 => Some(2),
            Shell::L3 => Some(3),
            Shell::Outer => None,
        }
    }

    fn from_code(code: u32) -> Option<Shell> {
        match code {
            0 => Some(Shell::K),
            1 => Some(Shell::L1),
            2 => Some(Shell::L2),
            3 => Some(Shell::L3),
            4 => Some(Shell::Outer),
            _ => None,
        }
    }
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

/// All interaction data of one element at one energy (one grid lookup).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Interaction {
    /// Photoelectric mass cross section (cm²/g).
    pub photo_cm2_g: f64,
    /// Coherent (Rayleigh) mass cross section (cm²/g).
    pub coherent_cm2_g: f64,
    /// Bound incoherent (Compton) mass cross section (cm²/g).
    pub incoherent_cm2_g: f64,
    /// Shares of the photoelectric cross section taken by K, L1, L2, L3.
    pub photo_shell_shares: [f64; 4],
}

impl Interaction {
    /// Total mass attenuation coefficient μ/ρ (cm²/g), coherent included.
    pub fn total_cm2_g(&self) -> f64 {
        self.photo_cm2_g + self.coherent_cm2_g + self.incoherent_cm2_g
    }
}

/// Interaction data of one element.
///
/// The lookups (`photo_cm2_g`, `interaction`, …) take energies in keV and never fail: energies
/// outside 1–800 keV are clamped to the range, so callers validate energies once, up front, with
/// [`Element::check_energy`] (or use the `try_` variants, which return
/// [`XsError::EnergyOutOfRange`]). They allocate nothing and do not search: see the module docs.
#[derive(Debug, Clone)]
pub struct Element {
    /// Atomic number.
    pub z: u32,
    /// Chemical symbol ("H", "Pb").
    pub symbol: String,
    /// Standard atomic weight (g/mol).
    pub atomic_weight: f64,
    // Energy grid.
    nodes_kev: Vec<f64>,
    ln_nodes: Vec<f64>,
    /// 1 / (ln E[i+1] − ln E[i]) per interval; 0 for the zero-width interval of an edge.
    inv_dln: Vec<f64>,
    photo: Vec<f64>,
    coherent: Vec<f64>,
    incoherent: Vec<f64>,
    ln_photo: Vec<f64>,
    ln_coherent: Vec<f64>,
    ln_incoherent: Vec<f64>,
    shares: Vec<[f64; 4]>,
    /// For each bucket in ln E: a node index at or below every energy of the bucket.
    bucket_first: Vec<u32>,
    ln_e_min: f64,
    buckets_per_ln: f64,
    edges_kev: Vec<f64>,
    edge_shells: Vec<u32>,
    // Momentum-transfer grid.
    x_nodes: Vec<f64>,
    ln_x: Vec<f64>,
    /// 1 / (ln x[i+1] − ln x[i]) per interval (interval 0 starts at x = 0: unused).
    inv_dln_x: Vec<f64>,
    ln_x_first: f64,
    x_intervals_per_ln: f64,
    /// Interval of the x grid at or below each bucket of `x_bucket_index` (see [`x_bucket_of`]).
    x_bucket_first: Vec<u32>,
    form_factor: ScatterFunction,
    incoherent_function: ScatterFunction,
    shells: [ShellData; 4],
    line_labels: [Vec<String>; 4],
}

/// Values of F or S on the x grid with what log-log interpolation needs.
#[derive(Debug, Clone)]
struct ScatterFunction {
    values: Vec<f64>,
    ln_values: Vec<f64>,
    /// Interval i is interpolated log-log (both ends positive, x[i] > 0), else linearly.
    log_log: Vec<bool>,
}

impl ScatterFunction {
    fn new(values: Vec<f64>, x: &[f64]) -> Self {
        let ln_values = values.iter().map(|v| if *v > 0.0 { v.ln() } else { f64::NEG_INFINITY }).collect();
        let log_log = (0..values.len() - 1)
            .map(|i| x[i] > 0.0 && values[i] > 0.0 && values[i + 1] > 0.0)
            .collect();
        ScatterFunction { values, ln_values, log_log }
    }
}

impl Element {
    /// Checks that `kev` lies inside the tabulated range 1–800 keV.
    pub fn check_energy(kev: f64) -> Result<(), XsError> {
        if (E_MIN_KEV..=E_MAX_KEV).contains(&kev) {
            Ok(())
        } else {
            Err(XsError::EnergyOutOfRange { kev, min: E_MIN_KEV, max: E_MAX_KEV })
        }
    }

    /// Interval index i and fraction t in ln E, for nodes[i] ≤ kev < nodes[i+1] (the last
    /// interval for kev = E_MAX). Energies outside 1–800 keV are clamped to the range: callers
    /// validate energies once, up front, with [`Element::check_energy`] or the `try_` methods.
    #[inline]
    fn locate(&self, kev: f64) -> (usize, f64) {
        let kev = kev.clamp(E_MIN_KEV, E_MAX_KEV);
        self.locate_ln(kev, kev.ln())
    }

    /// [`Element::locate`] for an energy inside 1–800 keV whose logarithm `ln_e` is known.
    #[inline]
    fn locate_ln(&self, kev: f64, ln_e: f64) -> (usize, f64) {
        let bucket = (((ln_e - self.ln_e_min) * self.buckets_per_ln) as usize).min(self.bucket_first.len() - 1);
        let mut i = self.bucket_first[bucket] as usize;
        let last = self.nodes_kev.len() - 2;
        while i < last && self.nodes_kev[i + 1] <= kev {
            i += 1;
        }
        (i, (ln_e - self.ln_nodes[i]) * self.inv_dln[i])
    }

    #[inline]
    fn log_log(ln_values: &[f64], i: usize, t: f64) -> f64 {
        let a = ln_values[i];
        (a + t * (ln_values[i + 1] - a)).exp()
    }

    /// All cross sections and shell shares at `kev` with one grid lookup (energies outside
    /// 1–800 keV are clamped; see [`Element::try_interaction`]).
    #[inline]
    pub fn interaction(&self, kev: f64) -> Interaction {
        let (i, t) = self.locate(kev);
        Interaction {
            photo_cm2_g: Self::log_log(&self.ln_photo, i, t),
            coherent_cm2_g: Self::log_log(&self.ln_coherent, i, t),
            incoherent_cm2_g: Self::log_log(&self.ln_incoherent, i, t),
            photo_shell_shares: self.shares_at(i, t),
        }
    }

    /// [`Element::interaction`], with an error outside 1–800 keV.
    pub fn try_interaction(&self, kev: f64) -> Result<Interaction, XsError> {
        Self::check_energy(kev)?;
        Ok(self.interaction(kev))
    }

    /// [`Element::total_cm2_g`], with an error outside 1–800 keV.
    pub fn try_total_cm2_g(&self, kev: f64) -> Result<f64, XsError> {
        Self::check_energy(kev)?;
        Ok(self.total_cm2_g(kev))
    }

    /// Photoelectric mass cross section (cm²/g); at an edge energy the value above the edge.
    pub fn photo_cm2_g(&self, kev: f64) -> f64 {
        let (i, t) = self.locate(kev);
        Self::log_log(&self.ln_photo, i, t)
    }
    /// Coherent (Rayleigh) mass cross section (cm²/g), consistent with [`Element::form_factor`].
    pub fn coherent_cm2_g(&self, kev: f64) -> f64 {
        let (i, t) = self.locate(kev);
        Self::log_log(&self.ln_coherent, i, t)
    }
    /// Bound incoherent (Compton) mass cross section (cm²/g), consistent with [`Element::incoherent_function`].
    pub fn incoherent_cm2_g(&self, kev: f64) -> f64 {
        let (i, t) = self.locate(kev);
        Self::log_log(&self.ln_incoherent, i, t)
    }
    /// Total mass attenuation coefficient μ/ρ (cm²/g), coherent included.
    pub fn total_cm2_g(&self, kev: f64) -> f64 {
        self.interaction(kev).total_cm2_g()
    }
    /// Shares of the photoelectric cross section at `kev` taken by K, L1, L2, L3 (the rest is outer shells).
    ///
    /// Derived from the jump ratios J of the photo cross section at each edge: a shell whose
    /// edge lies below `kev` takes 1 − 1/J of what the deeper shells leave; constant between
    /// edges. At an edge energy, the shares above the edge. A shell's share starts at the photo
    /// data's jump ([`Element::edges_kev`]), which may lie a few eV below the binding energy
    /// [`ShellData::edge_kev`]: a photoelectron energy E − edge_kev must be clamped at 0.
    pub fn photo_shell_shares(&self, kev: f64) -> [f64; 4] {
        let (i, t) = self.locate(kev);
        self.shares_at(i, t)
    }
    /// [`Element::photo_shell_shares`] given also `ln_kev`, the natural logarithm of `kev`
    /// (`kev.ln()`, as a photon carries it): the same values bit for bit, without computing the
    /// logarithm again (energies outside 1–800 keV fall back to the clamped lookup).
    #[inline]
    pub fn photo_shell_shares_ln(&self, kev: f64, ln_kev: f64) -> [f64; 4] {
        let (i, t) = if (E_MIN_KEV..=E_MAX_KEV).contains(&kev) { self.locate_ln(kev, ln_kev) } else { self.locate(kev) };
        self.shares_at(i, t)
    }
    #[inline]
    fn shares_at(&self, i: usize, t: f64) -> [f64; 4] {
        let (a, b) = (self.shares[i], self.shares[i + 1]);
        [a[0] + t * (b[0] - a[0]), a[1] + t * (b[1] - a[1]), a[2] + t * (b[2] - a[2]), a[3] + t * (b[3] - a[3])]
    }
    /// Energy nodes of this element's cross-section grid (keV), ascending; each edge appears twice.
    pub fn nodes_kev(&self) -> &[f64] {
        &self.nodes_kev
    }
    /// Photoelectric cross section (cm²/g) at the nodes of [`Element::nodes_kev`] (at an edge:
    /// the value below, then the value above).
    pub fn photo_nodes_cm2_g(&self) -> &[f64] {
        &self.photo
    }
    /// Coherent cross section (cm²/g) at the nodes of [`Element::nodes_kev`].
    pub fn coherent_nodes_cm2_g(&self) -> &[f64] {
        &self.coherent
    }
    /// Incoherent cross section (cm²/g) at the nodes of [`Element::nodes_kev`].
    pub fn incoherent_nodes_cm2_g(&self) -> &[f64] {
        &self.incoherent
    }
    /// Shell shares (K, L1, L2, L3) at the nodes of [`Element::nodes_kev`].
    pub fn photo_shell_share_nodes(&self) -> &[[f64; 4]] {
        &self.shares
    }
    /// All absorption edges inside the data range (keV), ascending (K, L, M, … as tabulated).
    ///
    /// These are the energies where the photo cross section jumps, i.e. the tabulation's own edge
    /// energies; they lie within a few eV (K, L) to a few per cent (some M, N edges of heavy
    /// elements) of the binding energies in [`ShellData::edge_kev`].
    pub fn edges_kev(&self) -> &[f64] {
        &self.edges_kev
    }
    /// For each entry of [`Element::edges_kev`], the shell it belongs to in xraylib's numbering
    /// (0 K, 1–3 L1–L3, 4–8 M1–M5, 9–15 N1–N7, …; the shell whose binding energy is nearest).
    pub fn edge_shell_numbers(&self) -> &[u32] {
        &self.edge_shells
    }

    /// Interval k of the x grid containing x (0 < x < x_last), by direct index.
    #[inline]
    fn locate_x(&self, x: f64) -> usize {
        let n = self.x_nodes.len();
        if x < self.x_nodes[1] {
            return 0;
        }
        let mut k = (((x.ln() - self.ln_x_first) * self.x_intervals_per_ln) as usize + 1).min(n - 2);
        // Rounding of the logarithm can put x one interval off.
        while k + 2 < n && self.x_nodes[k + 1] <= x {
            k += 1;
        }
        while k > 1 && self.x_nodes[k] > x {
            k -= 1;
        }
        k
    }

    /// [`Element::locate_x`] without a logarithm: the bucket of x's floating-point exponent and
    /// leading mantissa bits gives an interval at or below x, then a short forward step. Same
    /// result as `locate_x` (the interval k with x[k] ≤ x < x[k+1]); for x[1] ≤ x < x_last.
    #[inline]
    fn locate_x_bits(&self, x: f64) -> usize {
        let n = self.x_nodes.len();
        let b = x_bucket_of(x, self.x_nodes[1]).min(self.x_bucket_first.len() - 1);
        let mut k = self.x_bucket_first[b] as usize;
        while k + 2 < n && self.x_nodes[k + 1] <= x {
            k += 1;
        }
        k
    }

    /// Whether `f(x) ≥ level`, exactly as `scatter_value(f, x) >= level`, mostly without
    /// evaluating f: between nodes the interpolant (log-log or linear) lies between the two node
    /// values, so a level clearly below both or clearly above both decides (the margin covers
    /// the rounding of the interpolation); otherwise f is evaluated.
    #[inline]
    fn scatter_at_least(&self, f: &ScatterFunction, x: f64, level: f64) -> bool {
        let n = self.x_nodes.len();
        if x > 0.0 && x >= self.x_nodes[1] && x < self.x_nodes[n - 1] {
            let k = self.locate_x_bits(x);
            let (a, b) = (f.values[k], f.values[k + 1]);
            let (lo, hi) = if a <= b { (a, b) } else { (b, a) };
            if level < lo * (1.0 - SQUEEZE_MARGIN) {
                return true;
            }
            if level > hi * (1.0 + SQUEEZE_MARGIN) {
                return false;
            }
        }
        self.scatter_value(f, x) >= level
    }

    /// F or S at x, clamped to [0, Z] (log-log interpolation between nodes equal to Z could
    /// exceed Z in the last bit).
    #[inline]
    fn scatter_value(&self, f: &ScatterFunction, x: f64) -> f64 {
        self.scatter_interpolate(f, x).clamp(0.0, self.z as f64)
    }

    #[inline]
    fn scatter_interpolate(&self, f: &ScatterFunction, x: f64) -> f64 {
        let n = self.x_nodes.len();
        if x <= 0.0 {
            return f.values[0];
        }
        if x >= self.x_nodes[n - 1] {
            return f.values[n - 1];
        }
        let k = self.locate_x(x);
        if f.log_log[k] {
            let t = (x.ln() - self.ln_x[k]) * self.inv_dln_x[k];
            (f.ln_values[k] + t * (f.ln_values[k + 1] - f.ln_values[k])).exp()
        } else {
            let (x0, x1) = (self.x_nodes[k], self.x_nodes[k + 1]);
            f.values[k] + (f.values[k + 1] - f.values[k]) * (x - x0) / (x1 - x0)
        }
    }

    /// Atomic form factor F(x, Z), x = sin(θ/2)/λ in 1/Å; clamped to [0, Z].
    ///
    /// Tabulated from xraylib's FF_Rayl with F(0) = Z; values below 0 (a few light elements at
    /// large x) are stored as 0. Beyond the last node (100 1/Å) the last value is returned.
    pub fn form_factor(&self, x_inv_angstrom: f64) -> f64 {
        self.scatter_value(&self.form_factor, x_inv_angstrom)
    }
    /// Incoherent scattering function S(x, Z); clamped to [0, Z].
    ///
    /// Tabulated from xraylib's SF_Compt (first nonzero node 1e-3 1/Å, where it is defined) with
    /// S(0) = 0; values above Z (a slight overshoot at large x) are stored as Z.
    pub fn incoherent_function(&self, x_inv_angstrom: f64) -> f64 {
        self.scatter_value(&self.incoherent_function, x_inv_angstrom)
    }
    /// Whether S(x, Z) ≥ `level`: the same answer as `incoherent_function(x) >= level`, bit for
    /// bit, but S is only evaluated when `level` falls between the values at the two nodes
    /// around x (a rejection test on S needs no logarithm or exponential otherwise).
    #[inline]
    pub fn incoherent_function_at_least(&self, x_inv_angstrom: f64, level: f64) -> bool {
        self.scatter_at_least(&self.incoherent_function, x_inv_angstrom, level)
    }
    /// Whether F(x, Z) ≥ `level`, as `form_factor(x) >= level` (see
    /// [`Element::incoherent_function_at_least`]).
    #[inline]
    pub fn form_factor_at_least(&self, x_inv_angstrom: f64, level: f64) -> bool {
        self.scatter_at_least(&self.form_factor, x_inv_angstrom, level)
    }
    /// The momentum-transfer nodes (1/Å) on which F and S are tabulated, ascending, first node 0.
    pub fn x_nodes_inv_angstrom(&self) -> &[f64] {
        &self.x_nodes
    }
    /// F(x, Z) at the nodes of [`Element::x_nodes_inv_angstrom`].
    pub fn form_factor_nodes(&self) -> &[f64] {
        &self.form_factor.values
    }
    /// S(x, Z) at the nodes of [`Element::x_nodes_inv_angstrom`].
    pub fn incoherent_function_nodes(&self) -> &[f64] {
        &self.incoherent_function.values
    }
    /// Data for K, L1, L2, L3 in that order.
    pub fn shells(&self) -> &[ShellData; 4] {
        &self.shells
    }
    /// The line of a followed shell with IUPAC label `label` (e.g. "KL3" for Kα1, "KM3" for
    /// Kβ1, "L3M5" for Lα1), if tabulated.
    pub fn line(&self, shell: Shell, label: &str) -> Option<&Line> {
        let s = shell.index()?;
        let i = self.line_labels[s].iter().position(|l| l == label)?;
        Some(&self.shells[s].lines[i])
    }
    /// IUPAC labels of the lines of a followed shell, in the order of [`ShellData::lines`].
    pub fn line_labels(&self, shell: Shell) -> &[String] {
        match shell.index() {
            Some(s) => &self.line_labels[s],
            None => &[],
        }
    }
}

/// All elements Z = 1..=98, parsed once from the embedded tables.
pub struct ElementTable {
    elements: Vec<Element>,
    provenance: Provenance,
}

impl ElementTable {
    /// The element with atomic number `z` (1..=98).
    pub fn get(&self, z: u32) -> Result<&Element, XsError> {
        if z == 0 {
            return Err(XsError::NoSuchElement(z));
        }
        self.elements.get(z as usize - 1).ok_or(XsError::NoSuchElement(z))
    }
    /// The element with chemical symbol `symbol` (case as in the periodic table, e.g. "Pb").
    pub fn by_symbol(&self, symbol: &str) -> Result<&Element, XsError> {
        self.elements
            .iter()
            .find(|e| e.symbol == symbol)
            .ok_or_else(|| XsError::UnknownSymbol(symbol.to_string()))
    }
    /// Where the tables came from.
    pub fn provenance(&self) -> &crate::Provenance {
        &self.provenance
    }
    /// All elements, Z = 1..=98 in order.
    pub fn all(&self) -> &[Element] {
        &self.elements
    }

    /// Parses a table file (format version [`TABLE_FORMAT_VERSION`]) and its provenance.
    pub fn parse(bytes: &[u8], provenance: Provenance) -> Result<ElementTable, TableFormatError> {
        let mut r = Reader { bytes, pos: 0 };
        if r.take(8, "magic")? != MAGIC {
            return Err(TableFormatError::Header("not a dosemill element table (bad magic bytes)".into()));
        }
        let version = r.u32("format version")?;
        if version != TABLE_FORMAT_VERSION {
            return Err(TableFormatError::Header(format!(
                "format version {version}, this build reads version {TABLE_FORMAT_VERSION}"
            )));
        }
        let n_elements = r.u32("element count")? as usize;
        let e_min = r.f64("e_min")?;
        let e_max = r.f64("e_max")?;
        if e_min != E_MIN_KEV || e_max != E_MAX_KEV {
            return Err(TableFormatError::Header(format!(
                "energy range {e_min}–{e_max} keV, expected {E_MIN_KEV}–{E_MAX_KEV} keV"
            )));
        }
        let n_intervals = r.u32("uniform interval count")? as usize;
        let n_x = r.u32("x node count")? as usize;
        let x_nodes = r.f64s(n_x, "x nodes")?;
        if n_x < 3 || x_nodes[0] != 0.0 || x_nodes.windows(2).any(|w| w[1] <= w[0]) {
            return Err(TableFormatError::Header("x grid must start at 0 and increase".into()));
        }
        let ln_x: Vec<f64> = x_nodes.iter().map(|x| if *x > 0.0 { x.ln() } else { f64::NEG_INFINITY }).collect();
        let ln_x_first = ln_x[1];
        let x_intervals_per_ln = (n_x - 2) as f64 / (ln_x[n_x - 1] - ln_x_first);
        let inv_dln_x: Vec<f64> = (0..n_x - 1)
            .map(|i| if i == 0 { 0.0 } else { 1.0 / (ln_x[i + 1] - ln_x[i]) })
            .collect();
        let x_bucket_first = x_bucket_table(&x_nodes);
        let ln_e_min = e_min.ln();
        let n_buckets = n_intervals * BUCKETS_PER_INTERVAL;
        let buckets_per_ln = n_buckets as f64 / (e_max.ln() - ln_e_min);

        let mut elements = Vec::with_capacity(n_elements);
        for expect_z in 1..=n_elements as u32 {
            let z = r.u32("atomic number")?;
            if z != expect_z {
                return Err(TableFormatError::Invalid { z, what: format!("expected element {expect_z} here") });
            }
            let sym = r.take(4, "symbol")?;
            let symbol: String = sym.iter().take_while(|b| **b != 0).map(|b| *b as char).collect();
            let atomic_weight = r.f64("atomic weight")?;
            let n = r.u32("node count")? as usize;
            let nodes_kev = r.f64s(n, "energy nodes")?;
            let photo = r.f64s(n, "photo")?;
            let coherent = r.f64s(n, "coherent")?;
            let incoherent = r.f64s(n, "incoherent")?;
            let mut share_cols = Vec::with_capacity(4);
            for _ in 0..4 {
                share_cols.push(r.f64s(n, "shell shares")?);
            }
            let n_edges = r.u32("edge count")? as usize;
            let mut edges_kev = Vec::with_capacity(n_edges);
            let mut edge_shells = Vec::with_capacity(n_edges);
            for _ in 0..n_edges {
                edges_kev.push(r.f64("edge energy")?);
                edge_shells.push(r.u32("edge shell")?);
            }
            let ff = r.f64s(n_x, "form factor")?;
            let sf = r.f64s(n_x, "incoherent function")?;
            let mut shells = Vec::with_capacity(4);
            let mut line_labels: [Vec<String>; 4] = Default::default();
            for (s, labels) in line_labels.iter_mut().enumerate() {
                let code = r.u32("shell code")?;
                if code as usize != s {
                    return Err(TableFormatError::Invalid { z, what: format!("shell record {s} has code {code}") });
                }
                let edge_kev = r.f64("shell edge")?;
                let fluorescence_yield = r.f64("fluorescence yield")?;
                let ck = (r.f64("Coster-Kronig")?, r.f64("Coster-Kronig")?);
                let n_lines = r.u32("line count")? as usize;
                let mut lines = Vec::with_capacity(n_lines);
                for _ in 0..n_lines {
                    let kev = r.f64("line energy")?;
                    let share = r.f64("line share")?;
                    let from_code = r.u32("line origin")?;
                    let from = Shell::from_code(from_code).ok_or_else(|| TableFormatError::Invalid {
                        z,
                        what: format!("line origin code {from_code}"),
                    })?;
                    let label = r.take(8, "line label")?;
                    labels.push(label.iter().take_while(|b| **b != 0).map(|b| *b as char).collect());
                    lines.push(Line { kev, share, from });
                }
                shells.push(ShellData {
                    shell: Shell::from_code(code).expect("code checked above"),
                    edge_kev,
                    fluorescence_yield,
                    lines,
                    coster_kronig: ck,
                });
            }
            let shells: [ShellData; 4] = shells.try_into().expect("four shells read");

            // Validate what the interpolation relies on.
            if n < 2 || nodes_kev[0] != e_min || nodes_kev[n - 1] != e_max {
                return Err(TableFormatError::Invalid { z, what: "energy grid must span the data range".into() });
            }
            if nodes_kev.windows(2).any(|w| w[1] < w[0]) || nodes_kev.windows(3).any(|w| w[0] == w[2]) {
                return Err(TableFormatError::Invalid { z, what: "energy nodes must ascend (edges twice)".into() });
            }
            if photo.iter().chain(&coherent).chain(&incoherent).any(|v| !(*v > 0.0 && v.is_finite())) {
                return Err(TableFormatError::Invalid { z, what: "cross sections must be positive".into() });
            }

            let ln_nodes: Vec<f64> = nodes_kev.iter().map(|e| e.ln()).collect();
            let inv_dln: Vec<f64> = (0..n - 1)
                .map(|i| {
                    let d = ln_nodes[i + 1] - ln_nodes[i];
                    if d > 0.0 { 1.0 / d } else { 0.0 }
                })
                .collect();
            let bucket_of = |e: f64| ((e.ln() - ln_e_min) * buckets_per_ln) as usize;
            // bucket_first[b]: the last node whose bucket is below b (0 if none). Every energy of
            // bucket b lies at or above that node, so the forward step in `locate` finds the
            // interval; energies are compared exactly in keV there.
            let mut bucket_first = vec![0u32; n_buckets + 1];
            let mut i = 0usize;
            for (b, slot) in bucket_first.iter_mut().enumerate() {
                while i + 1 < n - 1 && bucket_of(nodes_kev[i + 1]) < b {
                    i += 1;
                }
                *slot = i as u32;
            }
            let shares = (0..n)
                .map(|k| [share_cols[0][k], share_cols[1][k], share_cols[2][k], share_cols[3][k]])
                .collect();
            elements.push(Element {
                z,
                symbol,
                atomic_weight,
                ln_photo: photo.iter().map(|v| v.ln()).collect(),
                ln_coherent: coherent.iter().map(|v| v.ln()).collect(),
                ln_incoherent: incoherent.iter().map(|v| v.ln()).collect(),
                photo,
                coherent,
                incoherent,
                nodes_kev,
                ln_nodes,
                inv_dln,
                shares,
                bucket_first,
                ln_e_min,
                buckets_per_ln,
                edges_kev,
                edge_shells,
                form_factor: ScatterFunction::new(ff, &x_nodes),
                incoherent_function: ScatterFunction::new(sf, &x_nodes),
                x_nodes: x_nodes.clone(),
                ln_x: ln_x.clone(),
                inv_dln_x: inv_dln_x.clone(),
                ln_x_first,
                x_intervals_per_ln,
                x_bucket_first: x_bucket_first.clone(),
                shells,
                line_labels,
            });
        }
        if r.take(8, "end marker")? != END_MAGIC || r.pos != bytes.len() {
            return Err(TableFormatError::Header(format!("end marker missing or trailing bytes after byte {}", r.pos)));
        }
        Ok(ElementTable { elements, provenance })
    }
}

/// Relative margin of the node-value bounds in [`Element::scatter_at_least`]: far above the
/// rounding of one interpolation (a few 1e-16 relative), so a decision by the bounds is always
/// the decision of the evaluated function.
const SQUEEZE_MARGIN: f64 = 1e-12;
/// Leading mantissa bits used by [`x_bucket_of`]: 2⁶ buckets per octave of x.
const X_BUCKET_MANTISSA_BITS: u32 = 6;

/// Bucket of x > 0 relative to `x_first` (the first positive node): the floating-point exponent
/// and the leading mantissa bits of x, minus those of `x_first`; monotone in x, 0 below x_first.
#[inline]
fn x_bucket_of(x: f64, x_first: f64) -> usize {
    let shift = 52 - X_BUCKET_MANTISSA_BITS;
    ((x.to_bits() >> shift) as usize).saturating_sub((x_first.to_bits() >> shift) as usize)
}

/// For each bucket of [`x_bucket_of`] from x[1] to x_last: the last interval k ≥ 1 whose start
/// x[k] lies in an earlier or the same bucket and at or below the bucket's smallest x. Every x of the
/// bucket then lies at or above x[k].
fn x_bucket_table(x: &[f64]) -> Vec<u32> {
    let n = x.len();
    let n_buckets = x_bucket_of(x[n - 1], x[1]) + 1;
    let shift = 52 - X_BUCKET_MANTISSA_BITS;
    let first_bits = (x[1].to_bits() >> shift) << shift;
    let mut table = Vec::with_capacity(n_buckets);
    let mut k = 1usize;
    for b in 0..n_buckets {
        // Smallest f64 of bucket b (bucket 0 starts at x[1] itself).
        let start = if b == 0 { x[1] } else { f64::from_bits(first_bits + ((b as u64) << shift)) };
        while k + 2 < n && x[k + 1] <= start {
            k += 1;
        }
        table.push(k as u32);
    }
    table
}

/// Little-endian reader over the table bytes.
struct Reader<'a> {
    bytes: &'a [u8],
    pos: usize,
}

impl<'a> Reader<'a> {
    fn take(&mut self, n: usize, what: &'static str) -> Result<&'a [u8], TableFormatError> {
        let end = self.pos.checked_add(n).filter(|e| *e <= self.bytes.len());
        match end {
            Some(end) => {
                let s = &self.bytes[self.pos..end];
                self.pos = end;
                Ok(s)
            }
            None => Err(TableFormatError::Truncated { offset: self.pos, what }),
        }
    }
    fn u32(&mut self, what: &'static str) -> Result<u32, TableFormatError> {
        Ok(u32::from_le_bytes(self.take(4, what)?.try_into().expect("4 bytes")))
    }
    fn f64(&mut self, what: &'static str) -> Result<f64, TableFormatError> {
        Ok(f64::from_le_bytes(self.take(8, what)?.try_into().expect("8 bytes")))
    }
    fn f64s(&mut self, n: usize, what: &'static str) -> Result<Vec<f64>, TableFormatError> {
        let raw = self.take(n.checked_mul(8).ok_or(TableFormatError::Truncated { offset: self.pos, what })?, what)?;
        Ok(raw.chunks_exact(8).map(|c| f64::from_le_bytes(c.try_into().expect("8 bytes"))).collect())
    }
}

/// The embedded table file (`xsdata/data/elements.b7`, unpacked), for checks against its
/// provenance.
pub fn embedded_table_bytes() -> &'static [u8] {
    static BYTES: OnceLock<Vec<u8>> = OnceLock::new();
    BYTES.get_or_init(|| unpack7(TABLE_PACKED).expect("embedded xsdata/data/elements.b7 is damaged"))
}

/// The embedded element tables (parsed on first use, then shared).
///
/// ```
/// use dosemill_xsdata::{elements, Shell};
/// let pb = elements().by_symbol("Pb").unwrap();
/// let at_100_kev = pb.interaction(100.0);
/// assert!(at_100_kev.total_cm2_g() > 5.0 && at_100_kev.photo_shell_shares[0] > 0.7);
/// let k_alpha1 = pb.line(Shell::K, "KL3").unwrap();
/// assert!((k_alpha1.kev - 74.97).abs() < 0.01);
/// ```
///
/// # Panics
/// Only if the embedded files are damaged (the build's own data; a test parses them).
pub fn elements() -> &'static ElementTable {
    static TABLE: OnceLock<ElementTable> = OnceLock::new();
    TABLE.get_or_init(|| {
        let provenance = Provenance::from_toml_str(PROVENANCE_TOML)
            .unwrap_or_else(|e| panic!("embedded xsdata/data/provenance.toml: {e}"));
        ElementTable::parse(embedded_table_bytes(), provenance).unwrap_or_else(|e| panic!("embedded xsdata/data/elements.bin: {e}"))
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The logarithm-free interval search finds the interval of the logarithmic one, at every
    /// node, just beside every node and at 200,000 spread values of x.
    #[test]
    fn bit_bucket_search_finds_the_same_interval() {
        let el = elements().get(8).unwrap();
        let x = el.x_nodes_inv_angstrom();
        let last = x[x.len() - 1];
        let mut probes: Vec<f64> = Vec::new();
        for &node in &x[1..x.len() - 1] {
            probes.extend([node, f64::from_bits(node.to_bits() - 1), f64::from_bits(node.to_bits() + 1)]);
        }
        let (l0, l1) = (x[1].ln(), last.ln());
        for i in 0..200_000 {
            probes.push((l0 + (l1 - l0) * (i as f64 + 0.5) / 200_000.0).exp());
        }
        for p in probes.into_iter().filter(|p| *p >= x[1] && *p < last) {
            let k = el.locate_x_bits(p);
            assert!(x[k] <= p && p < x[k + 1], "x = {p}: interval {k}");
            assert_eq!(k, el.locate_x(p), "x = {p}");
        }
    }

    /// `incoherent_function_at_least` / `form_factor_at_least` answer exactly as comparing the
    /// evaluated function, for levels spread over [0, Z] and levels within a few ulps of the
    /// value itself (H, O, Ca, Pb; x over the whole grid and beyond its ends).
    #[test]
    fn bound_tests_agree_with_the_evaluated_function() {
        let mut state = 12345u64;
        let mut uniform = || {
            state = state.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
            (state >> 11) as f64 / (1u64 << 53) as f64
        };
        for z in [1, 8, 20, 82] {
            let el = elements().get(z).unwrap();
            let zf = z as f64;
            for _ in 0..100_000 {
                let x = if uniform() < 0.02 { uniform() * 1e-3 } else { (uniform() * 1.1 * (200f64 / 1e-3).ln()).exp() * 1e-3 };
                let s = el.incoherent_function(x);
                let f = el.form_factor(x);
                for (value, test) in [(s, 0u8), (f, 1u8)] {
                    let nudge = f64::from_bits(value.to_bits().saturating_add((uniform() * 5.0) as u64));
                    for level in [uniform() * zf, value, nudge, value * (1.0 - 1e-13), value * (1.0 + 1e-13)] {
                        let fast = if test == 0 { el.incoherent_function_at_least(x, level) } else { el.form_factor_at_least(x, level) };
                        assert_eq!(fast, value >= level, "Z={z} x={x} level={level} value={value}");
                    }
                }
            }
        }
    }
}
