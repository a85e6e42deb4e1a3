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

/// A malformed provenance sidecar.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ProvenanceError {
    /// A line that is not `key = value`.
    #[error("provenance.toml:{line}:{column}: {message}")]
    Syntax {
        /// 1-based line number.
        line: usize,
        /// 1-based column.
        column: usize,
        /// What is wrong and how to fix it.
        message: String,
    },
    /// A required key is absent.
    #[error("provenance.toml: missing key `{0}`; regenerate the tables with xsdata/generate/make_tables.py --force")]
    Missing(&'static str),
}

const KEYS: [&str; 5] = ["source", "generator_sha256", "tables_sha256", "generated", "format_version"];

impl Provenance {
    /// Parses the sidecar written by the generator: comment lines (`#`), blank lines and
    /// `key = "string"` / `key = integer` lines with the keys of this struct. Unknown and
    /// repeated keys are errors.
    pub fn from_toml_str(text: &str) -> Result<Provenance, ProvenanceError> {
        let mut values: [Option<String>; 5] = Default::default();
        let mut version: Option<u32> = None;
        for (n, raw) in text.lines().enumerate() {
            let line = n + 1;
            let trimmed = raw.trim();
            if trimmed.is_empty() || trimmed.starts_with('#') {
                continue;
            }
            let syntax = |column: usize, message: String| ProvenanceError::Syntax { line, column, message };
            let eq = raw.find('=').ok_or_else(|| syntax(1, "expected `key = value`".into()))?;
            let key = raw[..eq].trim();
            let value = raw[eq + 1..].trim();
            let value_col = eq + 2 + (raw[eq + 1..].len() - raw[eq + 1..].trim_start().len());
            let slot = KEYS.iter().position(|k| *k == key).ok_or_else(|| {
                syntax(1, format!("unknown key `{key}` (expected one of {})", KEYS.join(", ")))
            })?;
            if key == "format_version" {
                if version.is_some() {
                    return Err(syntax(1, format!("key `{key}` given twice")));
                }
                version = Some(value.parse().map_err(|_| {
                    syntax(value_col, format!("`{key}` must be a non-negative integer, found `{value}`"))
                })?);
            } else {
                if values[slot].is_some() {
                    return Err(syntax(1, format!("key `{key}` given twice")));
                }
                let inner = value
                    .strip_prefix('"')
                    .and_then(|v| v.strip_suffix('"'))
                    .filter(|v| !v.contains('"') && !v.contains('\\'))
                    .ok_or_else(|| syntax(value_col, format!("`{key}` must be a plain quoted string, found `{value}`")))?;
                values[slot] = Some(inner.to_string());
            }
        }
        let [source, generator_sha256, tables_sha256, generated, _] = values;
        Ok(Provenance {
            source: source.ok_or(ProvenanceError::Missing("source"))?,
            generator_sha256: generator_sha256.ok_or(ProvenanceError::Missing("generator_sha256"))?,
            tables_sha256: tables_sha256.ok_or(ProvenanceError::Missing("tables_sha256"))?,
            generated: generated.ok_or(ProvenanceError::Missing("generated"))?,
            format_version: version.ok_or(ProvenanceError::Missing("format_version"))?,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_generator_output_and_reports_bad_lines() {
        let ok = "# c\nsource = \"xraylib 4.3.0\"\ngenerator_sha256 = \"ab\"\ntables_sha256 = \"cd\"\ngenerated = \"2026-01-01T00:00:00Z\"\nformat_version = 1\n";
        let p = Provenance::from_toml_str(ok).unwrap();
        assert_eq!(p.source, "xraylib 4.3.0");
        assert_eq!(p.format_version, 1);
        let bad = ok.replace("format_version = 1", "format_version = one");
        match Provenance::from_toml_str(&bad) {
            Err(ProvenanceError::Syntax { line: 6, column: 18, .. }) => {}
            other => panic!("unexpected {other:?}"),
        }
        let unknown = format!("{ok}colour = \"red\"\n");
        assert!(matches!(Provenance::from_toml_str(&unknown), Err(ProvenanceError::Syntax { line: 7, .. })));
        let missing = ok.replace("generated = \"2026-01-01T00:00:00Z\"\n", "");
        assert_eq!(Provenance::from_toml_str(&missing), Err(ProvenanceError::Missing("generated")));
    }
}
