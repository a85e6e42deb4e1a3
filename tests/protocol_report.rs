//! `dosemill protocol` end to end: a worked example done by hand, the HDF5 report read back with
//! h5py, and the HTML report rendered by headless Chromium (screenshot and DOM dump).
//! Under CI=true, a missing h5py or Chromium fails these tests instead of skipping them.

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::process::Command;

use dosemill_engine::spectrum::{compute_spectrum, BeamQuality, SpectrumOptions, Tube, Anode};

fn scratch(tag: &str) -> PathBuf {
    let p = std::env::temp_dir().join(format!("dosemill-protocol-{tag}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&p);
    std::fs::create_dir_all(&p).unwrap();
    p
}

fn ci() -> bool {
    std::env::var("CI").as_deref() == Ok("true")
}

/// Worked example (one exam, invented demo figures):
///   W anode, 80 kV, 3.0 mm Al added; 25 mAs; focus–skin 90 cm; field 20 × 20 cm; water slab 15 cm.
/// By hand:
///   tube output at 1 m, Y = 33.14 µGy/mAs (the tube model's value for this tube; it lies in the
///     common-practice 30–70 µGy/mAs range of REFERENCES.md; the test recomputes it through the
///     library API and requires the report to quote it to 0.1 %);
///   IAK  = Y × mAs × (100/90)² = 33.14 × 25 × 1.234568 = 1022.8 µGy = 1.0228 mGy;
///   ESAK = IAK × B; the beam's first HVL is 3.73 mm Al (tube model), between RQR 7 (3.48 mm Al)
///     and RQR 9 (5.00 mm Al), whose published water backscatter factors for 20 × 20 cm are 1.41
///     and 1.46 (IAEA TRS-457 table, from memory; see engine/src/validation), so B ≈ 1.42 and
///     ESAK ≈ 1.0228 × 1.42 = 1.452 mGy;
///   ESD(water) = ESAK × (μen/ρ)water/air; the ratio over 40–80 keV lies between 1.017 and 1.079
///     (NIST SRD 126, REFERENCES.md: 0.06947/0.06833 at 40 keV, 0.02597/0.02407 at 80 keV),
///     ≈ 1.04 here, so ESD ≈ 1.452 × 1.04 = 1.51 mGy.
/// The analytic part (Y, IAK and the products) must be reproduced to 0.1 %; B and the ratio are
/// Monte Carlo figures and are checked against the published ranges above.
const EXAMPLE: &str = r#"# Worked example: invented demo figures.
[protocol]
title = "Worked example (invented demo data)"
demo_data = true
tolerance_percent = 15

[[exam]]
name = "worked example"
kvp = 80
anode = "W"
filtration = [{ material = "Al", thickness_mm = 3.0 }]
mas = 25
focus_skin_cm = 90
field_cm = [20, 20]
patient = { material = "water", thickness_cm = 15 }
stated = { iak_mgy = 1.0228, esd_mgy = 1.51 }
reference_level = { esd_mgy = 1.0 }
"#;

fn run_example(dir: &Path) -> (std::process::Output, HashMap<String, Vec<String>>) {
    let p = dir.join("example.toml");
    std::fs::write(&p, EXAMPLE).unwrap();
    let o = Command::new(env!("CARGO_BIN_EXE_dosemill"))
        .args(["protocol", p.to_str().unwrap(), "--histories", "400000", "--out"])
        .arg(dir.join("report"))
        .output()
        .unwrap();
    let csv = std::fs::read_to_string(dir.join("report/protocol.csv")).unwrap_or_default();
    let mut rows = HashMap::new();
    for line in csv.lines().skip(1) {
        let f: Vec<String> = line.split(',').map(str::to_string).collect();
        rows.insert(f[1].clone(), f);
    }
    (o, rows)
}

fn num(rows: &HashMap<String, Vec<String>>, key: &str, col: usize) -> f64 {
    rows.get(key).unwrap_or_else(|| panic!("no row {key}"))[col].parse().unwrap()
}

#[test]
fn worked_example_hdf5_and_html() {
    let dir = scratch("example");
    let (o, rows) = run_example(&dir);
    let stdout = String::from_utf8_lossy(&o.stdout);
    // The reference level 1.0 mGy is exceeded (ESD ≈ 1.5 mGy): flagged, exit code 1.
    assert_eq!(o.status.code(), Some(1), "{stdout}\n{}", String::from_utf8_lossy(&o.stderr));
    assert!(stdout.contains("ABOVE REFERENCE LEVEL"), "{stdout}");

    // Analytic part, to 0.1 %.
    let s = compute_spectrum(&Tube::new(80.0, Anode::W).with_filter("Al", 3.0), &SpectrumOptions::default()).unwrap();
    let y = BeamQuality::of(&s).unwrap().air_kerma_ugy_per_mas_1m;
    let y_csv = num(&rows, "tube_output_1m", 3);
    assert!((y_csv / y - 1.0).abs() < 1e-3, "tube output {y_csv} vs {y}");
    assert!((y / 33.14 - 1.0).abs() < 1e-3, "the hand example used 33.14 µGy/mAs; the model gives {y}");
    let iak = num(&rows, "iak", 3);
    assert!((iak / 1.0228 - 1.0).abs() < 1e-3, "IAK {iak} mGy vs 1.0228 by hand");
    assert!((iak / (y_csv * 25.0 * (100.0f64 / 90.0).powi(2) * 1e-3) - 1.0).abs() < 1e-9);
    let b = num(&rows, "backscatter_factor", 3);
    let esak = num(&rows, "esak", 3);
    let esd = num(&rows, "esd_water", 3);
    let ratio = num(&rows, "muen_ratio_water_air", 3);
    assert!((esak / (iak * b) - 1.0).abs() < 1e-9, "ESAK = IAK × B");
    assert!((esd / (esak * ratio) - 1.0).abs() < 1e-9, "ESD = ESAK × μen ratio");
    // Monte Carlo parts: published ranges (see the comment above), with their 1σ.
    let b_sigma = num(&rows, "backscatter_factor", 4);
    assert!(b_sigma < 0.015, "B uncertainty {b_sigma}");
    // Published range for the HVL (see the comment above), each end widened by the 2 % the
    // interpolation across HVL and the larger phantom (40 × 40 cm here, 30 × 30 cm there) allow.
    let hvl = num(&rows, "hvl1_al", 3);
    assert!((3.48..=5.0).contains(&hvl), "HVL {hvl} mm Al");
    assert!((1.41 * 0.98..=1.46 * 1.02).contains(&b), "B = {b} ± {b_sigma}");
    assert!((1.017..=1.079).contains(&ratio), "μen ratio {ratio}");
    // The stated IAK matches (within tolerance), the stated ESD is compared with its difference.
    assert_eq!(rows["iak"][9], "within tolerance");
    assert_eq!(rows["esd_water"][11], "ABOVE REFERENCE LEVEL");
    // Depth dose falls with depth beyond the first centimetres.
    let d1 = num(&rows, "depth_dose_1cm", 3);
    let d10 = num(&rows, "depth_dose_10cm", 3);
    assert!(d10 < 0.3 * d1, "depth dose 1 cm {d1}, 10 cm {d10}");

    // Never overwrite silently: a second run without --force is refused.
    let (o2, _) = run_example(&dir);
    assert_ne!(o2.status.code(), Some(0));
    assert!(String::from_utf8_lossy(&o2.stderr).contains("exists"), "{}", String::from_utf8_lossy(&o2.stderr));

    check_h5(&dir.join("report/protocol.h5"), iak, esd);
    check_html(&dir.join("report/protocol.html"), &dir);
}

/// Reads the HDF5 report with h5py and compares with the CSV figures.
fn check_h5(path: &Path, iak: f64, esd: f64) {
    let ok = Command::new("python3").args(["-c", "import h5py"]).output().map(|o| o.status.success()).unwrap_or(false);
    if !ok {
        assert!(!ci(), "h5py is required under CI=true");
        eprintln!("SKIPPED: h5py read-back (pip install h5py)");
        return;
    }
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/py/check_protocol_h5.py");
    let o = Command::new("python3").arg(script).arg(path).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert!(v["attrs"]["cautions"].as_str().unwrap().contains("qualified medical physicist"));
    assert!(v["attrs"]["limits"].as_str().unwrap().contains("Kerma approximation"));
    let e = &v["exams"]["exam_00"];
    assert_eq!(e["name"], "worked example");
    let got = e["datasets"]["iak"]["values"][0].as_f64().unwrap();
    assert_eq!(got.to_bits(), iak.to_bits(), "HDF5 IAK {got} vs CSV {iak}");
    assert_eq!(e["datasets"]["iak"]["units"], "mGy");
    assert!((e["datasets"]["esd_water"]["values"][0].as_f64().unwrap() / esd - 1.0).abs() < 1e-12);
    assert_eq!(e["datasets"]["depth_dose"]["values"].as_array().unwrap().len(), e["datasets"]["depth"]["values"].as_array().unwrap().len());
}

fn chromium() -> Option<String> {
    for c in ["chromium", "chromium-browser"] {
        if Command::new(c).arg("--version").output().map(|o| o.status.success()).unwrap_or(false) {
            return Some(c.to_string());
        }
    }
    None
}

fn chromium_cmd(bin: &str, profile: &Path) -> Command {
    let mut c = Command::new(bin);
    c.args(["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking", "--disable-component-update", "--disable-sync"])
        .arg(format!("--user-data-dir={}", profile.display()));
    c
}

/// Renders the page in headless Chromium: the DOM holds the expected headings, tables and
/// embedded PNG plots; the screenshot is a real picture (not blank).
fn check_html(page: &Path, dir: &Path) {
    let html = std::fs::read_to_string(page).unwrap();
    assert!(!html.contains("src=\"http") && !html.contains("<link"), "the page must be self-contained");
    assert!(html.contains("data:image/png;base64,"));
    let Some(bin) = chromium() else {
        assert!(!ci(), "Chromium is required under CI=true (apt-get install -y chromium)");
        eprintln!("SKIPPED: headless Chromium checks (apt-get install -y chromium)");
        return;
    };
    let url = format!("file://{}", page.canonicalize().unwrap().display());
    let dom = chromium_cmd(&bin, &dir.join("profile-dom")).arg("--dump-dom").arg(&url).output().unwrap();
    assert!(dom.status.success(), "{}", String::from_utf8_lossy(&dom.stderr));
    let dom = String::from_utf8_lossy(&dom.stdout);
    for h in ["<h1>Protocol report: Worked example (invented demo data)</h1>", "<h2>Cautions</h2>", "<h2>Summary</h2>", "<h2>Exam 1: worked example</h2>", "<h3>Central-axis depth dose</h3>", "<h2>Model limits</h2>"] {
        assert!(dom.contains(h), "DOM lacks {h}");
    }
    assert!(dom.matches("<table>").count() >= 3, "summary, figures and depth-dose tables");
    assert!(dom.matches("<img alt=").count() >= 2, "comparison and depth-dose plots");
    let shot = dir.join("shot.png");
    let o = chromium_cmd(&bin, &dir.join("profile-shot")).arg(format!("--screenshot={}", shot.display())).arg("--window-size=1200,2400").arg(&url).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let (w, h, px) = dosemill_engine::report::decode_png(&shot).unwrap();
    assert_eq!((w, h), (1200, 2400));
    // Not blank: plenty of non-white pixels (text, table borders, plot lines) and some colour
    // (blue plot series).
    let pixels = px.chunks(3);
    let dark = pixels.clone().filter(|p| p.iter().map(|&c| c as u32).sum::<u32>() < 300).count();
    let blue = pixels.filter(|p| p[2] > 150 && p[0] < 100 && p[1] < 100).count();
    assert!(dark > 5_000, "{dark} dark pixels: the page did not render");
    assert!(blue > 50, "{blue} blue pixels: no plot rendered");
}
