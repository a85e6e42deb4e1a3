//! The committed element tables must be exactly what the committed generator makes from the
//! pinned xraylib (source: xsdata/generate/make_tables.py and .ci/requirements.txt). Skipped
//! with a message when python3 cannot import xraylib and numpy, except under CI=true.

use std::process::{Command, Stdio};

use dosemill_xsdata::{elements, embedded_table_bytes, Provenance};

fn python_has(module: &str) -> bool {
    let ok = Command::new("python3")
        .args(["-c", &format!("import {module}")])
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .status()
        .map(|s| s.success())
        .unwrap_or(false);
    if !ok {
        if std::env::var("CI").as_deref() == Ok("true") {
            panic!("CI=true but `python3 -c \"import {module}\"` fails: install .ci/requirements.txt");
        }
        eprintln!("SKIPPED: python3 cannot import {module} (install .ci/requirements.txt to run this check)");
    }
    ok
}

#[test]
fn regenerated_tables_are_byte_identical() {
    if !python_has("xraylib") || !python_has("numpy") {
        return;
    }
    let root = env!("CARGO_MANIFEST_DIR");
    let out = std::env::temp_dir().join(format!(
        "dosemill-xsdata-regen-{}-{}",
        std::process::id(),
        std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).unwrap().as_nanos()
    ));
    std::fs::create_dir_all(&out).unwrap();
    let status = Command::new("python3")
        .arg(format!("{root}/xsdata/generate/make_tables.py"))
        .arg("--out")
        .arg(&out)
        .status()
        .expect("python3 runs");
    assert!(status.success(), "make_tables.py failed");

    let regenerated = std::fs::read(out.join("elements.b7")).unwrap();
    let committed = std::fs::read(format!("{root}/xsdata/data/elements.b7")).unwrap();
    let unpacked = dosemill_xsdata::element::unpack7(&committed).expect("committed tables unpack");
    assert_eq!(unpacked.as_slice(), embedded_table_bytes(), "embedded tables differ from xsdata/data/elements.b7");
    assert!(
        regenerated == committed,
        "regenerated elements.b7 ({} bytes) differs from the committed one ({} bytes); first difference at byte {:?}",
        regenerated.len(),
        committed.len(),
        regenerated.iter().zip(&committed).position(|(a, b)| a != b)
    );

    let text = std::fs::read_to_string(out.join("provenance.toml")).unwrap();
    let fresh = Provenance::from_toml_str(&text).unwrap();
    let embedded = elements().provenance();
    assert_eq!(fresh.source, embedded.source);
    assert_eq!(fresh.generator_sha256, embedded.generator_sha256);
    assert_eq!(fresh.tables_sha256, embedded.tables_sha256);
    assert_eq!(fresh.format_version, embedded.format_version);
    assert!(!fresh.generated.is_empty());
    std::fs::remove_dir_all(&out).unwrap();
}
