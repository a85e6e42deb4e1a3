//! Photon interaction data for dosemill: per-element tables (Z = 1..98, 1–800 keV) generated from
//! xraylib by a committed script (`xsdata/generate/`), embedded in the binary, plus the materials
//! library and quantities derived from the tables (μ/ρ, μen/ρ, HVL, …).
//!
//! Units are in the names: `kev`, `cm2_g`, `g_cm3`, `inv_angstrom`.
#![warn(missing_docs)]

pub mod element;
pub mod provenance;
pub mod material;
pub mod formula;
pub mod library;
pub mod derived;

pub use element::{elements, Element, ElementTable, Line, Shell, ShellData, XsError};
pub use element::{embedded_table_bytes, Interaction, TableFormatError, TABLE_FORMAT_VERSION, Z_MAX};
pub use provenance::{Provenance, ProvenanceError};

/// Lowest photon energy the tables cover (keV).
pub const E_MIN_KEV: f64 = 1.0;
/// Highest photon energy the tables cover (keV). Higher energies are rejected with an error.
pub const E_MAX_KEV: f64 = 800.0;
/// hc in keV·Å: momentum transfer x = sin(θ/2)/λ = (E / HC_KEV_ANGSTROM) · sin(θ/2), in 1/Å.
pub const HC_KEV_ANGSTROM: f64 = 12.398_419_84;
/// Electron rest energy m_e c² (keV), CODATA 2018.
pub const ELECTRON_REST_KEV: f64 = 510.998_950;
/// Classical electron radius (cm), CODATA 2018.
pub const CLASSICAL_ELECTRON_RADIUS_CM: f64 = 2.817_940_326_2e-13;
/// Avogadro constant (1/mol).
pub const AVOGADRO: f64 = 6.022_140_76e23;
pub use material::{Material, MaterialError};
pub use formula::{Formula, FormulaError};
pub use library::{library, lookup, LibraryEntry};
pub use derived::{coefficients, Coefficients};
