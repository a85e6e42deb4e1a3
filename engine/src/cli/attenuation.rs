//! `dosemill attenuation MATERIAL --kev E1,E2,...`: narrow-beam coefficients of a material.
//!
//! Prints a table by default; with `--json` exactly one JSON array with one object per energy,
//! keys `kev`, `mu_rho_cm2_g`, `mu_rho_no_coherent_cm2_g`, `muen_rho_cm2_g`, `mu_per_cm`, `hvl_cm`.

use std::io::Write;

use dosemill_xsdata::{derived, library, material, E_MAX_KEV, E_MIN_KEV};

use crate::cli::EXIT_BAD_INPUT;

/// Arguments of `dosemill attenuation`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Material name from `dosemill materials`, or an element symbol (e.g. water, pmma, Al).
    pub material: String,
    /// Photon energies in keV, comma-separated (e.g. 20,60,100).
    #[arg(long, value_delimiter = ',', required = true, num_args = 1..)]
    pub kev: Vec<f64>,
    /// Print one JSON array instead of a table.
    #[arg(long)]
    pub json: bool,
}

/// One row of the JSON output (the key set is part of the interface).
#[derive(serde::Serialize, Debug)]
struct Row {
    kev: f64,
    mu_rho_cm2_g: f64,
    mu_rho_no_coherent_cm2_g: f64,
    muen_rho_cm2_g: f64,
    mu_per_cm: f64,
    hvl_cm: f64,
}

/// Run the subcommand; returns the exit code.
pub fn run(args: Args) -> anyhow::Result<i32> {
    // Validate everything before computing anything.
    let mat = match library::lookup(&args.material) {
        Ok(m) => m,
        Err(e) => {
            eprintln!("dosemill: error: {e}");
            return Ok(EXIT_BAD_INPUT);
        }
    };
    for &kev in &args.kev {
        if material::check_energy(kev).is_err() {
            eprintln!(
                "dosemill: error: --kev {kev}: photon energy outside the data range {E_MIN_KEV}–{E_MAX_KEV} keV; give energies within that range"
            );
            return Ok(EXIT_BAD_INPUT);
        }
    }
    let mut rows = Vec::with_capacity(args.kev.len());
    let mut coeffs = Vec::with_capacity(args.kev.len());
    for &kev in &args.kev {
        let c = derived::coefficients(&mat, kev)?;
        rows.push(Row {
            kev: c.kev,
            mu_rho_cm2_g: c.mu_rho_cm2_g,
            mu_rho_no_coherent_cm2_g: c.mu_rho_no_coherent_cm2_g,
            muen_rho_cm2_g: c.muen_rho_cm2_g,
            mu_per_cm: c.mu_per_cm,
            hvl_cm: c.hvl_cm,
        });
        coeffs.push(c);
    }
    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    if args.json {
        serde_json::to_writer(&mut out, &rows)?;
        writeln!(out)?;
    } else {
        writeln!(
            out,
            "material {}  density {} g/cm3",
            mat.name(),
            mat.density_g_cm3()
        )?;
        writeln!(out, "composition source: {}", mat.source())?;
        writeln!(
            out,
            "{:>9}  {:>12}  {:>12}  {:>12}  {:>12}  {:>12}  {:>12}",
            "E (keV)", "mu/rho", "mu/rho nocoh", "mu_en/rho", "mu (1/cm)", "HVL (cm)", "TVL (cm)"
        )?;
        writeln!(
            out,
            "{:>9}  {:>12}  {:>12}  {:>12}  {:>12}  {:>12}  {:>12}",
            "", "(cm2/g)", "(cm2/g)", "(cm2/g)", "", "", ""
        )?;
        for c in &coeffs {
            writeln!(
                out,
                "{:>9.3}  {:>12.5e}  {:>12.5e}  {:>12.5e}  {:>12.5e}  {:>12.5e}  {:>12.5e}",
                c.kev,
                c.mu_rho_cm2_g,
                c.mu_rho_no_coherent_cm2_g,
                c.muen_rho_cm2_g,
                c.mu_per_cm,
                c.hvl_cm,
                c.tvl_cm
            )?;
        }
    }
    Ok(0)
}
