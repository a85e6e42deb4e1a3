//! `dosemill materials`: list the built-in materials library.

use dosemill_xsdata::library;

/// Arguments of `dosemill materials`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Also print each material's composition (mass fractions).
    #[arg(long)]
    pub composition: bool,
}

/// Run the subcommand; returns the exit code.
pub fn run(args: Args) -> anyhow::Result<i32> {
    print!("{}", render(&args));
    Ok(0)
}

/// The listing as text.
pub fn render(args: &Args) -> String {
    let entries = library::library();
    let name_w = entries
        .iter()
        .map(|e| e.name.len())
        .max()
        .unwrap_or(4)
        .max(4);
    let mut out = String::new();
    out.push_str(&format!(
        "{:<name_w$}  {:>12}  {}\n",
        "name", "g/cm3", "composition source"
    ));
    out.push_str(&format!("{:-<name_w$}  {:->12}  {:-<18}\n", "", "", ""));
    for e in entries {
        out.push_str(&format!(
            "{:<name_w$}  {:>12}  {}\n",
            e.name,
            format_density(e.density_g_cm3),
            e.source
        ));
        if !e.aliases.is_empty() {
            out.push_str(&format!(
                "{:<name_w$}  {:>12}  also: {}\n",
                "",
                "",
                e.aliases.join(", ")
            ));
        }
        if args.composition {
            out.push_str(&format!(
                "{:<name_w$}  {:>12}  {}\n",
                "",
                "",
                e.material().composition_text()
            ));
        }
    }
    out.push_str(
        "\nPure elements are available by chemical symbol (case-insensitive, e.g. Al, Cu, W, Pb) at their\n\
         standard densities (NIST SRD 126, from memory). Names are matched case-insensitively.\n",
    );
    out
}

fn format_density(d: f64) -> String {
    if d < 0.01 {
        format!("{d:.4e}")
    } else {
        format!("{d:.4}")
    }
}
