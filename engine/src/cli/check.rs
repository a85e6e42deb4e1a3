//! `dosemill check DECK...`: validates decks and prints each resolved deck (defaults filled in)
//! without running anything. Exit code 2 if any deck has errors.

use std::path::PathBuf;

/// Arguments of `dosemill check`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Deck files (TOML) to check.
    #[arg(required = true)]
    pub decks: Vec<PathBuf>,
}

/// Checks every deck; returns the exit code.
pub fn run(args: Args) -> anyhow::Result<i32> {
    let mut bad = 0;
    for path in &args.decks {
        match super::run::load_deck(path) {
            Ok(d) => {
                // Set-up problems (materials, spectra) are found before any photon too.
                let mut problems = Vec::new();
                for (values, resolved) in crate::deck::expand(&d) {
                    if let Err(e) = crate::setup::build(&resolved) {
                        let at = values.iter().map(|(k, v)| format!("{k}={v}")).collect::<Vec<_>>().join(" ");
                        problems.push(format!("{}: {e}{}", path.display(), if at.is_empty() { String::new() } else { format!(" (sweep point {at})") }));
                    }
                }
                if problems.is_empty() {
                    println!("# {}: valid; resolved deck follows", path.display());
                    println!("{}", crate::deck::resolved_toml(&d));
                } else {
                    bad += 1;
                    for p in problems {
                        eprintln!("{p}");
                    }
                }
            }
            Err(errors) => {
                bad += 1;
                for e in &errors {
                    eprintln!("{e}");
                }
            }
        }
    }
    Ok(if bad > 0 { super::EXIT_BAD_INPUT } else { 0 })
}
