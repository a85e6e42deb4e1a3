//! Deck corpus: every malformed deck under tests/decks/bad/ must fail with the errors its sidecar
//! `.expect` file names (position and text), without panicking; every deck under
//! tests/decks/good/ must load, and its resolved TOML must load back to the same resolved deck.
//!
//! Each line of `NAME.expect` (beside `NAME.toml`) is one error that must be reported:
//! `LINE:COLUMN: text` (located in the deck itself) or `FILE:LINE:COLUMN: text` (located in
//! another file of the corpus, by file name). `text` must appear in the error's display.

use dosemill_engine::deck::{self, Composition, DeckError, Geometry, ScoreKind, SourceEnergy};
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::path::{Path, PathBuf};

fn corpus(sub: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/decks")
        .join(sub)
}

fn decks_in(dir: &Path) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().and_then(|e| e.to_str()) == Some("toml"))
        .collect();
    v.sort();
    v
}

#[derive(Debug)]
struct Expect {
    file: Option<String>,
    line: usize,
    column: usize,
    text: String,
}

fn expectations(text: &str) -> Vec<Expect> {
    let mut out = Vec::new();
    for l in text.lines() {
        let rest = l.trim();
        if rest.is_empty() || rest.starts_with('#') {
            continue;
        }
        let (file, rest) = if rest.starts_with(|c: char| c.is_ascii_digit()) {
            (None, rest)
        } else {
            let (f, r) = rest.split_once(':').expect("file:line:col");
            (Some(f.to_string()), r)
        };
        let mut parts = rest.splitn(3, ':');
        let line = parts.next().unwrap().trim().parse().expect("line");
        let column = parts.next().unwrap().trim().parse().expect("column");
        let text = parts.next().unwrap().trim().to_string();
        out.push(Expect {
            file,
            line,
            column,
            text,
        });
    }
    out
}

fn matches(e: &DeckError, x: &Expect, deck: &Path) -> bool {
    let want_file = match &x.file {
        Some(f) => f.clone(),
        None => deck.file_name().unwrap().to_string_lossy().into_owned(),
    };
    e.file
        .file_name()
        .map(|f| f.to_string_lossy() == want_file.as_str())
        .unwrap_or(false)
        && e.line == x.line
        && e.column == x.column
        && e.to_string().contains(&x.text)
}

/// A stand-in for the materials library (the real one is xsdata's): names used by the corpus.
fn stand_in_library(name: &str) -> Result<(), String> {
    const NAMES: &[&str] = &["water", "air", "Al", "Cu", "Pb", "CsI"];
    if NAMES.contains(&name) {
        Ok(())
    } else {
        Err(format!(
            "`{name}` is not in the materials library; see `dosemill materials`"
        ))
    }
}

/// Deck errors of loading, then of the library-name check.
#[test]
fn bad_decks_fail_with_the_expected_errors() {
    let decks = decks_in(&corpus("bad"));
    assert!(
        decks.len() >= 30,
        "the corpus has {} bad decks",
        decks.len()
    );
    let mut failures = Vec::new();
    for d in &decks {
        let sidecar = d.with_extension("expect");
        let text = std::fs::read_to_string(&sidecar)
            .unwrap_or_else(|_| panic!("{} has no .expect file", d.display()));
        let exp = expectations(&text);
        assert!(!exp.is_empty(), "{} is empty", sidecar.display());
        let result = catch_unwind(AssertUnwindSafe(|| deck::load(d)));
        let errs = match result {
            Err(_) => {
                failures.push(format!("{}: load panicked", d.display()));
                continue;
            }
            Ok(Ok(loaded)) => match deck::validate_with(&loaded, &stand_in_library) {
                Ok(()) => {
                    failures.push(format!("{}: loaded without error", d.display()));
                    continue;
                }
                Err(errs) => errs,
            },
            Ok(Err(errs)) => errs,
        };
        for x in &exp {
            if !errs.iter().any(|e| matches(e, x, d)) {
                let got: Vec<String> = errs.iter().map(|e| e.to_string()).collect();
                failures.push(format!(
                    "{}: expected {:?}\n    got:\n      {}",
                    d.display(),
                    x,
                    got.join("\n      ")
                ));
            }
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

/// Load the resolved text of `r` as a deck written in `dir` and compare.
fn round_trip(r: &deck::ResolvedDeck, dir: &Path, name: &str) {
    let text = deck::resolved_deck_toml(r);
    let back = deck::load_str(&text, &dir.join(name))
        .unwrap_or_else(|e| panic!("resolved TOML of {name} does not load:\n{text}\n{e:?}"));
    assert_eq!(
        &back.resolved, r,
        "round trip of {name} changed the resolved deck:\n{text}"
    );
}

#[test]
fn good_decks_load_and_round_trip() {
    let decks = decks_in(&corpus("good"));
    assert!(decks.len() >= 6);
    // Resolved paths are absolute, so the text must mean the same from another folder.
    let elsewhere = std::env::temp_dir();
    for d in &decks {
        let deck = catch_unwind(AssertUnwindSafe(|| deck::load(d)))
            .unwrap_or_else(|_| panic!("{} panicked", d.display()))
            .unwrap_or_else(|e| {
                panic!(
                    "{} failed: {}",
                    d.display(),
                    e.iter()
                        .map(|x| x.to_string())
                        .collect::<Vec<_>>()
                        .join("\n")
                )
            });
        assert_eq!(
            deck.files[0].text,
            std::fs::read_to_string(d).unwrap(),
            "verbatim text kept"
        );
        round_trip(&deck.resolved, &elsewhere, "roundtrip.toml");
        for (_, r) in deck::expand(&deck) {
            round_trip(&r, &elsewhere, "roundtrip.toml");
        }
    }
}

fn good(name: &str) -> deck::Deck {
    deck::load(&corpus("good").join(name)).unwrap_or_else(|e| panic!("{e:?}"))
}

#[test]
fn defaults_are_filled_in() {
    let d = good("slab_water.toml");
    let r = &d.resolved.run;
    assert_eq!(r.seed, 42);
    assert_eq!(r.histories_per_chunk, 10_000);
    assert_eq!(r.energy_cutoff_kev, 1.0);
    assert!(r.bound_compton && r.rayleigh && r.fluorescence);
    assert_eq!(r.threads, None);
    assert_eq!(
        r.output,
        std::path::absolute(corpus("good").join("slab_water.h5")).unwrap()
    );
    let Geometry::Slabs(s) = &d.resolved.geometry else {
        panic!()
    };
    assert_eq!(s.start_z_cm, 0.0);
    assert_eq!(s.layers.len(), 2);
    assert_eq!(s.layers[1].density_g_cm3, Some(2.699));
    assert!(!s.layers[0].material.user_defined);
}

#[test]
fn tube_filters_and_detector_are_resolved() {
    let d = good("tube_detector.toml");
    assert_eq!(d.resolved.run.histories, 10_000_000);
    let SourceEnergy::Tube(t) = &d.resolved.source.energy else {
        panic!()
    };
    // "Al:2.5" is 2.5 mm = 0.25 cm; 0.1 mm Cu = 0.01 cm.
    assert!((t.filters[0].thickness_cm - 0.25).abs() < 1e-12);
    assert!((t.filters[1].thickness_cm - 0.01).abs() < 1e-12);
    let ScoreKind::Detector(det) = &d.resolved.scores[1].kind else {
        panic!()
    };
    // 40 cm / 0.2 cm = 200 pixels a side.
    assert_eq!(det.pixels, [200, 200]);
    assert_eq!(
        det.anti_scatter_grid.as_ref().unwrap().strip_material.name,
        "Pb"
    );
    assert_eq!((det.primary_subpixels, det.primary_focal_points), (2, 4), "defaults");
    assert_eq!(det.forced_detection_steer, 0.3, "the steered share of Compton directions");
    let deck::SourceShape::Point { focal_spot_cm, .. } = d.resolved.source.shape else {
        panic!("a point source")
    };
    assert_eq!(focal_spot_cm, [0.0, 0.0], "a point focus by default");
    assert_eq!(d.resolved.source.energy_bias, Some(deck::EnergyBias { toward: "image".into(), floor: 0.2 }));
    let d = good("focal_spot_detector.toml");
    assert_eq!(d.resolved.source.energy_bias, None, "analog source energies by default");
    let ScoreKind::Detector(det) = &d.resolved.scores[0].kind else {
        panic!()
    };
    assert_eq!((det.primary_subpixels, det.primary_focal_points), (3, 2));
    let deck::SourceShape::Point { focal_spot_cm, .. } = d.resolved.source.shape else {
        panic!("a point source")
    };
    assert_eq!(focal_spot_cm, [0.12, 0.12]);
}

#[test]
fn mass_fractions_normalise_and_spectrum_file_is_kept() {
    let d = good("spectrum_parallel.toml");
    let m = d
        .resolved
        .materials
        .iter()
        .find(|m| m.name == "water_scaled")
        .unwrap();
    let Composition::MassFractions(f) = &m.composition else {
        panic!()
    };
    assert!(
        (f[0].mass_fraction - 1.0 / 9.0).abs() < 1e-15
            && (f[1].mass_fraction - 8.0 / 9.0).abs() < 1e-15
    );
    assert_eq!((f[0].z, f[1].z), (1, 8));
    let SourceEnergy::SpectrumFile {
        energies_kev,
        weights,
        ..
    } = &d.resolved.source.energy
    else {
        panic!()
    };
    assert_eq!(energies_kev, &vec![20.0, 30.0, 40.0, 50.0, 60.0]);
    assert_eq!(weights.len(), 5);
    assert!(d
        .files
        .iter()
        .any(|f| f.role == deck::FileRole::Spectrum && f.text.contains("30,1.0")));
    let Geometry::Slabs(s) = &d.resolved.geometry else {
        panic!()
    };
    assert!(s.layers.iter().all(|l| l.material.user_defined));
}

#[test]
fn includes_merge_with_the_including_deck_winning() {
    let d = good("include_main.toml");
    assert_eq!(d.resolved.run.histories, 5000, "the including deck wins");
    assert_eq!(d.resolved.run.seed, 3, "included value kept");
    assert!(!d.resolved.run.rayleigh);
    let names: Vec<&str> = d.resolved.scores.iter().map(|s| s.name.as_str()).collect();
    assert_eq!(
        names,
        ["counts", "layers"],
        "scores accumulate, included first"
    );
    assert_eq!(d.files.len(), 3);
    assert_eq!(
        d.resolved.run.output.file_name().unwrap(),
        "include_main.h5"
    );
}

#[test]
fn sweep_expands_to_the_cartesian_product_with_predictable_names() {
    let d = good("sweep.toml");
    let pts = deck::expand(&d);
    assert_eq!(pts.len(), 6);
    let names: Vec<String> = pts
        .iter()
        .map(|(_, r)| {
            r.run
                .output
                .file_name()
                .unwrap()
                .to_string_lossy()
                .into_owned()
        })
        .collect();
    assert_eq!(names[0], "sweep__kvp-60__thickness_cm-1.h5");
    assert_eq!(names[1], "sweep__kvp-60__thickness_cm-2.5.h5");
    assert_eq!(names[5], "sweep__kvp-100__thickness_cm-2.5.h5");
    let (vals, r) = &pts[3];
    assert_eq!(vals[0].0, "source.tube.kvp");
    assert_eq!(vals[0].1.as_integer(), Some(80));
    let SourceEnergy::Tube(t) = &r.source.energy else {
        panic!()
    };
    assert_eq!(t.kvp, 80.0);
    let Geometry::Slabs(s) = &r.geometry else {
        panic!()
    };
    assert_eq!(s.layers[0].thickness_cm, 2.5);
}

#[test]
fn library_names_are_checked_through_the_hook() {
    let d = good("slab_water.toml");
    let lookup = |n: &str| {
        if n == "water" {
            Ok(())
        } else {
            Err(format!("unknown material `{n}`; did you mean `aluminium`?"))
        }
    };
    let errs = deck::validate_with(&d, &lookup).unwrap_err();
    assert_eq!(errs.len(), 1);
    let e = &errs[0];
    // `material = "Al"` is on line 18 of slab_water.toml, the value at column 12.
    assert_eq!((e.line, e.column), (18, 12));
    assert_eq!(e.key_path, "geometry.layer[1].material");
    assert_eq!(e.hint.as_deref(), Some("did you mean `aluminium`?"));
    assert!(deck::validate_with(&d, &|_| Ok(())).is_ok());
}

#[test]
fn display_form() {
    let e = DeckError {
        file: "runs/x.toml".into(),
        line: 12,
        column: 3,
        key_path: "geometry.layer[0].thicknes_cm".into(),
        message: "unknown key".into(),
        hint: Some("did you mean `thickness_cm`?".into()),
    };
    assert_eq!(e.to_string(), "runs/x.toml:12:3: key `geometry.layer[0].thicknes_cm`: unknown key; did you mean `thickness_cm`?");
}

/// Damaged text must give errors, never a panic: every good deck with, at many places, a byte
/// deleted, a quote, bracket or `=` inserted, or a digit turned into a letter.
#[test]
fn damaged_decks_never_panic() {
    let mut tried = 0;
    for d in decks_in(&corpus("good")) {
        let text = std::fs::read_to_string(&d).unwrap();
        let bytes = text.as_bytes();
        let step = (bytes.len() / 120).max(1);
        for pos in (0..bytes.len()).step_by(step) {
            if !text.is_char_boundary(pos) {
                continue;
            }
            let mut variants = Vec::new();
            let mut del = text.clone();
            if let Some(c) = text[pos..].chars().next() {
                del.replace_range(pos..pos + c.len_utf8(), "");
                variants.push(del);
            }
            for ins in ["\"", "[", "]", "=", "\n", "-", "x"] {
                let mut t = text.clone();
                t.insert_str(pos, ins);
                variants.push(t);
            }
            for v in variants {
                tried += 1;
                let r = catch_unwind(AssertUnwindSafe(|| deck::load_str(&v, &d)));
                assert!(
                    r.is_ok(),
                    "load panicked on damaged {} at byte {pos}:\n{v}",
                    d.display()
                );
            }
        }
    }
    assert!(tried > 1000, "only {tried} variants tried");
}

/// The complete deck in the schema documentation loads, and its sweep names are the documented ones.
#[test]
fn schema_example_loads() {
    let doc = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("engine/src/deck/SCHEMA.md"),
    )
    .unwrap();
    let start = doc
        .find("```toml\n# complete deck")
        .expect("complete deck block")
        + "```toml\n".len();
    let len = doc[start..].find("```").unwrap();
    let text = &doc[start..start + len];
    let dir = std::env::temp_dir().join("dosemill_schema_example");
    let d = deck::load_str(text, &dir.join("slab_study.toml")).unwrap_or_else(|e| {
        panic!(
            "{}",
            e.iter()
                .map(|x| x.to_string())
                .collect::<Vec<_>>()
                .join("\n")
        )
    });
    assert_eq!(d.resolved.scores.len(), 5);
    let pts = deck::expand(&d);
    assert_eq!(pts.len(), 6);
    assert_eq!(
        pts[0].1.run.output.file_name().unwrap(),
        "slab_study__kvp-60__thickness_cm-0.5.h5"
    );
    assert_eq!(
        pts[5].1.run.output.file_name().unwrap(),
        "slab_study__kvp-100__thickness_cm-1.h5"
    );
    assert!(pts[0]
        .1
        .run
        .output
        .ends_with("results/slab_study__kvp-60__thickness_cm-0.5.h5"));
}

/// With the real materials library every good deck's names resolve, and an unknown name gets
/// the library's nearest name as the hint.
#[test]
fn library_names_resolve_with_the_built_in_library() {
    for d in decks_in(&corpus("good")) {
        if let Err(e) = deck::load_checked(&d) {
            panic!(
                "{}: {}",
                d.display(),
                e.iter()
                    .map(|x| x.to_string())
                    .collect::<Vec<_>>()
                    .join("\n")
            );
        }
    }
    let errs =
        deck::load_checked(&corpus("bad").join("unknown_library_material.toml")).unwrap_err();
    assert_eq!(errs.len(), 1);
    assert_eq!((errs[0].line, errs[0].column), (12, 12));
    assert!(
        errs[0]
            .to_string()
            .contains("`watr` is not a material of the library; did you mean `water`?"),
        "{}",
        errs[0]
    );
}

/// One pass reports every independent error, in the order they appear in the file.
#[test]
fn many_errors_are_reported_in_file_order() {
    let errs = deck::load(&corpus("bad").join("many_errors_one_pass.toml")).unwrap_err();
    let lines: Vec<usize> = errs.iter().map(|e| e.line).collect();
    assert!(errs.len() >= 5, "{errs:?}");
    assert!(lines.windows(2).all(|w| w[0] <= w[1]), "{lines:?}");
}

/// Relative paths are taken from the folder of the file that writes them, at any include depth.
#[test]
fn nested_includes_resolve_paths_from_their_own_folders() {
    let d = good("nested_include.toml");
    assert_eq!(d.resolved.run.histories, 2000);
    let SourceEnergy::SpectrumFile { path, .. } = &d.resolved.source.energy else {
        panic!()
    };
    assert_eq!(
        path.canonicalize().unwrap(),
        corpus("good")
            .join("demo_spectrum.csv")
            .canonicalize()
            .unwrap()
    );
    let roles: Vec<deck::FileRole> = d.files.iter().map(|f| f.role).collect();
    assert_eq!(
        roles,
        [
            deck::FileRole::Deck,
            deck::FileRole::Include,
            deck::FileRole::Include,
            deck::FileRole::Spectrum
        ]
    );
}

/// What validation accepts, set-up builds: every good deck, every example deck under runs/ (each
/// sweep combination), and tube values at the limits validation allows (the tube model's own
/// ranges: anode angle 3–45°, ripple 0–50 %, filters up to 100 mm). A value validation let
/// through and set-up then refused would surface only when a run starts, without its position.
#[test]
fn validated_decks_build() {
    use dosemill_engine::setup;
    let runs = Path::new(env!("CARGO_MANIFEST_DIR")).join("runs");
    let mut decks = decks_in(&corpus("good"));
    decks.extend(decks_in(&runs).into_iter().filter(|p| !p.file_name().unwrap().to_string_lossy().starts_with("protocol")));
    let mut texts: Vec<(PathBuf, String)> = decks.iter().map(|d| (d.clone(), std::fs::read_to_string(d).unwrap())).collect();
    for (angle, ripple, filters) in [(3.0, 0.0, "[\"Al:100\"]"), (45.0, 50.0, "[{ material = \"Cu\", thickness_cm = 10 }]")] {
        let text = format!(
            "[run]\nhistories = 100\n\n[source]\nkind = \"pencil\"\n[source.tube]\nkvp = 300\nanode_angle_deg = {angle}\nripple_percent = {ripple}\nfilters = {filters}\n\n[geometry]\nkind = \"slabs\"\n[[geometry.layer]]\nmaterial = \"water\"\nthickness_cm = 2\n\n[[score]]\nname = \"e\"\nkind = \"escape\"\n"
        );
        texts.push((std::env::temp_dir().join("tube_limits.toml"), text));
    }
    let mut failures = Vec::new();
    for (path, text) in &texts {
        let d = match deck::load_str(text, path) {
            Ok(d) => d,
            Err(e) => {
                failures.push(format!("{}: {}", path.display(), e.iter().map(|x| x.to_string()).collect::<Vec<_>>().join("; ")));
                continue;
            }
        };
        if let Err(e) = deck::validate_with(&d, &deck::library_lookup) {
            failures.push(format!("{}: {}", path.display(), e.iter().map(|x| x.to_string()).collect::<Vec<_>>().join("; ")));
            continue;
        }
        for (_, r) in deck::expand(&d).into_iter().take(4) {
            if let Err(e) = setup::build(&r) {
                failures.push(format!("{}: validated, but set-up refused it: {e}", path.display()));
            }
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}
