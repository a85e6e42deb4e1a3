//! Provenance of the embedded tables; every output file carries it.

/// Where the data came from and how it was made.
#[derive(Debug, Clone, PartialEq)]
pub struct Provenance {
    /// Source library and version, e.g. "xraylib 4.3.0".
    pub source: String,
    /// SHA-256 of the generator script that wrote the tables (hex).
    pub generator_sha256: String,
    /// SHA-256 of the table file itself (hex).
    pub tables_sha256: String,
    /// Date of generation (ISO 8601).
    pub generated: String,
    /// Version of our table format.
    pub format_version: u32,
}
