//! Spectrum files: two columns, photon energy (keV) and relative weight.
//!
//! Format: one row per energy, columns separated by a comma, semicolon, tab or spaces. Lines that
//! are blank or start with `#` are skipped; the first other line may be a header of words
//! (for example `energy_kev,weight`). Energies are strictly increasing, within 1–800 keV; weights
//! are ≥ 0 with at least one > 0. Each row is a discrete energy with its weight (for a binned
//! spectrum write bin centres).

use super::error::fmt_num;

/// A problem in a spectrum file, with its 1-based line and column.
#[derive(Debug)]
pub(crate) struct SpectrumFileError {
    pub line: usize,
    pub column: usize,
    pub message: String,
}

/// Parse and check a spectrum file's text.
pub(crate) fn parse(text: &str) -> Result<(Vec<f64>, Vec<f64>), SpectrumFileError> {
    let mut e = Vec::new();
    let mut w = Vec::new();
    let mut header_allowed = true;
    let err = |line: usize, column: usize, message: String| SpectrumFileError {
        line,
        column,
        message,
    };
    for (ln, raw) in text.lines().enumerate() {
        let line_no = ln + 1;
        let trimmed = raw.trim();
        if trimmed.is_empty() || trimmed.starts_with('#') {
            continue;
        }
        let fields: Vec<(usize, &str)> = split_fields(raw);
        let first_is_word = fields
            .first()
            .map(|(_, f)| f.parse::<f64>().is_err())
            .unwrap_or(false);
        if header_allowed && first_is_word {
            header_allowed = false;
            continue;
        }
        header_allowed = false;
        if fields.len() != 2 {
            return Err(err(
                line_no,
                1,
                format!(
                    "expected 2 columns (energy keV, weight), found {}",
                    fields.len()
                ),
            ));
        }
        let (c0, f0) = fields[0];
        let (c1, f1) = fields[1];
        let energy: f64 = f0
            .parse()
            .map_err(|_| err(line_no, c0, format!("`{f0}` is not a number")))?;
        let weight: f64 = f1
            .parse()
            .map_err(|_| err(line_no, c1, format!("`{f1}` is not a number")))?;
        if !(1.0..=800.0).contains(&energy) {
            return Err(err(
                line_no,
                c0,
                format!("energy {} keV is outside 1–800 keV", fmt_num(energy)),
            ));
        }
        if !weight.is_finite() || weight < 0.0 {
            return Err(err(line_no, c1, format!("weight {f1} must be ≥ 0")));
        }
        if let Some(&prev) = e.last() {
            if energy <= prev {
                return Err(err(
                    line_no,
                    c0,
                    format!(
                        "energies must increase: {} keV follows {} keV",
                        fmt_num(energy),
                        fmt_num(prev)
                    ),
                ));
            }
        }
        e.push(energy);
        w.push(weight);
    }
    if e.is_empty() {
        return Err(err(1, 1, "the spectrum file has no data rows".into()));
    }
    if !w.iter().any(|&x| x > 0.0) {
        return Err(err(
            1,
            1,
            "every weight is zero: the spectrum is empty".into(),
        ));
    }
    Ok((e, w))
}

/// Fields with their 1-based character columns.
fn split_fields(line: &str) -> Vec<(usize, &str)> {
    let mut out = Vec::new();
    let mut start: Option<usize> = None;
    let col_of = |byte: usize| line[..byte].chars().count() + 1;
    let mut pending_sep = false;
    for (i, c) in line.char_indices() {
        let sep = c == ',' || c == ';' || c == '\t' || c == ' ';
        if sep {
            if let Some(s) = start.take() {
                out.push((col_of(s), &line[s..i]));
            } else if pending_sep && c != ' ' && c != '\t' {
                // Two hard separators in a row: an empty field.
                out.push((col_of(i), ""));
            }
            if c != ' ' && c != '\t' {
                pending_sep = true;
            }
        } else {
            if start.is_none() {
                start = Some(i);
            }
            pending_sep = false;
        }
    }
    if let Some(s) = start {
        out.push((col_of(s), &line[s..]));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_header_comments_and_separators() {
        let t = "# demo spectrum\nenergy_kev,weight\n20, 0.5\n30;1\n40\t0\n";
        let (e, w) = parse(t).unwrap();
        assert_eq!(e, vec![20.0, 30.0, 40.0]);
        assert_eq!(w, vec![0.5, 1.0, 0.0]);
    }

    #[test]
    fn rejects_bad_rows() {
        assert_eq!(parse("20,1\n900,1\n").unwrap_err().line, 2);
        assert_eq!(parse("20,1\n10,1\n").unwrap_err().line, 2);
        assert!(parse("20,0\n30,0\n").unwrap_err().message.contains("empty"));
        assert!(parse("# nothing\n")
            .unwrap_err()
            .message
            .contains("no data"));
        let e = parse("20,x\n").unwrap_err();
        assert_eq!((e.line, e.column), (1, 4));
        assert!(parse("20,1,3\n").is_err());
    }
}
