//! `dosemill validate --quick` runs the real binary: every built-in case must pass (exit code 0),
//! and the set must hold the cases the project promises (each case names its reference inside
//! the engine: engine/src/validation/mod.rs).

use std::process::Command;

#[test]
fn validate_quick_passes_every_case() {
    let o = Command::new(env!("CARGO_BIN_EXE_dosemill")).args(["validate", "--quick", "--json"]).output().unwrap();
    let stdout = String::from_utf8_lossy(&o.stdout);
    let cases: Vec<serde_json::Value> = serde_json::from_str(&stdout).unwrap_or_else(|e| panic!("{e}: {stdout}\n{}", String::from_utf8_lossy(&o.stderr)));
    let failed: Vec<String> = cases.iter().filter(|c| c["pass"] != true).map(|c| format!("{}: expected {} computed {} ± {}", c["name"], c["expected"], c["computed"], c["sigma"])).collect();
    assert!(failed.is_empty(), "failed cases:\n{}", failed.join("\n"));
    assert_eq!(o.status.code(), Some(0));
    let count = |needle: &str| cases.iter().filter(|c| c["name"].as_str().unwrap().contains(needle)).count();
    assert!(count("Backscatter factor, water") >= 6, "at least six published backscatter configurations");
    for needle in ["Beer–Lambert", "μ/ρ", "Klein–Nishina", "Duane–Hunt", "narrow-beam HVL vs tube model", "IEC 61267", "Incident air kerma", "B rises", "B saturates", "Pencil beam", "B(PMMA)"] {
        assert!(count(needle) >= 1, "missing case {needle}");
    }
    for c in &cases {
        assert!(!c["source"].as_str().unwrap().is_empty(), "every case names its reference");
    }
}

#[test]
fn validate_rejects_unknown_flags() {
    let o = Command::new(env!("CARGO_BIN_EXE_dosemill")).args(["validate", "--fast"]).output().unwrap();
    assert_eq!(o.status.code(), Some(2));
}
