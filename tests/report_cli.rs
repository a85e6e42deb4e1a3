//! `dosemill report` on a synthetic (demo) result file with one group of each plotted kind:
//! the summary lines, and PNGs that exist, decode and are not blank.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use dosemill_engine::output::{self, Dataset, Group, ResultFile};

fn scratch(tag: &str) -> PathBuf {
    let p = std::env::temp_dir().join(format!("dosemill-report-{tag}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&p);
    std::fs::create_dir_all(&p).unwrap();
    p
}

fn dosemill(args: &[&std::ffi::OsStr]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_dosemill"))
        .args(args)
        .output()
        .unwrap()
}

fn text(o: &Output) -> String {
    format!(
        "{}{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    )
}

/// Demo data only: invented curves with known peaks, not physics results.
fn demo_file() -> ResultFile {
    let mut f = ResultFile::new();
    f.set_attr("dosemill_version", "0.1.0");
    f.set_attr("git_commit", "demo");
    f.set_attr("data_source", "demo tables");
    f.set_attr("data_tables_sha256", "00".repeat(32));
    f.set_attr("seed", 42u64);
    f.set_attr("histories", 1_000_000u64);
    f.set_attr("threads", 2u64);
    f.set_attr("wall_time_s", 1.5);
    f.set_attr("start_time", "2026-01-31T12:00:00Z");
    f.set_attr("completion", "partial");
    f.set_attr("deck_text", "# demo deck\n".repeat(3000));
    f.set_attr("resolved_deck", "# demo resolved deck\n".repeat(10));

    // depth_dose: 40 bins of 0.25 cm; a build-up then exponential fall. The curve
    // (1 − e^(−z/0.4))·e^(−z/4) peaks at z = 0.4·ln(11) ≈ 0.96 cm; of the bin centres, 0.875 cm
    // (bin 3) is highest.
    let mut pdd = Group::with_kind("pdd", "depth_dose");
    let edges: Vec<f64> = (0..=40).map(|i| i as f64 * 0.25).collect();
    let dose: Vec<f64> = (0..40)
        .map(|i| {
            let z = (i as f64 + 0.5) * 0.25;
            (1.0 - (-z / 0.4).exp()) * (-0.25 * z).exp() * 1e-12
        })
        .collect();
    let peak_bin = (0..40)
        .max_by(|&a, &b| dose[a].total_cmp(&dose[b]))
        .unwrap();
    assert_eq!(
        peak_bin, 3,
        "demo curve peaks where the summary check expects"
    );
    let sigma: Vec<f64> = dose.iter().map(|d| 0.02 * d).collect();
    pdd.add_with_sigma("dose", &[40], dose, sigma, "Gy");
    pdd.attach_axis("dose", 0, "depth_edges_cm", &edges, "cm")
        .unwrap();
    f.add_group(pdd);

    // spectrum: two series over 0–100 keV in 50 bins.
    let mut sp = Group::with_kind("exit_spectrum", "spectrum");
    let ee: Vec<f64> = (0..=50).map(|i| i as f64 * 2.0).collect();
    let unc: Vec<f64> = (0..50)
        .map(|i| {
            if (10..35).contains(&i) {
                (35 - i) as f64
            } else {
                0.0
            }
        })
        .collect();
    let sca: Vec<f64> = (0..50)
        .map(|i| {
            if (5..30).contains(&i) {
                0.5 * i as f64
            } else {
                0.0
            }
        })
        .collect();
    sp.add_dataset(Dataset::f64_1d("uncollided", unc, "1/(cm2 keV)"));
    sp.add_dataset(Dataset::f64_1d("scattered", sca, "1/(cm2 keV)"));
    sp.attach_axis("uncollided", 0, "energy_edges_kev", &ee, "keV")
        .unwrap();
    sp.attach_axis("scattered", 0, "energy_edges_kev", &ee, "keV")
        .unwrap();
    f.add_group(sp);

    // image: 30 × 40 pixels of 0.5 cm, a Gaussian blob centred on row 10, column 25.
    let mut im = Group::with_kind("detector", "image");
    let (rows, cols) = (30usize, 40usize);
    let img: Vec<f64> = (0..rows * cols)
        .map(|n| {
            let (r, c) = ((n / cols) as f64, (n % cols) as f64);
            (-((r - 10.0).powi(2) + (c - 25.0).powi(2)) / 40.0).exp()
        })
        .collect();
    im.add_dataset(Dataset::f64_nd("signal", &[rows, cols], img, "keV/cm2"));
    let ye: Vec<f64> = (0..=rows).map(|i| i as f64 * 0.5).collect();
    let xe: Vec<f64> = (0..=cols).map(|i| -10.0 + i as f64 * 0.5).collect();
    im.attach_axis("signal", 0, "y_edges_cm", &ye, "cm")
        .unwrap();
    im.attach_axis("signal", 1, "x_edges_cm", &xe, "cm")
        .unwrap();
    f.add_group(im);

    // dose_grid: 9 × 20 × 24 voxels of 0.5 cm; values peak at (4, 5, 18).
    let mut dg = Group::with_kind("phantom", "dose_grid");
    let (n0, n1, n2) = (9usize, 20usize, 24usize);
    let grid: Vec<f64> = (0..n0 * n1 * n2)
        .map(|n| {
            let (i, j, k) = (
                (n / (n1 * n2)) as f64,
                ((n / n2) % n1) as f64,
                (n % n2) as f64,
            );
            (-((i - 4.0).powi(2) / 4.0 + (j - 5.0).powi(2) / 10.0 + (k - 18.0).powi(2) / 20.0))
                .exp()
        })
        .collect();
    let grid_sigma: Vec<f64> = grid.iter().map(|g| 0.01 * g + 1e-4).collect();
    dg.add_dataset(Dataset::f64_nd("dose", &[n0, n1, n2], grid, "Gy"));
    dg.add_dataset(Dataset::f64_nd(
        "dose_sigma",
        &[n0, n1, n2],
        grid_sigma,
        "Gy",
    ));
    for (axis, (n, name)) in [(n0, "z_edges_cm"), (n1, "y_edges_cm"), (n2, "x_edges_cm")]
        .into_iter()
        .enumerate()
    {
        let e: Vec<f64> = (0..=n).map(|i| i as f64 * 0.5).collect();
        dg.attach_axis("dose", axis, name, &e, "cm").unwrap();
    }
    f.add_group(dg);
    f
}

/// Share of pixels that are not white, and the number of distinct colours.
fn png_stats(path: &Path) -> (u32, u32, f64, usize) {
    let (w, h, px) = dosemill_engine::report::decode_png(path).unwrap();
    let mut colours: Vec<[u8; 3]> = px.chunks_exact(3).map(|c| [c[0], c[1], c[2]]).collect();
    let non_white =
        colours.iter().filter(|c| **c != [255, 255, 255]).count() as f64 / colours.len() as f64;
    colours.sort_unstable();
    colours.dedup();
    (w, h, non_white, colours.len())
}

#[test]
fn report_prints_summary_and_draws_every_kind() {
    let dir = scratch("all");
    let h5 = dir.join("demo.h5");
    output::write_atomic(&h5, &demo_file(), false).unwrap();
    let plots = dir.join("plots");
    let o = dosemill(&[
        "report".as_ref(),
        h5.as_os_str(),
        "--plots".as_ref(),
        plots.as_os_str(),
    ]);
    let out = text(&o);
    assert!(o.status.success(), "report failed:\n{out}");

    for line in [
        "  seed: 42",
        "  histories: 1000000",
        "  completion: partial  (run stopped early: scores hold the histories completed)",
        "  deck_text: text, 36000 bytes, 3000 lines",
        "group /pdd (kind: depth_dose)",
        "  dose: shape [40], units Gy, float64",
        // Peak in bin 3, whose centre is (3 + 0.5) × 0.25 cm.
        "at [3] (depth_edges_cm = 0.875 cm)",
        // σ was set to 2 % of every value.
        "      relative uncertainty (1σ): 2.00 % at peak; mean 2.00 % over",
        "  dose_sigma: 1σ uncertainty of dose, shape [40], units Gy",
        "  depth_edges_cm: axis edges, 41 values, 0 … 10 cm",
        "group /exit_spectrum (kind: spectrum)",
        // Sum of 35 − i for i = 10..34 is 25 × (25 + 1) / 2 = 325, peak 25 in bin 10.
        "      total 3.2500e2 1/(cm2 keV); peak 2.5000e1 1/(cm2 keV) at [10] (energy_edges_kev = 21 keV)",
        "group /detector (kind: image)",
        "peak 1.0000e0 keV/cm2 at [10, 25] (y_edges_cm = 5.25 cm, x_edges_cm = 2.75 cm)",
        "group /phantom (kind: dose_grid)",
        "peak 1.0000e0 Gy at [4, 5, 18] (z_edges_cm = 2.25 cm, y_edges_cm = 2.75 cm, x_edges_cm = 9.25 cm)",
        // At the peak σ = 0.01 × 1 + 1e-4.
        "relative uncertainty (1σ): 1.01 % at peak",
    ] {
        assert!(out.contains(line), "summary lacks `{line}`:\n{out}");
    }

    let expected = [
        "pdd_dose.png",
        "exit_spectrum.png",
        "detector_signal.png",
        "phantom_dose.png",
    ];
    for name in expected {
        let p = plots.join(name);
        assert!(p.exists(), "{name} missing; output:\n{out}");
        assert!(out.contains(&format!("plot: {}", p.display())), "{out}");
        let (w, h, non_white, colours) = png_stats(&p);
        assert!(w >= 800 && h >= 600, "{name}: {w}×{h}");
        assert!(
            non_white > 0.02,
            "{name}: only {:.3} of pixels drawn",
            non_white
        );
        // Heat maps carry a colour scale; line plots at least text, axes and a series colour.
        let min_colours = if name.contains("signal") || name.contains("phantom") {
            100
        } else {
            10
        };
        assert!(colours >= min_colours, "{name}: {colours} distinct colours");
    }
    let mut found: Vec<String> = std::fs::read_dir(&plots)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    found.sort();
    let mut want: Vec<String> = expected.iter().map(|s| s.to_string()).collect();
    want.sort();
    assert_eq!(
        found, want,
        "exactly one PNG per plotted dataset, no temporary files"
    );

    // A second run must not overwrite the plots silently …
    let before = std::fs::read(plots.join("pdd_dose.png")).unwrap();
    let o = dosemill(&[
        "report".as_ref(),
        h5.as_os_str(),
        "--plots".as_ref(),
        plots.as_os_str(),
    ]);
    assert!(!o.status.success());
    let msg = text(&o);
    assert!(
        msg.contains("already exists") && msg.contains("--force") && msg.contains(".png"),
        "{msg}"
    );
    assert_eq!(std::fs::read(plots.join("pdd_dose.png")).unwrap(), before);
    // … and replaces them with --force.
    let o = dosemill(&[
        "report".as_ref(),
        h5.as_os_str(),
        "--plots".as_ref(),
        plots.as_os_str(),
        "--force".as_ref(),
    ]);
    assert!(o.status.success(), "{}", text(&o));
    let _ = std::fs::remove_dir_all(&dir);
}

/// A disk that fills up while plots are replaced (simulated with the output layer's
/// fault-injection variable) leaves every earlier plot intact and no temporary files.
#[test]
fn full_disk_during_report_keeps_earlier_plots() {
    let dir = scratch("full");
    let h5 = dir.join("demo.h5");
    output::write_atomic(&h5, &demo_file(), false).unwrap();
    let plots = dir.join("plots");
    let o = dosemill(&[
        "report".as_ref(),
        h5.as_os_str(),
        "--plots".as_ref(),
        plots.as_os_str(),
    ]);
    assert!(o.status.success(), "{}", text(&o));
    let snapshot = |d: &Path| {
        let mut v: Vec<(String, Vec<u8>)> = std::fs::read_dir(d)
            .unwrap()
            .map(|e| e.unwrap())
            .map(|e| {
                (
                    e.file_name().to_string_lossy().into_owned(),
                    std::fs::read(e.path()).unwrap(),
                )
            })
            .collect();
        v.sort();
        v
    };
    let before = snapshot(&plots);
    assert_eq!(before.len(), 4);
    let o = Command::new(env!("CARGO_BIN_EXE_dosemill"))
        .args([
            "report".as_ref(),
            h5.as_os_str(),
            "--plots".as_ref(),
            plots.as_os_str(),
            "--force".as_ref(),
        ])
        .env(output::FAULT_ENV_VAR, "1000")
        .output()
        .unwrap();
    assert!(
        !o.status.success(),
        "the injected full disk went unnoticed:\n{}",
        text(&o)
    );
    assert!(text(&o).contains("no space left on device"), "{}", text(&o));
    assert_eq!(
        snapshot(&plots),
        before,
        "plots changed or temporary files left behind"
    );
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn report_on_a_missing_or_foreign_file_is_bad_input() {
    let dir = scratch("bad");
    let missing = dir.join("nope.h5");
    let o = dosemill(&["report".as_ref(), missing.as_os_str()]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("nope.h5"), "{}", text(&o));

    let junk = dir.join("junk.h5");
    std::fs::write(&junk, "not hdf5").unwrap();
    let o = dosemill(&["report".as_ref(), junk.as_os_str()]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("junk.h5"), "{}", text(&o));
    let _ = std::fs::remove_dir_all(&dir);
}
