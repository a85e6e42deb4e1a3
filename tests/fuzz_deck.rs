//! Robustness of the deck reader, validator and problem set-up: no input panics.
//!
//! * a proptest over generated deck-like texts (bounded number of cases, stable Rust);
//! * every deck of the error corpus `tests/decks/bad/` and of `tests/decks/good/`, plus 10,000
//!   mutations of them (byte flips, deletions, insertions of TOML tokens), each through load,
//!   validation, the run's resource estimate and `setup::build` of every sweep combination.
//!
//! Each input runs under `catch_unwind`; the test fails listing the inputs that panicked.

use std::panic::{catch_unwind, AssertUnwindSafe};
use std::path::{Path, PathBuf};

use dosemill_engine::{deck, runstate::limits, setup};
use proptest::prelude::*;

/// Load, validate, estimate and build; errors are fine, panics are not.
fn exercise(text: &str, path: &Path) {
    let Ok(d) = deck::load_str(text, path) else { return };
    if deck::validate_with(&d, &deck::library_lookup).is_err() {
        return;
    }
    for (_, resolved) in deck::expand(&d).into_iter().take(8) {
        // The run refuses what does not fit before building; so does this test.
        if limits::estimate(&resolved, 2).memory_bytes > 512 << 20 {
            continue;
        }
        let _ = setup::build(&resolved);
    }
}

fn panics(text: &str, path: &Path) -> bool {
    catch_unwind(AssertUnwindSafe(|| exercise(text, path))).is_err()
}

fn corpus() -> Vec<(PathBuf, String)> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/decks");
    let mut out = Vec::new();
    for sub in ["bad", "good"] {
        let mut entries: Vec<PathBuf> = std::fs::read_dir(root.join(sub)).unwrap().map(|e| e.unwrap().path()).filter(|p| p.extension().is_some_and(|x| x == "toml")).collect();
        entries.sort();
        for p in entries {
            let t = std::fs::read_to_string(&p).unwrap();
            out.push((p, t));
        }
    }
    out
}

/// TOML tokens and deck fragments inserted by the mutator.
const TOKENS: &[&str] = &[
    "[", "]", "[[", "]]", "{", "}", "=", ",", "\"", "'", "\"\"\"", "#", "\n", ".", "-", "+", "_", "e", "1e308", "-0", "nan", "inf", "-inf",
    "0x", "true", "false", "1979-05-27T07:32:00Z", "[run]", "[source]", "[geometry]", "[[score]]", "[sweep]", "[[geometry.layer]]",
    "histories = ", "kind = ", "material = ", "thickness_cm = ", "energy_kev = ", "include = ", "9223372036854775807", "18446744073709551616",
    "\u{0}", "\u{feff}", "é", "\\u0000", "[1, 2, 3]", "{ a = 1 }",
];

/// SplitMix64 (fixed seed: the mutations are the same on every run).
struct Rng(u64);
impl Rng {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    fn below(&mut self, n: usize) -> usize {
        (self.next() % n.max(1) as u64) as usize
    }
}

fn mutate(text: &str, rng: &mut Rng) -> String {
    let mut b = text.as_bytes().to_vec();
    for _ in 0..1 + rng.below(3) {
        match rng.below(3) {
            0 if !b.is_empty() => {
                let i = rng.below(b.len());
                b[i] ^= 1 << rng.below(8);
            }
            1 if !b.is_empty() => {
                let i = rng.below(b.len());
                let n = 1 + rng.below(16.min(b.len() - i));
                b.drain(i..i + n);
            }
            _ => {
                let i = rng.below(b.len() + 1);
                let t = TOKENS[rng.below(TOKENS.len())].as_bytes();
                b.splice(i..i, t.iter().copied());
            }
        }
    }
    // The reader takes text; invalid UTF-8 is replaced as a file read would refuse it earlier.
    String::from_utf8_lossy(&b).into_owned()
}

#[test]
fn corpus_and_10000_mutations_never_panic() {
    let corpus = corpus();
    assert!(corpus.len() > 40, "corpus not found");
    let mut failures = Vec::new();
    for (p, t) in &corpus {
        if panics(t, p) {
            failures.push(format!("{} (unmodified)", p.display()));
        }
    }
    let mut rng = Rng(0x5eed_2026);
    for i in 0..10_000 {
        let (p, t) = &corpus[rng.below(corpus.len())];
        let m = mutate(t, &mut rng);
        if panics(&m, p) {
            failures.push(format!("mutation {i} of {}:\n{m}", p.display()));
        }
    }
    assert!(failures.is_empty(), "{} input(s) panicked; first:\n{}", failures.len(), failures[0]);
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 400, failure_persistence: None, ..ProptestConfig::default() })]

    /// Deck-like texts assembled from tokens and arbitrary strings never panic the reader.
    #[test]
    fn generated_texts_never_panic(parts in prop::collection::vec(prop_oneof![
        prop::sample::select(TOKENS).prop_map(str::to_string),
        "[a-z_.]{1,12}",
        "-?[0-9]{1,25}(\\.[0-9]{0,5})?",
        any::<String>(),
    ], 0..60)) {
        let text = parts.join(" ");
        let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/decks/generated.toml");
        prop_assert!(!panics(&text, &path), "panicked on:\n{text}");
    }
}
