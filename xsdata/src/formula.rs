//! Chemical formulas → mass fractions, with our own table of standard atomic weights.
//!
//! Grammar (whitespace not allowed inside a formula):
//! ```text
//! formula := group+
//! group   := (Element | "(" formula ")") count?
//! Element := uppercase letter, optionally one lowercase letter ("H", "Ca", "Gd")
//! count   := decimal number, integer or with a fraction ("2", "0.5"); default 1
//! ```
//! Examples: `H2O`, `CaCO3`, `Gd2O2S`, `CsI`, `Ca10(PO4)6(OH)2`, `C5H8O2`.
//!
//! ```
//! use dosemill_xsdata::formula::Formula;
//! let water = Formula::parse("H2O").unwrap();
//! assert!((water.molar_mass_g_mol() - 18.015).abs() < 1e-3);
//! let w = water.mass_fractions();
//! assert_eq!(w[0].0, 1); // hydrogen first (ascending Z)
//! ```

/// Errors from parsing a chemical formula.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum FormulaError {
    /// The formula is empty.
    #[error("empty chemical formula")]
    Empty,
    /// A symbol that is not an element.
    #[error("formula `{formula}`: unknown element symbol `{symbol}` at column {column}; symbols are case sensitive (e.g. `Co` cobalt, `CO` carbon + oxygen)")]
    UnknownElement {
        /// The whole formula.
        formula: String,
        /// The symbol that was not recognised.
        symbol: String,
        /// 1-based column of the symbol.
        column: usize,
    },
    /// A character that does not belong in a formula.
    #[error("formula `{formula}`: unexpected character `{ch}` at column {column}; use element symbols, counts and parentheses, e.g. `Ca10(PO4)6(OH)2`")]
    Unexpected {
        /// The whole formula.
        formula: String,
        /// The offending character.
        ch: char,
        /// 1-based column.
        column: usize,
    },
    /// Parentheses that do not match.
    #[error("formula `{formula}`: unbalanced parenthesis at column {column}")]
    Unbalanced {
        /// The whole formula.
        formula: String,
        /// 1-based column.
        column: usize,
    },
    /// A count that is zero, negative or not a number.
    #[error("formula `{formula}`: bad count `{count}` at column {column}; counts must be positive numbers")]
    BadCount {
        /// The whole formula.
        formula: String,
        /// The count text.
        count: String,
        /// 1-based column.
        column: usize,
    },
}

/// A parsed chemical formula: atoms per formula unit, by atomic number (ascending).
#[derive(Debug, Clone, PartialEq)]
pub struct Formula {
    text: String,
    atoms: Vec<(u32, f64)>,
}

impl Formula {
    /// Parse a chemical formula such as `Ca10(PO4)6(OH)2`.
    pub fn parse(text: &str) -> Result<Formula, FormulaError> {
        if text.trim().is_empty() {
            return Err(FormulaError::Empty);
        }
        let chars: Vec<char> = text.chars().collect();
        let mut pos = 0usize;
        let mut counts = [0.0f64; 99];
        parse_sequence(text, &chars, &mut pos, 0, 1.0, &mut counts)?;
        if pos != chars.len() {
            // parse_sequence at depth 0 only stops early on a stray ')'.
            return Err(FormulaError::Unbalanced {
                formula: text.to_string(),
                column: pos + 1,
            });
        }
        let atoms: Vec<(u32, f64)> = counts
            .iter()
            .enumerate()
            .filter(|(_, &n)| n > 0.0)
            .map(|(z, &n)| (z as u32, n))
            .collect();
        if atoms.is_empty() {
            return Err(FormulaError::Empty);
        }
        Ok(Formula {
            text: text.to_string(),
            atoms,
        })
    }

    /// The formula as written.
    pub fn text(&self) -> &str {
        &self.text
    }

    /// Atoms per formula unit: (Z, count), ascending Z.
    pub fn atoms(&self) -> &[(u32, f64)] {
        &self.atoms
    }

    /// Molar mass (g/mol) from [`atomic_weight`].
    pub fn molar_mass_g_mol(&self) -> f64 {
        self.atoms
            .iter()
            .map(|&(z, n)| n * atomic_weight(z).expect("parsed formulas hold only Z 1..=98"))
            .sum()
    }

    /// Mass fractions (Z, w), ascending Z, summing to 1.
    pub fn mass_fractions(&self) -> Vec<(u32, f64)> {
        let m = self.molar_mass_g_mol();
        self.atoms
            .iter()
            .map(|&(z, n)| {
                (
                    z,
                    n * atomic_weight(z).expect("parsed formulas hold only Z 1..=98") / m,
                )
            })
            .collect()
    }
}

fn parse_sequence(
    text: &str,
    chars: &[char],
    pos: &mut usize,
    depth: usize,
    multiplier: f64,
    counts: &mut [f64; 99],
) -> Result<(), FormulaError> {
    let start = *pos;
    while *pos < chars.len() {
        let c = chars[*pos];
        if c.is_ascii_uppercase() {
            let col = *pos + 1;
            let mut sym = String::from(c);
            *pos += 1;
            if *pos < chars.len() && chars[*pos].is_ascii_lowercase() {
                sym.push(chars[*pos]);
                *pos += 1;
            }
            let z = z_of_symbol(&sym).ok_or_else(|| FormulaError::UnknownElement {
                formula: text.to_string(),
                symbol: sym.clone(),
                column: col,
            })?;
            let n = parse_count(text, chars, pos)?;
            counts[z as usize] += n * multiplier;
        } else if c == '(' {
            let open = *pos;
            *pos += 1;
            // Parse the inner group into its own counter, then scale by its count.
            let mut inner = [0.0f64; 99];
            parse_sequence(text, chars, pos, depth + 1, 1.0, &mut inner)?;
            if *pos >= chars.len() || chars[*pos] != ')' {
                return Err(FormulaError::Unbalanced {
                    formula: text.to_string(),
                    column: open + 1,
                });
            }
            if *pos == open + 1 {
                return Err(FormulaError::Unexpected {
                    formula: text.to_string(),
                    ch: ')',
                    column: *pos + 1,
                });
            }
            *pos += 1;
            let n = parse_count(text, chars, pos)?;
            for (acc, v) in counts.iter_mut().zip(inner.iter()) {
                *acc += v * n * multiplier;
            }
        } else if c == ')' {
            if depth == 0 {
                return Err(FormulaError::Unbalanced {
                    formula: text.to_string(),
                    column: *pos + 1,
                });
            }
            if *pos == start {
                return Err(FormulaError::Unexpected {
                    formula: text.to_string(),
                    ch: c,
                    column: *pos + 1,
                });
            }
            return Ok(());
        } else {
            return Err(FormulaError::Unexpected {
                formula: text.to_string(),
                ch: c,
                column: *pos + 1,
            });
        }
    }
    Ok(())
}

fn parse_count(text: &str, chars: &[char], pos: &mut usize) -> Result<f64, FormulaError> {
    let start = *pos;
    while *pos < chars.len() && (chars[*pos].is_ascii_digit() || chars[*pos] == '.') {
        *pos += 1;
    }
    if *pos == start {
        return Ok(1.0);
    }
    let s: String = chars[start..*pos].iter().collect();
    match s.parse::<f64>() {
        Ok(n) if n > 0.0 && n.is_finite() => Ok(n),
        _ => Err(FormulaError::BadCount {
            formula: text.to_string(),
            count: s,
            column: start + 1,
        }),
    }
}

/// Chemical symbols, index = Z - 1, for Z = 1..=98.
#[rustfmt::skip]
pub const SYMBOLS: [&str; 98] = [
    "H", "He", "Li", "Be", "B", "C", "N", "O", "F", "Ne", "Na", "Mg", "Al", "Si", "P", "S", "Cl", "Ar",
    "K", "Ca", "Sc", "Ti", "V", "Cr", "Mn", "Fe", "Co", "Ni", "Cu", "Zn", "Ga", "Ge", "As", "Se", "Br",
    "Kr", "Rb", "Sr", "Y", "Zr", "Nb", "Mo", "Tc", "Ru", "Rh", "Pd", "Ag", "Cd", "In", "Sn", "Sb", "Te",
    "I", "Xe", "Cs", "Ba", "La", "Ce", "Pr", "Nd", "Pm", "Sm", "Eu", "Gd", "Tb", "Dy", "Ho", "Er", "Tm",
    "Yb", "Lu", "Hf", "Ta", "W", "Re", "Os", "Ir", "Pt", "Au", "Hg", "Tl", "Pb", "Bi", "Po", "At", "Rn",
    "Fr", "Ra", "Ac", "Th", "Pa", "U", "Np", "Pu", "Am", "Cm", "Bk", "Cf",
];

/// Standard atomic weights (g/mol), index = Z - 1, Z = 1..=98.
///
/// Source: IUPAC Commission on Isotopic Abundances and Atomic Weights, standard atomic weights
/// (recent tables, conventional/abridged values where an interval is given), from memory.
/// Elements without a standard atomic weight (no stable isotope: Tc, Pm, Po, At, Rn, Fr, Ra, Ac,
/// Np–Cf) carry the mass number of a long-lived isotope in brackets in the IUPAC table; that mass
/// number is used here (a convention: other libraries pick other isotopes for some of them).
#[rustfmt::skip]
pub const ATOMIC_WEIGHTS_G_MOL: [f64; 98] = [
    1.008, 4.002602, 6.94, 9.0121831, 10.81, 12.011, 14.007, 15.999, 18.998403163, 20.1797, // 1–10
    22.98976928, 24.305, 26.9815385, 28.085, 30.973761998, 32.06, 35.45, 39.948, 39.0983, 40.078, // 11–20
    44.955908, 47.867, 50.9415, 51.9961, 54.938044, 55.845, 58.933194, 58.6934, 63.546, 65.38, // 21–30
    69.723, 72.630, 74.921595, 78.971, 79.904, 83.798, 85.4678, 87.62, 88.90584, 91.224, // 31–40
    92.90637, 95.95, 98.0, 101.07, 102.90550, 106.42, 107.8682, 112.414, 114.818, 118.710, // 41–50
    121.760, 127.60, 126.90447, 131.293, 132.90545196, 137.327, 138.90547, 140.116, 140.90766, 144.242, // 51–60
    145.0, 150.36, 151.964, 157.25, 158.92535, 162.500, 164.93033, 167.259, 168.93422, 173.045, // 61–70
    174.9668, 178.49, 180.94788, 183.84, 186.207, 190.23, 192.217, 195.084, 196.966569, 200.592, // 71–80
    204.38, 207.2, 208.98040, 209.0, 210.0, 222.0, 223.0, 226.0, 227.0, 232.0377, // 81–90
    231.03588, 238.02891, 237.0, 244.0, 243.0, 247.0, 247.0, 251.0, // 91–98
];

/// Standard atomic weight of element `z` (g/mol), Z = 1..=98; `None` outside that range.
pub fn atomic_weight(z: u32) -> Option<f64> {
    if (1..=98).contains(&z) {
        Some(ATOMIC_WEIGHTS_G_MOL[z as usize - 1])
    } else {
        None
    }
}

/// Atomic number of a chemical symbol (exact case, e.g. "Pb"); `None` if unknown.
pub fn z_of_symbol(symbol: &str) -> Option<u32> {
    SYMBOLS
        .iter()
        .position(|&s| s == symbol)
        .map(|i| i as u32 + 1)
}

/// Atomic number of a chemical symbol, ignoring case ("pb", "PB" → 82); `None` if unknown.
pub fn z_of_symbol_ignore_case(symbol: &str) -> Option<u32> {
    SYMBOLS
        .iter()
        .position(|&s| s.eq_ignore_ascii_case(symbol))
        .map(|i| i as u32 + 1)
}

/// Chemical symbol of element `z` (1..=98); `None` outside that range.
pub fn symbol_of_z(z: u32) -> Option<&'static str> {
    if (1..=98).contains(&z) {
        Some(SYMBOLS[z as usize - 1])
    } else {
        None
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nested_groups_and_counts() {
        let f = Formula::parse("Ca10(PO4)6(OH)2").unwrap();
        let get = |z: u32| f.atoms().iter().find(|a| a.0 == z).map(|a| a.1).unwrap();
        assert_eq!(get(20), 10.0);
        assert_eq!(get(15), 6.0);
        assert_eq!(get(8), 26.0);
        assert_eq!(get(1), 2.0);
        let f = Formula::parse("((CH2)2O)3").unwrap();
        assert_eq!(f.atoms(), &[(1, 12.0), (6, 6.0), (8, 3.0)]);
    }

    #[test]
    fn errors_name_the_column() {
        assert!(matches!(
            Formula::parse("H2Xx"),
            Err(FormulaError::UnknownElement { column: 3, .. })
        ));
        assert!(matches!(
            Formula::parse("Ca(OH"),
            Err(FormulaError::Unbalanced { column: 3, .. })
        ));
        assert!(matches!(
            Formula::parse("CaOH)2"),
            Err(FormulaError::Unbalanced { column: 5, .. })
        ));
        assert!(matches!(
            Formula::parse("H0O"),
            Err(FormulaError::BadCount { .. })
        ));
        assert!(matches!(
            Formula::parse("h2o"),
            Err(FormulaError::Unexpected {
                ch: 'h',
                column: 1,
                ..
            })
        ));
        assert!(matches!(
            Formula::parse("()"),
            Err(FormulaError::Unexpected { .. })
        ));
        assert_eq!(Formula::parse(""), Err(FormulaError::Empty));
    }

    #[test]
    fn symbols_round_trip() {
        for z in 1..=98 {
            assert_eq!(z_of_symbol(symbol_of_z(z).unwrap()), Some(z));
        }
        assert_eq!(z_of_symbol_ignore_case("pB"), Some(82));
    }
}
