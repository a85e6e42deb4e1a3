//! Protocol files: the TOML and CSV forms of the demo protocol describe the same exams, and bad
//! input gets an error naming file, line, column and key.

use dosemill_engine::protocol::format::{parse_csv, parse_toml, Distance, Patient};
use std::path::Path;
use std::process::Command;

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

#[test]
fn toml_and_csv_demo_protocols_agree() {
    let t = std::fs::read_to_string(root().join("runs/protocol_demo.toml")).unwrap();
    let c = std::fs::read_to_string(root().join("runs/protocol_demo.csv")).unwrap();
    let a = parse_toml(&t, "protocol_demo.toml").unwrap();
    let b = parse_csv(&c, "protocol_demo.csv").unwrap();
    assert!(a.demo_data && b.demo_data, "demo protocols must be marked as invented demo data");
    assert_eq!(a.title, b.title);
    assert_eq!(a.exams.len(), 4);
    assert_eq!(a.exams.len(), b.exams.len());
    for (x, y) in a.exams.iter().zip(&b.exams) {
        assert_eq!(x.name, y.name);
        assert_eq!(x.kvp, y.kvp);
        assert_eq!(x.filtration, y.filtration);
        assert_eq!(x.mas, y.mas);
        assert_eq!(x.distance, y.distance);
        assert_eq!(x.field_cm, y.field_cm);
        assert_eq!(x.patient.thickness_cm(), y.patient.thickness_cm());
        assert_eq!(x.stated, y.stated);
        assert_eq!(x.reference, y.reference);
        assert_eq!(x.tolerance_percent, y.tolerance_percent);
        assert_eq!((x.anode_angle_deg, x.ripple_percent), (y.anode_angle_deg, y.ripple_percent));
        assert_eq!(x.detector, y.detector);
        assert_eq!(x.patient, y.patient);
    }
    // Focus–detector distance minus the patient thickness is the focus–skin distance.
    assert_eq!(a.exams[1].distance, Distance::FocusDetector(180.0));
    assert_eq!(a.exams[1].fsd_cm(), 158.0);
    assert!(matches!(&a.exams[0].patient, Patient::Slab { material, .. } if material == "water"));
    assert_eq!(a.exams[1].detector.as_ref().and_then(|d| d.grid_ratio), Some(10.0));
    assert!(matches!(&a.exams[3].patient, Patient::VoxelDeck { path, .. } if path == "torso_phantom.toml"));
}

const GOOD: &str = r#"[protocol]
title = "t"

[[exam]]
name = "a"
kvp = 80
mas = 10
focus_skin_cm = 100
field_cm = [20, 20]
patient = { material = "water", thickness_cm = 15 }
"#;

#[test]
fn toml_errors_name_line_column_and_key() {
    assert!(parse_toml(GOOD, "p.toml").is_ok());
    // Out-of-range value: the exam's line and the key.
    let bad = GOOD.replace("kvp = 80", "kvp = 900");
    let e = parse_toml(&bad, "p.toml").unwrap_err().to_string();
    assert!(e.starts_with("p.toml:4:1: exam[0].kvp:"), "{e}");
    assert!(e.contains("900") && e.contains("range"), "{e}");
    // Unknown key: reported by the parser with its position.
    let bad = GOOD.replace("mas = 10", "mAs = 10");
    let err = parse_toml(&bad, "p.toml").unwrap_err();
    assert_eq!(err.line, 7, "{err}");
    assert!(err.to_string().contains("mAs"), "{err}");
    // Unknown material with suggestions.
    let bad = GOOD.replace("\"water\"", "\"watr\"");
    let e = parse_toml(&bad, "p.toml").unwrap_err().to_string();
    assert!(e.contains("exam[0].patient.material") && e.contains("water"), "{e}");
    // Both distances.
    let bad = GOOD.replace("focus_skin_cm = 100", "focus_skin_cm = 100\nfocus_detector_cm = 120");
    assert!(parse_toml(&bad, "p.toml").unwrap_err().to_string().contains("not both"));
    // Duplicate names.
    let two = format!("{GOOD}\n[[exam]]\nname = \"a\"\nkvp = 70\nmas = 5\nfocus_skin_cm = 100\nfield_cm = [20, 20]\npatient = {{ thickness_cm = 10 }}\n");
    let e = parse_toml(&two, "p.toml").unwrap_err().to_string();
    assert!(e.contains("already used on line 4"), "{e}");
}

#[test]
fn csv_errors_name_line_column_and_key() {
    let head = "name,kvp,mas,focus_skin_cm,field_width_cm,field_height_cm,patient_thickness_cm\n";
    assert!(parse_csv(&format!("{head}a,80,10,100,20,20,15\n"), "p.csv").is_ok());
    let e = parse_csv(&format!("{head}a,eighty,10,100,20,20,15\n"), "p.csv").unwrap_err();
    assert_eq!((e.line, e.column, e.key.as_str()), (2, 3, "kvp"), "{e}");
    let e = parse_csv(&format!("{head}a,80,10,100,20,20\n"), "p.csv").unwrap_err();
    assert!(e.to_string().starts_with("p.csv:2:1: row:"), "{e}");
    let e = parse_csv("name,kvp,colour\n", "p.csv").unwrap_err();
    assert_eq!((e.line, e.column, e.key.as_str()), (1, 10, "colour"), "{e}");
    let e = parse_csv(&format!("{head}a,80,10,100,20,20,99\n"), "p.csv").unwrap_err();
    assert_eq!(e.key, "patient.thickness_cm", "{e}");
}

#[test]
fn binary_exits_2_on_a_bad_protocol() {
    let dir = std::env::temp_dir().join(format!("dosemill-protocol-bad-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let p = dir.join("bad.toml");
    std::fs::write(&p, GOOD.replace("kvp = 80", "kvp = -1")).unwrap();
    let o = Command::new(env!("CARGO_BIN_EXE_dosemill")).arg("protocol").arg(&p).arg("--out").arg(dir.join("out")).output().unwrap();
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("bad.toml:4:1: exam[0].kvp"), "{err}");
    assert!(!dir.join("out").exists(), "nothing is written for a bad protocol");
}

/// The two file kinds mixed up: a run deck given to `protocol` and a protocol file given to
/// `check` each get one error that names the other command, at the first table's position.
#[test]
fn deck_and_protocol_mixed_up_get_one_pointed_error() {
    let deck = "# a deck\n[run]\nhistories = 10\n\n[source]\nenergy_kev = 60\n";
    let e = parse_toml(deck, "d.toml").unwrap_err();
    assert_eq!((e.line, e.column, e.key.as_str()), (2, 1, "run"), "{e}");
    assert!(e.message.contains("run deck, not a protocol file") && e.message.contains("dosemill run d.toml"), "{e}");
    // A protocol with a stray `run` table is still a protocol: the parser's unknown-field error.
    let e = parse_toml(&format!("[run]\nx = 1\n{GOOD}"), "p.toml").unwrap_err();
    assert!(!e.message.contains("run deck"), "{e}");

    let o = Command::new(env!("CARGO_BIN_EXE_dosemill"))
        .arg("check")
        .arg(root().join("runs/protocol_demo.toml"))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("protocol_demo.toml:3:2: this is a protocol file"), "{err}");
    assert!(err.contains("dosemill protocol") && err.lines().count() <= 2, "one error only: {err}");
}

/// `anode_angle_deg` and `ripple_percent` of an exam: defaults from the tube model (12°, 0 %),
/// read from TOML and CSV alike, range-checked with the key named, passed to the tube of the
/// exam (its output and HVL) and to the detector run's deck. Direction of the effect: anode
/// self-filtration (a steeper anode hardens the beam and lowers the output) and ripple (a
/// rippled waveform softens the beam and lowers the output), as in tests/spectrum_physics.rs.
#[test]
fn anode_angle_and_ripple_reach_the_tube() {
    use dosemill_engine::protocol::{imaging::detector_deck, tube_of};
    use dosemill_engine::spectrum::{compute_spectrum, BeamQuality, SpectrumOptions};
    let base = parse_toml(GOOD, "p.toml").unwrap().exams.remove(0);
    assert_eq!((base.anode_angle_deg, base.ripple_percent), (12.0, 0.0));
    let with = |extra: &str| GOOD.replace("kvp = 80", &format!("kvp = 80\n{extra}"));
    let steep = parse_toml(&with("anode_angle_deg = 8"), "p.toml").unwrap().exams.remove(0);
    let rippled = parse_toml(&with("ripple_percent = 10"), "p.toml").unwrap().exams.remove(0);
    assert_eq!((steep.anode_angle_deg, rippled.ripple_percent), (8.0, 10.0));
    let q = |e: &dosemill_engine::protocol::format::Exam| {
        let t = tube_of(e);
        BeamQuality::of(&compute_spectrum(&t, &SpectrumOptions::default()).unwrap()).unwrap()
    };
    let (qb, qs, qr) = (q(&base), q(&steep), q(&rippled));
    assert!(qs.hvl1_mm_al > qb.hvl1_mm_al && qs.air_kerma_ugy_per_mas_1m < qb.air_kerma_ugy_per_mas_1m, "{qs:?} vs {qb:?}");
    assert!(qr.hvl1_mm_al < qb.hvl1_mm_al && qr.air_kerma_ugy_per_mas_1m < qb.air_kerma_ugy_per_mas_1m, "{qr:?} vs {qb:?}");

    // CSV: the same exam with the two columns.
    let head = "name,kvp,anode_angle_deg,ripple_percent,mas,focus_skin_cm,field_width_cm,field_height_cm,patient_thickness_cm\n";
    let c = parse_csv(&format!("{head}a,80,8,10,10,100,20,20,15\n"), "p.csv").unwrap().exams.remove(0);
    assert_eq!((c.anode_angle_deg, c.ripple_percent), (8.0, 10.0));
    let e = parse_csv(&format!("{head}a,80,60,0,10,100,20,20,15\n"), "p.csv").unwrap_err();
    assert_eq!(e.key, "anode_angle_deg", "{e}");

    // Out of range: the exam's line and the key, with the range.
    let e = parse_toml(&with("anode_angle_deg = 2"), "p.toml").unwrap_err().to_string();
    assert!(e.starts_with("p.toml:4:1: exam[0].anode_angle_deg:") && e.contains("3–45"), "{e}");
    let e = parse_toml(&with("ripple_percent = -1"), "p.toml").unwrap_err().to_string();
    assert!(e.contains("exam[0].ripple_percent") && e.contains("0–50"), "{e}");

    // The detector run's deck carries both to its `[source.tube]`.
    let det = with("anode_angle_deg = 8\nripple_percent = 10").replace("focus_skin_cm = 100", "focus_skin_cm = 100\ndetector = { material = \"csi\", thickness_mm = 0.6 }");
    let ex = parse_toml(&det, "p.toml").unwrap().exams.remove(0);
    let deck = detector_deck(&ex, 10_000, 1).unwrap();
    let loaded = dosemill_engine::deck::load_str(&deck, Path::new("det.toml")).unwrap_or_else(|e| panic!("{e:?}\n{deck}"));
    let tube = match &loaded.resolved.source.energy {
        dosemill_engine::deck::SourceEnergy::Tube(t) => t.clone(),
        other => panic!("not a tube source: {other:?}"),
    };
    assert_eq!((tube.anode_angle_deg, tube.ripple_percent), (8.0, 10.0));
}
