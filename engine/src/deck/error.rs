//! Deck errors: a position (file:line:column), the key it concerns, a message and a suggested fix.

use std::fmt;
use std::path::PathBuf;

/// One problem found in a deck, located in the file where the offending text is written.
///
/// `line` and `column` are 1-based; the column counts characters (not bytes) from the start of
/// the line. Errors that have no place in a file (for example a file that cannot be read) carry
/// line 0 and column 0 and are displayed without them.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DeckError {
    /// The file that holds the offending text, as it was named (relative paths stay relative).
    pub file: PathBuf,
    /// 1-based line number, 0 when there is no position.
    pub line: usize,
    /// 1-based column in characters, 0 when there is no position.
    pub column: usize,
    /// Dotted key path, with array indices in brackets: `geometry.layer[0].thickness_cm`.
    /// Empty when the error is not about a key (broken TOML, unreadable file).
    pub key_path: String,
    /// What is wrong.
    pub message: String,
    /// How to fix it, when there is an obvious fix ("did you mean `thickness_cm`?").
    pub hint: Option<String>,
}

impl fmt::Display for DeckError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file.display())?;
        if self.line > 0 {
            write!(f, ":{}:{}", self.line, self.column)?;
        }
        write!(f, ": ")?;
        if !self.key_path.is_empty() {
            write!(f, "key `{}`: ", self.key_path)?;
        }
        write!(f, "{}", self.message)?;
        if let Some(h) = &self.hint {
            write!(f, "; {h}")?;
        }
        Ok(())
    }
}

impl std::error::Error for DeckError {}

/// 1-based (line, column) of a byte offset; the column counts characters.
pub(crate) fn line_column(text: &str, offset: usize) -> (usize, usize) {
    let mut offset = offset.min(text.len());
    while !text.is_char_boundary(offset) {
        offset -= 1;
    }
    let before = &text[..offset];
    let line = before.bytes().filter(|&b| b == b'\n').count() + 1;
    let line_start = before.rfind('\n').map(|i| i + 1).unwrap_or(0);
    let column = text[line_start..offset].chars().count() + 1;
    (line, column)
}

/// Levenshtein edit distance between two short strings (keys, names).
pub(crate) fn edit_distance(a: &str, b: &str) -> usize {
    let a: Vec<char> = a.chars().collect();
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    let mut cur = vec![0; b.len() + 1];
    for i in 1..=a.len() {
        cur[0] = i;
        for j in 1..=b.len() {
            let cost = usize::from(a[i - 1] != b[j - 1]);
            cur[j] = (prev[j] + 1).min(cur[j - 1] + 1).min(prev[j - 1] + cost);
        }
        std::mem::swap(&mut prev, &mut cur);
    }
    prev[b.len()]
}

/// The candidate nearest to `word`, if it is close enough to be a plausible typo: an edit distance
/// of at most a third of the word's length (at least 2), or a candidate that starts with
/// `word` followed by `_` (`density` → `density_g_cm3`), or a unit variant of the same quantity
/// (`thickness_mm` → `thickness_cm`).
pub(crate) fn nearest<'a>(word: &str, candidates: &[&'a str]) -> Option<&'a str> {
    let lw = word.to_ascii_lowercase();
    // Unit variants first: same stem, another unit suffix.
    if let Some((stem, _)) = split_unit(&lw) {
        for c in candidates {
            if let Some((cstem, _)) = split_unit(c) {
                if cstem == stem {
                    return Some(c);
                }
            }
        }
    }
    let mut best: Option<(&str, usize)> = None;
    for c in candidates {
        let d = edit_distance(&lw, c);
        if best.is_none_or(|(_, bd)| d < bd) {
            best = Some((c, d));
        }
    }
    let limit = (lw.chars().count() / 3).max(2);
    if let Some((c, d)) = best {
        if d <= limit {
            return Some(c);
        }
    }
    candidates
        .iter()
        .copied()
        .find(|c| c.starts_with(&format!("{lw}_")))
}

/// Unit suffixes that appear in key names, longest first, with what they measure and their
/// factor to the unit the deck uses for that quantity.
const UNIT_SUFFIXES: &[(&str, &str, f64)] = &[
    ("_g_cm3", "density", 1.0),
    ("_kg_m3", "density", 1e-3),
    ("_g_cc", "density", 1.0),
    ("_cm", "length", 1.0),
    ("_mm", "length", 0.1),
    ("_um", "length", 1e-4),
    ("_m", "length", 100.0),
    ("_kev", "energy", 1.0),
    ("_ev", "energy", 1e-3),
    ("_mev", "energy", 1e3),
    ("_deg", "angle", 1.0),
    ("_rad", "angle", 180.0 / std::f64::consts::PI),
    ("_s", "time", 1.0),
    ("_min", "time", 60.0),
    ("_h", "time", 3600.0),
];

/// Split `thickness_mm` into (`thickness`, `_mm`) when it ends in a known unit suffix.
pub(crate) fn split_unit(key: &str) -> Option<(&str, &'static str)> {
    let mut found: Option<(&str, &'static str)> = None;
    for (suf, _, _) in UNIT_SUFFIXES {
        if let Some(stem) = key.strip_suffix(suf) {
            if !stem.is_empty() && found.is_none_or(|(_, s)| suf.len() > s.len()) {
                found = Some((stem, suf));
            }
        }
    }
    found
}

/// When `wrong` and `right` differ only in their unit suffix, a sentence saying which unit the
/// deck expects and, when the value is known, the value converted.
pub(crate) fn unit_hint(wrong: &str, right: &str, value: Option<f64>) -> Option<String> {
    let (ws, wsuf) = split_unit(wrong)?;
    let (rs, rsuf) = split_unit(right)?;
    if ws != rs || wsuf == rsuf {
        return None;
    }
    let w = UNIT_SUFFIXES.iter().find(|u| u.0 == wsuf)?;
    let r = UNIT_SUFFIXES.iter().find(|u| u.0 == rsuf)?;
    if w.1 != r.1 {
        return None;
    }
    let wu = unit_label(wsuf);
    let ru = unit_label(rsuf);
    let mut s = format!("{} are given in {ru} in decks", plural(w.1));
    if let Some(v) = value {
        let conv = v * w.2 / r.2;
        s.push_str(&format!(": {v} {wu} = {} {ru}", fmt_num(conv)));
    }
    Some(s)
}

fn unit_label(suffix: &str) -> &str {
    match suffix {
        "_g_cm3" | "_g_cc" => "g/cm³",
        "_kg_m3" => "kg/m³",
        "_kev" => "keV",
        "_ev" => "eV",
        "_mev" => "MeV",
        "_deg" => "°",
        s => &s[1..],
    }
}

fn plural(quantity: &str) -> &str {
    match quantity {
        "density" => "densities",
        "energy" => "energies",
        "length" => "lengths",
        "angle" => "angles",
        _ => "times",
    }
}

/// Short human formatting of a number (no trailing noise such as 0.30000000000000004).
pub(crate) fn fmt_num(v: f64) -> String {
    if v == 0.0 {
        return "0".into();
    }
    let s = format!("{:.6}", v);
    let s = s.trim_end_matches('0').trim_end_matches('.').to_string();
    if s == "0" || s == "-0" {
        format!("{v:e}")
    } else {
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn line_column_counts_characters() {
        let t = "a = 1\nbé = 2\n";
        assert_eq!(line_column(t, 0), (1, 1));
        assert_eq!(line_column(t, 6), (2, 1));
        // "bé" is 3 bytes; the space after it is column 3.
        assert_eq!(line_column(t, 9), (2, 3));
    }

    #[test]
    fn edit_distance_known_values() {
        // Textbook example: kitten → sitting needs 3 edits (Levenshtein 1966).
        assert_eq!(edit_distance("kitten", "sitting"), 3);
        assert_eq!(edit_distance("", "abc"), 3);
        assert_eq!(edit_distance("thicknes_cm", "thickness_cm"), 1);
    }

    #[test]
    fn nearest_prefers_unit_variant_and_prefix() {
        let c = ["material", "thickness_cm", "density_g_cm3", "name"];
        assert_eq!(nearest("thickness_mm", &c), Some("thickness_cm"));
        assert_eq!(nearest("density", &c), Some("density_g_cm3"));
        assert_eq!(nearest("materail", &c), Some("material"));
        assert_eq!(nearest("colour", &c), None);
    }

    #[test]
    fn unit_hint_converts() {
        let h = unit_hint("thickness_mm", "thickness_cm", Some(25.0)).unwrap();
        assert!(h.contains("25 mm = 2.5 cm"), "{h}");
        assert_eq!(unit_hint("thickness_cm", "material", None), None);
    }
}
