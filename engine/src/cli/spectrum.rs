//! `dosemill spectrum`: x-ray tube spectrum and beam quality.

use std::path::PathBuf;

use crate::cli::EXIT_BAD_INPUT;
use crate::spectrum::{
    compute_spectrum, export, plot, solve_added_filtration, Anode, BeamQuality, Filter,
    SpectrumError, SpectrumOptions, Tube,
};

/// Arguments of `dosemill spectrum`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Peak tube voltage (kV), 15–300.
    #[arg(long, allow_negative_numbers = true)]
    pub kvp: f64,
    /// Anode element: W, Mo or Rh.
    #[arg(long, default_value = "W")]
    pub anode: String,
    /// Anode angle between target face and central ray (degrees).
    #[arg(long, default_value_t = 12.0, allow_negative_numbers = true)]
    pub anode_angle_deg: f64,
    /// Added filter `material:thickness_mm`, e.g. `Al:2.5`; repeat for a stack in beam order.
    #[arg(long = "filter", value_name = "MATERIAL:MM", allow_hyphen_values = true)]
    pub filters: Vec<String>,
    /// Inherent beryllium window (mm); default by anode (W 0, Mo/Rh 1).
    #[arg(long, allow_negative_numbers = true)]
    pub window_be_mm: Option<f64>,
    /// Inherent aluminium-equivalent filtration (mm); default by anode (W 1, Mo/Rh 0).
    #[arg(long, allow_negative_numbers = true)]
    pub inherent_al_mm: Option<f64>,
    /// Energy bin width (keV).
    #[arg(long, default_value_t = 0.5, allow_negative_numbers = true)]
    pub bin_kev: f64,
    /// Distance from the focal spot (cm) at which fluence is given.
    #[arg(long, default_value_t = 100.0, allow_negative_numbers = true)]
    pub distance_cm: f64,
    /// Air between focal spot and that point (cm); default: the distance.
    #[arg(long, allow_negative_numbers = true)]
    pub air_cm: Option<f64>,
    /// Tube current–time product (mAs) for the totals in the summary.
    #[arg(long, default_value_t = 1.0, allow_negative_numbers = true)]
    pub mas: f64,
    /// Voltage ripple (percent of peak), rectified-sine waveform; 0 = constant potential.
    #[arg(long, default_value_t = 0.0, allow_negative_numbers = true)]
    pub ripple_percent: f64,
    /// Leave out the anode model (attenuation inside the anode, electron backscatter): Kramers'
    /// ideal thick target.
    #[arg(long)]
    pub no_self_absorption: bool,
    /// Thin-target bremsstrahlung form of the anode model: born-elwert or kramers.
    #[arg(long, default_value = "born-elwert")]
    pub thin_target: String,
    /// Leave out inherent filtration, added filters and air.
    #[arg(long)]
    pub no_filtration: bool,
    /// Leave out the characteristic lines.
    #[arg(long)]
    pub no_lines: bool,
    /// Also find the added thickness of `--solve-material` giving this first HVL (mm Al).
    #[arg(long, allow_negative_numbers = true)]
    pub target_hvl_mm_al: Option<f64>,
    /// Material for `--target-hvl-mm-al`.
    #[arg(long, default_value = "Al")]
    pub solve_material: String,
    /// Print one JSON object instead of the summary.
    #[arg(long)]
    pub json: bool,
    /// Draw the spectrum to this PNG file.
    #[arg(long)]
    pub plot: Option<PathBuf>,
    /// Write the spectrum to this HDF5 result file.
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Replace existing --plot / --out files.
    #[arg(long)]
    pub force: bool,
}

/// Is this error the user's input (exit 2) rather than a failure of the run?
fn is_bad_input(e: &SpectrumError) -> bool {
    !matches!(e, SpectrumError::Data(_) | SpectrumError::EmptyBeam)
}

/// Validated tube and options built from the arguments (no data access).
fn build(args: &Args) -> Result<(Tube, SpectrumOptions), SpectrumError> {
    let anode: Anode = args.anode.parse()?;
    let filters = args.filters.iter().map(|s| s.parse::<Filter>()).collect::<Result<Vec<_>, _>>()?;
    let mut inherent = anode.default_inherent();
    if let Some(b) = args.window_be_mm {
        inherent.be_window_mm = b;
    }
    if let Some(a) = args.inherent_al_mm {
        inherent.al_equivalent_mm = a;
    }
    let tube = Tube {
        kvp: args.kvp,
        anode,
        anode_angle_deg: args.anode_angle_deg,
        filters,
        ripple_percent: args.ripple_percent,
        inherent: Some(inherent),
    };
    tube.validate()?;
    let options = SpectrumOptions {
        bin_kev: args.bin_kev,
        distance_cm: args.distance_cm,
        air_path_cm: args.air_cm,
        self_absorption: !args.no_self_absorption,
        thin_target: args.thin_target.parse().map_err(SpectrumError::Option)?,
        filtration: !args.no_filtration,
        characteristic_lines: !args.no_lines,
    };
    options.validate()?;
    Ok((tube, options))
}

/// Run the subcommand; returns the exit code.
pub fn run(args: Args) -> anyhow::Result<i32> {
    let bad = |e: &dyn std::fmt::Display| {
        eprintln!("dosemill: error: {e}");
        Ok(EXIT_BAD_INPUT)
    };
    if !(args.mas.is_finite() && args.mas > 0.0 && args.mas <= 1e5) {
        return bad(&format!("--mas {} is outside the valid range (0, 100000] mAs", args.mas));
    }
    if let Some(t) = args.target_hvl_mm_al {
        if !(t.is_finite() && t > 0.0 && t <= 30.0) {
            return bad(&format!("--target-hvl-mm-al {t} is outside the valid range (0, 30] mm Al"));
        }
    }
    let (tube, options) = match build(&args) {
        Ok(x) => x,
        Err(e) => return bad(&e),
    };
    let run = || -> Result<_, SpectrumError> {
        let s = compute_spectrum(&tube, &options)?;
        let q = BeamQuality::of(&s)?;
        let solved = match args.target_hvl_mm_al {
            Some(t) => Some(solve_added_filtration(&tube, &options, &args.solve_material, t)?),
            None => None,
        };
        Ok((s, q, solved))
    };
    let (spectrum, quality, solved) = match run() {
        Ok(x) => x,
        Err(e) if is_bad_input(&e) => return bad(&e),
        Err(e) => return Err(e.into()),
    };

    if let Some(p) = &args.plot {
        let title = format!(
            "{} anode {}°, {} kV, {} — model spectrum at {} cm",
            tube.anode,
            tube.anode_angle_deg,
            tube.kvp,
            filtration_text(&tube, &options),
            options.distance_cm
        );
        plot::write_png(&spectrum, &title, p, args.force)?;
    }
    if let Some(p) = &args.out {
        let file = export::to_result_file(&tube, &spectrum, &quality)?;
        crate::output::write_atomic(p, &file, args.force)?;
    }

    if args.json {
        let obj = serde_json::json!({
            "kvp": tube.kvp,
            "anode": tube.anode.symbol(),
            "hvl1_mm_al": quality.hvl1_mm_al,
            "hvl2_mm_al": quality.hvl2_mm_al,
            "homogeneity": quality.homogeneity,
            "mean_kev": quality.mean_kev_fluence,
            "air_kerma_ugy_per_mas_1m": quality.air_kerma_ugy_per_mas_1m,
            "bins_kev": spectrum.bin_centres_kev(),
            "fluence_per_mm2_per_mas": spectrum.binned_fluence_per_mm2_per_mas(),
        });
        println!("{}", serde_json::to_string(&obj)?);
        return Ok(0);
    }

    let total = spectrum.total_fluence_per_mm2_per_mas();
    println!("x-ray tube spectrum (thick-target model; research use only, not for clinical dosimetry)");
    println!("  anode {} at {}°, {} kV, ripple {} %", tube.anode, tube.anode_angle_deg, tube.kvp, tube.ripple_percent);
    println!("  filtration: {}", filtration_text(&tube, &options));
    println!(
        "  model parts: {}; self-absorption {}, filtration {}, characteristic lines {}",
        spectrum.model,
        on_off(options.self_absorption),
        on_off(options.filtration),
        on_off(options.characteristic_lines)
    );
    println!();
    println!("  fluence at {} cm:            {:.4e} photons/mm² per mAs ({:.4e} for {} mAs)", options.distance_cm, total, total * args.mas, args.mas);
    println!("  air kerma at 1 m:            {:.3} µGy/mAs ({:.3} µGy for {} mAs)", quality.air_kerma_ugy_per_mas_1m, quality.air_kerma_ugy_per_mas_1m * args.mas, args.mas);
    println!("  first HVL:                   {:.3} mm Al   {:.4} mm Cu", quality.hvl1_mm_al, quality.hvl1_mm_cu);
    println!("  second HVL:                  {:.3} mm Al   {:.4} mm Cu", quality.hvl2_mm_al, quality.hvl2_mm_cu);
    println!("  homogeneity coefficient:     {:.3}", quality.homogeneity);
    println!("  mean energy:                 {:.2} keV (fluence-weighted), {:.2} keV (air-kerma-weighted)", quality.mean_kev_fluence, quality.mean_kev_air_kerma);
    if !spectrum.lines.is_empty() {
        println!("  characteristic lines (photons/mm² per mAs):");
        for l in spectrum.lines.iter().filter(|l| l.fluence_per_mm2_per_mas > 1e-6 * total) {
            println!("    {:>8} {:8.3} keV  {:.4e}", l.label, l.kev, l.fluence_per_mm2_per_mas);
        }
    }
    if let (Some(t), Some(mm)) = (args.target_hvl_mm_al, solved) {
        println!("  added {} for a first HVL of {t} mm Al: {:.4} mm", args.solve_material, mm);
    }
    println!();
    println!("  model: thin-target bremsstrahlung (Born–Elwert shape by default, Kramers' flat form on request)");
    println!("  along a Thomson–Whiddington path, Archard electron diffusion and backscatter, self-absorption");
    println!("  at the anode angle, Worthington–Tomlin K/L ionisation.");
    println!("  limits: isotropic emission (no heel effect), Kramers constant 1.1e-9 /V (absolute output");
    println!("  about ±30–40 %), line intensities about ±50 %, narrow-beam attenuation throughout.");
    Ok(0)
}

fn on_off(b: bool) -> &'static str {
    if b {
        "on"
    } else {
        "off"
    }
}

fn filtration_text(tube: &Tube, options: &SpectrumOptions) -> String {
    if !options.filtration {
        return "none".into();
    }
    let inh = tube.inherent_filtration();
    let mut parts = Vec::new();
    if inh.be_window_mm > 0.0 {
        parts.push(format!("Be {} mm (window)", inh.be_window_mm));
    }
    if inh.al_equivalent_mm > 0.0 {
        parts.push(format!("Al {} mm (inherent equivalent)", inh.al_equivalent_mm));
    }
    for f in &tube.filters {
        parts.push(format!("{} {} mm", f.material, f.thickness_mm));
    }
    parts.push(format!("air {} cm", options.air_path_cm.unwrap_or(options.distance_cm)));
    parts.join(" + ")
}
