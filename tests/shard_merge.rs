//! Shards of the real binary merged with `dosemill merge`: 1, 3 and 7 shards give result
//! datasets bit for bit equal to a single run (exact integer sums of fixed-point tallies);
//! a missing shard, a shard given twice and a shard of another seed are refused by name.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use dosemill_engine::output::{self, ResultFile};

const BIN: &str = env!("CARGO_BIN_EXE_dosemill");

mod support;
use support::Scratch;

fn scratch(tag: &str) -> Scratch {
    support::scratch_named(&format!("shard-{tag}"))
}

/// Demo deck (invented scenario): 80 kV tungsten tube spectrum through water, 51 chunks (the
/// last one short), so shard sizes differ.
fn write_deck(dir: &Path) -> PathBuf {
    let text = r#"# Demo deck (invented scenario) for shard tests.
[run]
histories = 101_000
histories_per_chunk = 2000
seed = 3
output = "t.h5"

[source]
kind = "parallel"
position_cm = [0, 0, -1]
field = { shape = "circle", radius_cm = 1 }
[source.tube]
kvp = 80
anode = "W"
filters = [{ material = "Al", thickness_cm = 0.25 }]

[geometry]
kind = "slabs"
[[geometry.layer]]
material = "water"
thickness_cm = 5

[[score]]
name = "pdd"
kind = "depth_dose"
z_min_cm = 0
z_max_cm = 5
bin_width_cm = 0.25

[[score]]
name = "through"
kind = "transmitted_spectrum"
energy_max_kev = 80
bin_width_kev = 2
"#;
    let p = dir.join("deck.toml");
    std::fs::write(&p, text).unwrap();
    p
}

fn dosemill(args: &[&str]) -> Output {
    Command::new(BIN).args(args).output().unwrap()
}

fn text(o: &Output) -> String {
    format!("{}{}", String::from_utf8_lossy(&o.stdout), String::from_utf8_lossy(&o.stderr))
}

fn groups(path: &Path) -> ResultFile {
    let mut f = output::read(path).unwrap().canonical();
    f.attrs.clear();
    f
}

fn run_shards(deck: &Path, out: &Path, n: u64, extra: &[&str]) -> Vec<PathBuf> {
    (0..n)
        .map(|k| {
            let spec = format!("{k}/{n}");
            let mut args = vec!["run", deck.to_str().unwrap(), "--quiet", "--threads", "1", "--out", out.to_str().unwrap(), "--shard", &spec];
            args.extend_from_slice(extra);
            let o = dosemill(&args);
            assert!(o.status.success(), "{}", text(&o));
            let p = out.join(format!("t.shard-{k}-of-{n}.h5"));
            assert!(p.exists(), "{} missing", p.display());
            p
        })
        .collect()
}

fn merge(out: &Path, shards: &[PathBuf]) -> Output {
    let mut args = vec!["merge".to_string(), out.display().to_string()];
    args.extend(shards.iter().map(|p| p.display().to_string()));
    Command::new(BIN).args(&args).output().unwrap()
}

#[test]
fn merged_shards_equal_a_single_run_bit_for_bit() {
    let dir = scratch("exact");
    let deck = write_deck(&dir);
    let single = dir.join("single");
    let o = dosemill(&["run", deck.to_str().unwrap(), "--quiet", "--threads", "2", "--out", single.to_str().unwrap()]);
    assert!(o.status.success(), "{}", text(&o));
    let reference = groups(&single.join("t.h5"));
    for n in [1u64, 3, 7] {
        let out = dir.join(format!("n{n}"));
        let shards = run_shards(&deck, &out, n, &[]);
        let merged = out.join("merged.h5");
        let o = merge(&merged, &shards);
        assert!(o.status.success(), "{n} shards: {}", text(&o));
        assert!(groups(&merged).bits_equal(&reference), "{n} shards: merged datasets differ from the single run");
        let f = output::read(&merged).unwrap();
        assert_eq!(f.attr("histories").and_then(|a| a.as_f64()), Some(101_000.0));
        assert_eq!(f.attr("completion").and_then(|a| a.as_str()), Some("complete"));
    }
}

#[test]
fn missing_duplicated_and_foreign_shards_are_refused() {
    let dir = scratch("bad");
    let deck = write_deck(&dir);
    let out = dir.join("n3");
    let shards = run_shards(&deck, &out, 3, &[]);
    let merged = out.join("merged.h5");

    // Shard 1 of 3 missing: chunks 1, 4, 7, … (51 chunks: 17 of them).
    let o = merge(&merged, &[shards[0].clone(), shards[2].clone()]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    let t = text(&o);
    assert!(t.contains("chunks missing: 1, 4, 7") && t.contains("17 of 51") && t.contains("--shard 1/3"), "{t}");

    // Shard 0 given twice.
    let o = merge(&merged, &[shards[0].clone(), shards[1].clone(), shards[2].clone(), shards[0].clone()]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    let t = text(&o);
    assert!(t.contains("chunks held more than once: 0, 3, 6") && t.contains("t.shard-0-of-3.h5"), "{t}");

    // Shard 2 from a run with another seed.
    let other = dir.join("seed4");
    let foreign = run_shards(&deck, &other, 3, &["--seed", "4"]);
    let o = merge(&merged, &[shards[0].clone(), shards[1].clone(), foreign[2].clone()]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    let t = text(&o);
    assert!(t.contains("different run") && t.contains("seed (3 here, 4 now)"), "{t}");

    assert!(!merged.exists(), "nothing written on a refused merge");
}
