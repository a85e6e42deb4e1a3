//! `dosemill bench`: speed of the reference problems on this machine.

use crate::benchmarks;
use crate::score::{counts, Scorer};
use crate::transport::{run, RunSettings};

/// Arguments of `dosemill bench`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Histories to run.
    #[arg(long, default_value_t = 2_000_000)]
    pub histories: u64,
    /// Worker threads (default: all cores).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Random seed.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Reference problem: `p1` (slab), `p2` (detector scatter, analog vs forced detection) or
    /// `p3` (256³ voxel phantom).
    #[arg(long, default_value = "p1")]
    pub problem: String,
    /// P3 only: phantom voxels along each axis (the 25.6 cm cube is kept; 512 gives 0.05 cm voxels).
    #[arg(long, default_value_t = 256)]
    pub phantom_size: usize,
    /// P3 only: phantom voxels per scoring voxel along each axis (1 = dose in every phantom voxel).
    #[arg(long, default_value_t = 4)]
    pub scoring_block: usize,
    /// P2 only: side of the central region of interest (cm; the reference figure uses 5).
    #[arg(long, default_value_t = crate::score::detector::p2::REFERENCE_ROI_CM)]
    pub roi_cm: f64,
    /// P2 only: repeat the analog and forced-detection runs with seeds seed, seed+1, … and report
    /// each gain's median and spread (timings on a shared machine vary from run to run).
    #[arg(long, default_value_t = 1)]
    pub repeat: u32,
}

/// Peak resident memory of this process so far (bytes), from /proc/self/status (Linux).
pub fn peak_rss_bytes() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = text.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kb: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb * 1024)
}

/// Runs P1 and prints histories/s and ns per interaction.
pub fn run_bench(args: Args) -> anyhow::Result<i32> {
    let threads = args.threads.unwrap_or_else(|| std::thread::available_parallelism().map(|n| n.get()).unwrap_or(1));
    if args.problem == "p3" {
        let t0 = std::time::Instant::now();
        let (n, b) = (args.phantom_size, args.scoring_block);
        let problem = benchmarks::p3_with(n, b).map_err(|e| anyhow::anyhow!(e))?;
        let build = t0.elapsed().as_secs_f64();
        let settings = RunSettings { histories: args.histories, seed: args.seed, chunk_histories: 10_000, threads, progress: false };
        let r = run(&problem, &settings);
        let rate = r.histories as f64 / r.wall_time_s;
        let m = n.div_ceil(b);
        println!("P3: {n}³ voxel phantom ({:.3} cm), 80 kV tube, 20 × 20 cm field at 100 cm, analog dose with σ on a {m}³ grid, Woodcock tracking", 25.6 / n as f64);
        println!("  set-up                {build:.2} s (phantom, tables, spectrum)");
        println!("  threads                 {threads}");
        println!("  histories             {}", r.histories);
        println!("  wall time             {:.3} s", r.wall_time_s);
        println!("  histories/s           {:.3e} ({:.3e} per thread)", rate, rate / threads as f64);
        if let Some(peak) = peak_rss_bytes() {
            println!("  peak memory           {:.2} GiB (resident; phantom, tables and the dose grid with its σ sums)", peak as f64 / (1u64 << 30) as f64);
        }
        return Ok(0);
    } else if args.problem == "p2" {
        // A forced-detection history costs several analog ones: run it on a tenth of the histories.
        use crate::score::detector::p2::{estimate, Estimator};
        let forced = (args.histories / 10).max(1000);
        if !(args.roi_cm > 0.0 && args.roi_cm <= 40.0) {
            anyhow::bail!("--roi-cm {}: the ROI side must be above 0 and at most the 40 cm face", args.roi_cm);
        }
        if args.repeat == 0 {
            anyhow::bail!("--repeat 0: give at least one repeat");
        }
        println!("P2: 80 kV tube, 30 × 30 cm field at 100 cm, 20 cm water, 40 × 40 cm detector at 2 mm pitch, central ROI {} × {} cm", args.roi_cm, args.roi_cm);
        println!("  threads                 {threads}");
        let kinds = [Estimator::Forced, Estimator::ForcedEnergyBias, Estimator::ForcedBothBiases, Estimator::ForcedSteered];
        let mut gains: Vec<[f64; 4]> = Vec::new();
        for r in 0..args.repeat {
            let seed = args.seed + r as u64;
            if args.repeat > 1 {
                println!("  repeat {} (seed {seed})", r + 1);
            }
            // The analog run first, then each forced variant on the same seed.
            let a = estimate(0.2, args.roi_cm, Estimator::Analog, args.histories, seed, threads);
            let runs: Vec<_> = kinds.iter().map(|&k| estimate(0.2, args.roi_cm, k, forced, seed, threads)).collect();
            for (est, e) in std::iter::once((Estimator::Analog, &a)).chain(kinds.iter().copied().zip(runs.iter())) {
                println!(
                    "  {:<23} {} histories, ROI scatter {:.4e} ± {:.2e} keV/cm², {:.2} s, efficiency 1/(σ²T) {:.3e} /s",
                    est.label(), e.histories, e.roi_scatter, e.roi_scatter_sigma, e.wall_time_s, e.efficiency_per_s
                );
            }
            let g = [0, 1, 2, 3].map(|i| runs[i].efficiency_per_s / a.efficiency_per_s);
            for (k, gi) in kinds.iter().zip(g) {
                println!("  efficiency gain         {gi:.2} ({} / analog)", k.label());
            }
            gains.push(g);
        }
        if args.repeat > 1 {
            for (i, k) in kinds.iter().enumerate() {
                let mut v: Vec<f64> = gains.iter().map(|g| g[i]).collect();
                v.sort_by(f64::total_cmp);
                let n = v.len() as f64;
                let mean = v.iter().sum::<f64>() / n;
                let sd = (v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
                let med = if v.len() % 2 == 1 { v[v.len() / 2] } else { 0.5 * (v[v.len() / 2 - 1] + v[v.len() / 2]) };
                println!("  gain over {} repeats  median {med:.2}, mean {mean:.2} ± {sd:.2} (sd), range {:.2}–{:.2} ({} / analog)", args.repeat, v[0], v[v.len() - 1], k.label());
            }
        }
        return Ok(0);
    } else if args.problem != "p1" {
        anyhow::bail!("unknown problem `{}`: choose p1, p2 or p3", args.problem);
    }
    // Interactions per history, from a separate counting run (so the timed run scores depth dose only).
    let counting = benchmarks::p1(vec![Scorer::interactions()]);
    let probe = 200_000u64.min(args.histories);
    let settings = RunSettings { histories: probe, seed: args.seed, chunk_histories: 10_000, threads, progress: false };
    let c = run(&counting, &settings);
    let (mean, _) = c.scorers[1].tally().mean_and_sigma(probe);
    let per_history = mean[counts::PHOTOELECTRIC] + mean[counts::INCOHERENT] + mean[counts::COHERENT];

    let problem = benchmarks::p1(vec![]);
    let settings = RunSettings { histories: args.histories, seed: args.seed, chunk_histories: 10_000, threads, progress: false };
    let r = run(&problem, &settings);
    let rate = r.histories as f64 / r.wall_time_s;
    println!("P1: 60 keV pencil beam, 20 cm water, full physics, depth dose in 1 mm bins");
    println!("  threads                 {threads}");
    println!("  histories             {}", r.histories);
    println!("  wall time             {:.3} s", r.wall_time_s);
    println!("  histories/s           {:.3e} ({:.3e} per thread)", rate, rate / threads as f64);
    println!("  interactions/history  {per_history:.3}");
    println!("  ns per interaction    {:.1} (per thread)", 1e9 * threads as f64 / (rate * per_history));
    Ok(0)
}
