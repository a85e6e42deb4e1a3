//! Shared helpers of the xsdata integration tests.
#![allow(dead_code)]

use std::io::Write;
use std::process::{Command, Stdio};

/// Whether `python3` can import `module`. When it cannot, the check is skipped with a message,
/// except under CI (env CI=true), where the missing reference library is a failure.
pub fn python_has(module: &str) -> bool {
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

/// Runs tests/reference/reference_values.py in `mode` with `input` on stdin; one answer line per
/// request line.
pub fn reference(mode: &str, input: &str) -> Vec<String> {
    let script = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/reference_values.py");
    let mut child = Command::new("python3")
        .arg(script)
        .arg(mode)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::inherit())
        .spawn()
        .expect("python3 starts");
    child.stdin.take().expect("stdin").write_all(input.as_bytes()).expect("write requests");
    let out = child.wait_with_output().expect("python3 runs");
    assert!(out.status.success(), "reference_values.py {mode} failed");
    String::from_utf8(out.stdout).expect("utf-8").lines().map(str::to_string).collect()
}

/// Parses a line of whitespace-separated numbers ("nan" allowed).
pub fn numbers(line: &str) -> Vec<f64> {
    line.split_whitespace().map(|t| t.parse::<f64>().unwrap_or_else(|_| panic!("number expected, got `{t}`"))).collect()
}

/// SplitMix64: a small fixed-seed generator for test points (Steele, Lea & Flood 2014).
pub struct SplitMix64(pub u64);

impl SplitMix64 {
    /// Next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    /// Uniform in [0, 1).
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// Whether `kev` lies at least `rel` (relative) away from every energy in `edges`.
pub fn away_from(kev: f64, edges: &[f64], rel: f64) -> bool {
    edges.iter().all(|e| (kev / e - 1.0).abs() >= rel)
}
