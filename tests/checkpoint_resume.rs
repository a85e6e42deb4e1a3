//! Checkpoints of the real binary: a run killed (SIGKILL) at random points and resumed, or
//! interrupted (SIGINT) and resumed, gives result datasets bit for bit equal to an
//! uninterrupted run of the same deck and seed; a checkpoint of another deck is refused; a full
//! disk leaves earlier files intact.
//!
//! The reference is the uninterrupted run itself (exactness claim of the fixed-point tallies and
//! per-history random streams), so every check compares bits, not tolerances.

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

use dosemill_engine::output::{self, ResultFile};

const BIN: &str = env!("CARGO_BIN_EXE_dosemill");

mod support;
use support::Scratch;

fn scratch(tag: &str) -> Scratch {
    support::scratch_named(&format!("ckpt-{tag}"))
}

/// A demo deck (invented scenario): 60 keV pencil beam on water with an Al backing, enough
/// chunks that a kill lands mid-run.
fn write_deck(dir: &Path, histories: u64, seed: u64) -> PathBuf {
    write_deck_chunked(dir, histories, 2000, seed)
}

fn write_deck_chunked(dir: &Path, histories: u64, chunk: u64, seed: u64) -> PathBuf {
    let text = format!(
        r#"# Demo deck (invented scenario) for checkpoint tests.
[run]
histories = {histories}
histories_per_chunk = {chunk}
seed = {seed}
output = "w.h5"

[source]
kind = "pencil"
position_cm = [0, 0, -1]
energy_kev = 60

[geometry]
kind = "slabs"
world = "air"
[[geometry.layer]]
material = "water"
thickness_cm = 10
[[geometry.layer]]
material = "Al"
thickness_cm = 0.5

[[score]]
name = "pdd"
kind = "depth_dose"
z_min_cm = 0
z_max_cm = 10
bin_width_cm = 0.5

[[score]]
name = "events"
kind = "interaction_counts"

[[score]]
name = "exit_spectrum"
kind = "transmitted_spectrum"
energy_max_kev = 70
bin_width_kev = 1
"#
    );
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

/// The groups (every dataset and group attribute) of a result file, order-independent.
fn groups(path: &Path) -> ResultFile {
    let mut f = output::read(path).unwrap().canonical();
    f.attrs.clear();
    f
}

fn root_str(path: &Path, name: &str) -> String {
    output::read(path).unwrap().attr(name).and_then(|a| a.as_str()).unwrap_or("").to_string()
}

fn root_u64(path: &Path, name: &str) -> u64 {
    output::read(path).unwrap().attr(name).and_then(|a| a.as_f64()).unwrap() as u64
}

fn reference(dir: &Path, deck: &Path) -> PathBuf {
    let out = dir.join("ref");
    let o = dosemill(&["run", deck.to_str().unwrap(), "--quiet", "--threads", "2", "--out", out.to_str().unwrap()]);
    assert!(o.status.success(), "{}", text(&o));
    out.join("w.h5")
}

fn wait_for(path: &Path, bound: Duration) -> bool {
    let t = Instant::now();
    while t.elapsed() < bound {
        if path.exists() {
            return true;
        }
        std::thread::sleep(Duration::from_millis(5));
    }
    false
}

/// SplitMix64 step (fixed seeds give the kill delays).
fn next(state: &mut u64) -> u64 {
    *state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

#[test]
fn sigkill_at_random_points_then_resume_is_bitwise_identical() {
    let dir = scratch("kill");
    let deck = write_deck(&dir, 600_000, 11);
    let reference = reference(&dir, &deck);
    let mut state = 2026u64;
    let mut resumed = 0;
    for round in 0..3 {
        let out = dir.join(format!("k{round}"));
        let ckpt = out.join("w.h5.ckpt");
        let mut child = Command::new(BIN)
            .args(["run", deck.to_str().unwrap(), "--quiet", "--threads", "2", "--out", out.to_str().unwrap(), "--checkpoint-every-chunks", "16"])
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        assert!(wait_for(&ckpt, Duration::from_secs(120)), "no checkpoint appeared");
        std::thread::sleep(Duration::from_millis(next(&mut state) % 300));
        child.kill().unwrap(); // SIGKILL
        let status = child.wait().unwrap();
        let finished_before_kill = status.success();
        if !finished_before_kill {
            assert!(ckpt.exists(), "round {round}: the last checkpoint must survive SIGKILL");
            // Resume with a different thread count: the result must not depend on it.
            let o = dosemill(&["resume", ckpt.to_str().unwrap(), "--quiet", "--threads", "1", "--checkpoint-every-chunks", "16"]);
            assert!(o.status.success(), "round {round}: {}", text(&o));
            resumed += 1;
        }
        let got = out.join("w.h5");
        assert!(groups(&got).bits_equal(&groups(&reference)), "round {round}: resumed result differs from the uninterrupted run");
        assert_eq!(root_str(&got, "completion"), "complete");
        assert_eq!(root_u64(&got, "histories"), 600_000);
        assert!(!ckpt.exists(), "round {round}: the checkpoint is removed after a complete result");
    }
    assert!(resumed >= 1, "every run finished before it was killed; the test proved nothing");
}

fn interrupt(deck: &Path, out: &Path) -> Output {
    let ckpt = out.join("w.h5.ckpt");
    let child = Command::new(BIN)
        .args(["run", deck.to_str().unwrap(), "--threads", "2", "--out", out.to_str().unwrap(), "--checkpoint-every-chunks", "16"])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    assert!(wait_for(&ckpt, Duration::from_secs(120)), "no checkpoint appeared");
    let k = Command::new("kill").args(["-INT", &child.id().to_string()]).status().unwrap();
    assert!(k.success());
    child.wait_with_output().unwrap()
}

#[test]
fn sigint_writes_partial_result_and_resumable_checkpoint() {
    let dir = scratch("int");
    let deck = write_deck(&dir, 2_000_000, 5);
    let out = dir.join("run");
    let o = interrupt(&deck, &out);
    assert_eq!(o.status.code(), Some(3), "SIGINT exits with 3: {}", text(&o));
    let partial = out.join("w.h5");
    let ckpt = out.join("w.h5.ckpt");
    assert_eq!(root_str(&partial, "completion"), "partial");
    let done = root_u64(&partial, "histories");
    assert!(done > 0 && done < 2_000_000, "histories done {done}");
    assert_eq!(done % 2000, 0, "whole chunks only");
    // The checkpoint holds exactly the histories of the partial result.
    let c = dosemill_engine::runstate::checkpoint::Checkpoint::read(&ckpt).unwrap();
    assert_eq!(c.header.histories_done, done);
    assert_eq!(c.chunks.len() as u64 * 2000, done);
    // Uncertainties come from the histories done: the partial file is what a run of exactly
    // those chunks gives, so its datasets' means equal the checkpoint sums over `done`.
    let f = output::read(&partial).unwrap();
    let e = f.group("pdd").unwrap().dataset("energy").unwrap().data.to_f64().unwrap();
    let (m, _) = dosemill_engine::score::Tally::from_raw(c.tallies[0].0.clone(), c.tallies[0].1.clone()).mean_and_sigma(done);
    assert_eq!(e.iter().map(|x| x.to_bits()).collect::<Vec<_>>(), m.iter().map(|x| x.to_bits()).collect::<Vec<_>>());

    let o = dosemill(&["run", deck.to_str().unwrap(), "--quiet", "--resume", "--threads", "2", "--out", out.to_str().unwrap()]);
    assert!(o.status.success(), "{}", text(&o));
    let reference = reference(&dir, &deck);
    assert!(groups(&partial).bits_equal(&groups(&reference)), "resumed after SIGINT differs from the uninterrupted run");
    assert_eq!(root_str(&partial, "completion"), "complete");
    assert!(!ckpt.exists());
}

#[test]
fn checkpoint_of_another_deck_or_seed_is_refused_naming_the_difference() {
    let dir = scratch("mismatch");
    let deck = write_deck(&dir, 2_000_000, 5);
    let out = dir.join("run");
    let o = interrupt(&deck, &out);
    assert_eq!(o.status.code(), Some(3), "{}", text(&o));
    // A different seed on the command line.
    let o = dosemill(&["run", deck.to_str().unwrap(), "--quiet", "--resume", "--seed", "6", "--out", out.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains("seed (5 here, 6 now)"), "{}", text(&o));
    // The deck edited (thicker water): the resolved deck hash differs.
    let edited = std::fs::read_to_string(&deck).unwrap().replace("thickness_cm = 10", "thickness_cm = 11");
    std::fs::write(&deck, edited).unwrap();
    let o = dosemill(&["resume", out.join("w.h5.ckpt").to_str().unwrap(), "--quiet"]);
    assert_ne!(o.status.code(), Some(0));
    let t = text(&o);
    assert!(t.contains("different run") && t.contains("deck (resolved deck sha256"), "{t}");
    // The refused checkpoint is left for a later resume.
    assert!(out.join("w.h5.ckpt").exists());
}

#[test]
fn full_disk_keeps_the_previous_result_and_the_last_checkpoint() {
    let dir = scratch("disk");
    let deck = write_deck(&dir, 2_000_000, 5);
    let out = dir.join("run");
    let o = interrupt(&deck, &out);
    assert_eq!(o.status.code(), Some(3), "{}", text(&o));
    let result = out.join("w.h5");
    let ckpt = out.join("w.h5.ckpt");
    let result_before = std::fs::read(&result).unwrap();
    let ckpt_before = std::fs::read(&ckpt).unwrap();
    let o = Command::new(BIN)
        .args(["resume", ckpt.to_str().unwrap(), "--quiet", "--checkpoint-every-chunks", "16"])
        .env(output::FAULT_ENV_VAR, "4096")
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    let t = text(&o);
    assert!(t.contains("No space left on device") || t.contains("no space"), "{t}");
    assert!(t.contains("previous result file") && t.contains("checkpoint"), "says what was kept: {t}");
    assert_eq!(std::fs::read(&result).unwrap(), result_before, "previous result intact");
    assert_eq!(std::fs::read(&ckpt).unwrap(), ckpt_before, "last checkpoint intact");
    let leftovers: Vec<_> = std::fs::read_dir(&out).unwrap().map(|e| e.unwrap().file_name()).collect();
    assert_eq!(leftovers.len(), 2, "no temporary files left: {leftovers:?}");
    // And the kept checkpoint still resumes.
    let o = dosemill(&["resume", ckpt.to_str().unwrap(), "--quiet"]);
    assert!(o.status.success(), "{}", text(&o));
    assert_eq!(root_str(&result, "completion"), "complete");
}

#[test]
fn second_signal_exits_at_once_and_the_last_checkpoint_still_resumes() {
    let dir = scratch("twice");
    // Large chunks (0.1 s or more each), so further signals land while chunks are in hand.
    let deck = write_deck_chunked(&dir, 12_000_000, 400_000, 8);
    // After the first SIGINT, SIGINT is repeated every 20 ms until the process is gone (the
    // repetition keeps the kernel from folding two pending signals into one). If the chunks in
    // hand happened to finish between two signals, the run ends normally as interrupted (3);
    // the attempt is then repeated, up to three times.
    let mut aborted = None;
    for attempt in 0..3 {
        let out = dir.join(format!("run{attempt}"));
        let ckpt = out.join("w.h5.ckpt");
        let mut child = Command::new(BIN)
            .args(["run", deck.to_str().unwrap(), "--quiet", "--threads", "2", "--out", out.to_str().unwrap(), "--checkpoint-every-chunks", "16"])
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        assert!(wait_for(&ckpt, Duration::from_secs(120)), "no checkpoint appeared");
        let pid = child.id();
        let k = Command::new("sh")
            .args(["-c", &format!("kill -INT {pid}; for i in $(seq 100); do sleep 0.02; kill -INT {pid} 2>/dev/null || break; done")])
            .status()
            .unwrap();
        assert!(k.success());
        let code = child.wait().unwrap().code();
        match code {
            Some(4) => {
                assert!(!out.join("w.h5").exists(), "no result written after an immediate exit");
                aborted = Some(out);
                break;
            }
            Some(3) => assert_eq!(root_str(&out.join("w.h5"), "completion"), "partial"),
            other => panic!("attempt {attempt}: exit code {other:?}, expected 4 (or 3)"),
        }
    }
    let out = aborted.expect("a second signal never ended the process at once (exit code 4) in three attempts");
    let o = dosemill(&["resume", out.join("w.h5.ckpt").to_str().unwrap(), "--quiet"]);
    assert!(o.status.success(), "{}", text(&o));
    let reference = reference(&dir, &deck);
    assert!(groups(&out.join("w.h5")).bits_equal(&groups(&reference)));
}

/// A voxel phantom deck (invented demo phantom) whose dose grid lives in a shared tally: its
/// checkpoint is streamed from the tally and loaded back into it a block at a time.
fn write_voxel_deck(dir: &Path, histories: u64, seed: u64) -> PathBuf {
    let text = format!(
        r#"# Demo deck (invented scenario) for checkpoint tests: a small voxel phantom.
[run]
histories = {histories}
histories_per_chunk = 2000
seed = {seed}
output = "w.h5"

[source]
kind = "point"
position_cm = [0, 0, -50]
field = {{ shape = "rectangle", width_cm = 8, height_cm = 8 }}
field_distance_cm = 50
energy_kev = 60

[geometry]
kind = "voxels"
world = "air"
voxels = [24, 24, 24]
voxel_size_cm = [0.5, 0.5, 0.5]

[geometry.phantom]
fill = "water"

[[geometry.phantom.shape]]
kind = "sphere"
center_cm = [0, 0, 6]
radius_cm = 2.5
material = "cortical_bone"
region = "ball"

[[score]]
name = "dose"
kind = "voxel_dose"
estimator = "analog"
"#
    );
    let p = dir.join("deck.toml");
    std::fs::write(&p, text).unwrap();
    p
}

// A voxel dose grid survives SIGINT and resume bit for bit: the streamed checkpoint holds
// exactly the partial result's sums, and the resumed result equals the uninterrupted run.
#[test]
fn voxel_dose_grid_checkpoint_resumes_bitwise_identical() {
    let dir = scratch("voxel");
    let deck = write_voxel_deck(&dir, 3_000_000, 21);
    let out = dir.join("run");
    let o = interrupt(&deck, &out);
    assert_eq!(o.status.code(), Some(3), "SIGINT exits with 3: {}", text(&o));
    let partial = out.join("w.h5");
    let ckpt = out.join("w.h5.ckpt");
    let done = root_u64(&partial, "histories");
    assert!(done > 0 && done < 3_000_000, "histories done {done}");
    let c = dosemill_engine::runstate::checkpoint::Checkpoint::read(&ckpt).unwrap();
    assert_eq!(c.header.histories_done, done);
    let f = output::read(&partial).unwrap();
    let e = f.group("dose").unwrap().dataset("energy").unwrap().data.to_f64().unwrap();
    let (m, _) = dosemill_engine::score::Tally::from_raw(c.tallies[0].0.clone(), c.tallies[0].1.clone()).mean_and_sigma(done);
    assert_eq!(e.len(), 24 * 24 * 24);
    assert!(e.iter().any(|x| *x > 0.0));
    assert_eq!(e.iter().map(|x| x.to_bits()).collect::<Vec<_>>(), m[..e.len()].iter().map(|x| x.to_bits()).collect::<Vec<_>>());

    let o = dosemill(&["run", deck.to_str().unwrap(), "--quiet", "--resume", "--threads", "1", "--out", out.to_str().unwrap()]);
    assert!(o.status.success(), "{}", text(&o));
    let reference = reference(&dir, &deck);
    assert!(groups(&partial).bits_equal(&groups(&reference)), "resumed voxel dose differs from the uninterrupted run");
    assert!(!ckpt.exists());
}
