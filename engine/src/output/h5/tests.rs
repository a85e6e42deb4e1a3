//! Round trip, refusal to overwrite, atomicity under injected write failures, validation.

use super::*;
use crate::output::{Produced, TreeError};

/// A fresh empty folder under the system temp dir, removed when dropped.
struct Scratch(PathBuf);

impl Scratch {
    fn new(tag: &str) -> Self {
        static N: AtomicU64 = AtomicU64::new(0);
        let n = N.fetch_add(1, Ordering::Relaxed);
        let p =
            std::env::temp_dir().join(format!("dosemill-output-{tag}-{}-{n}", std::process::id()));
        let _ = std::fs::remove_dir_all(&p);
        std::fs::create_dir_all(&p).unwrap();
        Scratch(p)
    }
    fn entries(&self) -> Vec<String> {
        let mut v: Vec<String> = std::fs::read_dir(&self.0)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    }
}

impl Drop for Scratch {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.0);
    }
}

fn sample(marker: f64) -> ResultFile {
    let mut f = ResultFile::new();
    f.set_attr("dosemill_version", "0.1.0");
    f.set_attr("seed", 12345u64);
    f.set_attr("histories", 1_000_000u64);
    f.set_attr("wall_time_s", 3.25);
    f.set_attr("offset", -7i64);
    f.set_attr("complete_flag", true);
    f.set_attr("other_flag", false);
    f.set_attr("ints", AttrValue::I64s(vec![-1, 0, i64::MAX]));
    f.set_attr("deck_text", "x".repeat(70_000) + "\nµ-end");
    let mut g = Group::with_kind("pdd", "depth_dose");
    g.add_dataset(Dataset::f64_1d(
        "dose",
        vec![marker, 2.0, -0.0, f64::MIN_POSITIVE, 1e300],
        "Gy",
    ));
    g.add_dataset(Dataset::f64_1d(
        "dose_sigma",
        vec![0.1, 0.2, 0.0, 0.0, 1e298],
        "Gy",
    ));
    g.attach_axis(
        "dose",
        0,
        "depth_edges_cm",
        &[0.0, 0.5, 1.0, 1.5, 2.0, 2.5],
        "cm",
    )
    .unwrap();
    let mut inner = Group::new("inner");
    inner.add_dataset(Dataset::new(
        "counts",
        &[2, 2],
        DataBuf::U64(vec![0, 1, u64::MAX, 3]),
        "1",
    ));
    inner.add_dataset(Dataset::new(
        "mask",
        &[3],
        DataBuf::U8(vec![0, 255, 7]),
        "1",
    ));
    inner.add_dataset(Dataset::new("mat", &[2], DataBuf::U16(vec![65535, 1]), "1"));
    inner.add_dataset(Dataset::new(
        "f",
        &[1, 2],
        DataBuf::F32(vec![1.5, -2.25]),
        "keV",
    ));
    inner.add_dataset(Dataset::new(
        "i",
        &[2],
        DataBuf::I64(vec![i64::MIN, 5]),
        "1",
    ));
    inner.add_dataset(Dataset::new("scalar", &[], DataBuf::F64(vec![42.0]), "s"));
    inner.add_dataset(Dataset::text("note", "line 1\nline 2 — ü"));
    g.add_group(inner);
    f.add_group(g);
    f
}

#[test]
fn round_trip_is_bit_exact_and_sorted() {
    let dir = Scratch::new("roundtrip");
    let p = dir.0.join("r.h5");
    let f = sample(1.0);
    write_atomic_with(&p, &f, &WriteOptions::default()).unwrap();
    let back = read(&p).unwrap();
    assert!(
        back.bits_equal(&f.canonical()),
        "read-back differs:\n{back:#?}"
    );
    // -0.0 keeps its sign bit through the file.
    let dose = back.group("pdd").unwrap().dataset("dose").unwrap();
    let DataBuf::F64(v) = &dose.data else {
        panic!("dose is not f64")
    };
    assert_eq!(v[2].to_bits(), (-0.0f64).to_bits());
    assert_eq!(back.attr("complete_flag"), Some(&AttrValue::Bool(true)));
    assert_eq!(
        dir.entries(),
        vec!["r.h5"],
        "no temporary file may be left behind"
    );
}

#[test]
fn existing_file_is_refused_without_overwrite_and_replaced_with_it() {
    let dir = Scratch::new("exists");
    let p = dir.0.join("r.h5");
    write_atomic_with(&p, &sample(1.0), &WriteOptions::default()).unwrap();
    let before = std::fs::read(&p).unwrap();
    let err = write_atomic_with(&p, &sample(2.0), &WriteOptions::default()).unwrap_err();
    assert!(matches!(err, OutputError::Exists { .. }), "{err}");
    let msg = err.to_string();
    assert!(msg.contains("r.h5") && msg.contains("--force"), "{msg}");
    assert_eq!(std::fs::read(&p).unwrap(), before);

    let opts = WriteOptions {
        overwrite: true,
        ..WriteOptions::default()
    };
    write_atomic_with(&p, &sample(2.0), &opts).unwrap();
    let back = read(&p).unwrap();
    let DataBuf::F64(v) = &back.group("pdd").unwrap().dataset("dose").unwrap().data else {
        panic!()
    };
    assert_eq!(v[0], 2.0);
    assert_eq!(dir.entries(), vec!["r.h5"]);
}

#[test]
fn failed_write_keeps_previous_file_and_leaves_no_temp() {
    let dir = Scratch::new("diskfull");
    let p = dir.0.join("r.h5");
    write_atomic_with(&p, &sample(1.0), &WriteOptions::default()).unwrap();
    let before = std::fs::read(&p).unwrap();
    // Fail at several points: before the first byte, in the superblock, mid-file, near the end.
    for limit in [0u64, 10, 4096, before.len() as u64 - 1] {
        let opts = WriteOptions {
            overwrite: true,
            fail_after_bytes: Some(limit),
        };
        let err = write_atomic_with(&p, &sample(9.0), &opts).unwrap_err();
        match &err {
            OutputError::Io { source, .. } => {
                assert_eq!(source.kind(), io::ErrorKind::StorageFull, "{err}")
            }
            other => panic!("expected an I/O error, got {other}"),
        }
        assert_eq!(
            std::fs::read(&p).unwrap(),
            before,
            "previous file changed (limit {limit})"
        );
        assert_eq!(
            dir.entries(),
            vec!["r.h5"],
            "temporary file left behind (limit {limit})"
        );
    }
    // A new destination that fails is not created at all.
    let q = dir.0.join("new.h5");
    let opts = WriteOptions {
        overwrite: false,
        fail_after_bytes: Some(100),
    };
    assert!(write_atomic_with(&q, &sample(1.0), &opts).is_err());
    assert!(!q.exists());
    assert_eq!(dir.entries(), vec!["r.h5"]);
}

#[test]
fn missing_folder_is_an_io_error_naming_the_path() {
    let dir = Scratch::new("nofolder");
    let p = dir.0.join("no/such/folder/r.h5");
    let err = write_atomic_with(&p, &sample(1.0), &WriteOptions::default()).unwrap_err();
    assert!(matches!(err, OutputError::Io { .. }), "{err}");
    assert!(err.to_string().contains("no/such/folder/r.h5"), "{err}");
}

#[test]
fn invalid_trees_are_refused_before_touching_disk() {
    let dir = Scratch::new("invalid");
    let p = dir.0.join("r.h5");
    let cases: Vec<(ResultFile, &str)> = vec![
        {
            let mut f = ResultFile::new();
            let mut g = Group::new("g");
            g.add_dataset(Dataset::f64_nd("d", &[2, 2], vec![1.0; 3], "Gy"));
            f.add_group(g);
            (f, "/g/d")
        },
        {
            let mut f = ResultFile::new();
            let mut g = Group::new("g");
            g.add_dataset(Dataset::f64_1d("d", vec![1.0], ""));
            f.add_group(g);
            (f, "units are empty")
        },
        {
            let mut f = ResultFile::new();
            f.add_group(Group::new("a/b"));
            (f, "contain `/`")
        },
        {
            let mut f = ResultFile::new();
            f.add_group(Group::new("g"));
            f.add_group(Group::new("g"));
            (f, "used twice")
        },
        {
            let mut f = ResultFile::new();
            let mut g = Group::new("g");
            g.add_dataset(Dataset::f64_1d("d", vec![1.0], "Gy").with_attr("units", "cm"));
            f.add_group(g);
            (f, "reserved")
        },
        {
            let mut f = ResultFile::new();
            let mut g = Group::new("g");
            g.add_dataset(Dataset::f64_1d("d", vec![1.0, 2.0], "Gy").with_attr("axis0", "edges"));
            g.add_dataset(Dataset::f64_1d("edges", vec![0.0, 1.0], "cm"));
            f.add_group(g);
            (f, "expected [3]")
        },
    ];
    for (f, needle) in cases {
        let err = write_atomic_with(&p, &f, &WriteOptions::default()).unwrap_err();
        assert!(matches!(err, OutputError::Invalid { .. }), "{err}");
        assert!(
            err.to_string().contains(needle),
            "`{err}` should mention `{needle}`"
        );
        assert!(dir.entries().is_empty());
    }
}

#[test]
fn attach_axis_checks_edge_count() {
    let mut g = Group::new("g");
    g.add_dataset(Dataset::f64_nd("img", &[2, 3], vec![0.0; 6], "1"));
    assert!(g
        .attach_axis("img", 1, "x_edges_cm", &[0.0, 1.0, 2.0, 3.0], "cm")
        .is_ok());
    let e: TreeError = g
        .attach_axis("img", 0, "y_edges_cm", &[0.0, 1.0], "cm")
        .unwrap_err();
    assert!(e.reason.contains("needs 3 edges"), "{e}");
    assert!(g.attach_axis("img", 2, "z", &[0.0], "cm").is_err());
    assert!(g.attach_axis("nope", 0, "z", &[0.0], "cm").is_err());
    assert_eq!(
        g.axis_of(g.dataset("img").unwrap(), 1).unwrap().name,
        "x_edges_cm"
    );
}

#[test]
fn reading_a_non_hdf5_file_names_it() {
    let dir = Scratch::new("garbage");
    let p = dir.0.join("not.h5");
    std::fs::write(&p, b"this is not an HDF5 file").unwrap();
    let err = read(&p).unwrap_err();
    assert!(err.to_string().contains("not.h5"), "{err}");
    let err = read(dir.0.join("missing.h5")).unwrap_err();
    assert!(
        matches!(err, OutputError::Io { .. }) && err.to_string().contains("missing.h5"),
        "{err}"
    );
}

#[test]
fn same_tree_gives_byte_identical_files() {
    // No timestamps or addresses that vary between runs: a rerun with the same seed can be
    // compared with `cmp` as well as dataset by dataset.
    let dir = Scratch::new("repro");
    let (a, b) = (dir.0.join("a.h5"), dir.0.join("b.h5"));
    write_atomic_with(&a, &sample(1.0), &WriteOptions::default()).unwrap();
    write_atomic_with(&b, &sample(1.0), &WriteOptions::default()).unwrap();
    assert_eq!(std::fs::read(&a).unwrap(), std::fs::read(&b).unwrap());
}

#[test]
fn foreign_layouts_are_refused_with_the_object_path() {
    let dir = Scratch::new("foreign");
    // A dataset without a `units` attribute.
    let p = dir.0.join("nounits.h5");
    let mut b = h5::FileBuilder::new();
    let mut g = b.create_group("scorer");
    g.create_dataset("dose").with_f64_data(&[1.0, 2.0]);
    b.add_group(g.finish());
    b.write(&p).unwrap();
    let err = read(&p).unwrap_err();
    assert!(matches!(err, OutputError::Unsupported { .. }), "{err}");
    let msg = err.to_string();
    assert!(
        msg.contains("nounits.h5") && msg.contains("/scorer/dose") && msg.contains("units"),
        "{msg}"
    );

    // A dataset directly under the root.
    let p = dir.0.join("rootds.h5");
    let mut b = h5::FileBuilder::new();
    b.create_dataset("loose")
        .with_f64_data(&[1.0])
        .set_attr("units", h5::AttrValue::VarLenString("1".into()));
    b.write(&p).unwrap();
    let err = read(&p).unwrap_err();
    assert!(err.to_string().contains("/loose"), "{err}");

    // An element type the layout does not use (8-bit signed).
    let p = dir.0.join("i8.h5");
    let mut b = h5::FileBuilder::new();
    let mut g = b.create_group("g");
    g.create_dataset("x")
        .with_i8_data(&[1, -1])
        .set_attr("units", h5::AttrValue::VarLenString("1".into()));
    b.add_group(g.finish());
    b.write(&p).unwrap();
    let err = read(&p).unwrap_err();
    assert!(
        err.to_string().contains("/g/x") && err.to_string().contains("element type"),
        "{err}"
    );
}

/// A tree whose grid values are produced while the file is written: a large 3-D array (filled in
/// place after the builder reserved it), a small one (materialised), in a nested group.
fn produced_sample(n: usize) -> (ResultFile, Vec<f64>, Vec<f64>) {
    let value = |i: usize| (i as f64).sqrt() * 1e-3 - 0.5;
    let big: Vec<f64> = (0..n).map(value).collect();
    let small: Vec<f64> = (0..10).map(|i| 2.0 * value(i)).collect();
    let mut f = ResultFile::new();
    f.set_attr("histories", 7u64);
    let mut g = Group::with_kind("grid", "dose_grid");
    g.add_dataset(Dataset::new("dose", &[n / 64, 8, 8], DataBuf::Produced(crate::output::Produced::new(n, move |s, out| {
        for (k, o) in out.iter_mut().enumerate() {
            *o = value(s + k);
        }
    })), "Gy"));
    g.add_dataset(Dataset::f64_1d("after", vec![1.0, 2.0, 3.0], "cm"));
    let mut sub = Group::with_kind("inner", "depth_dose");
    sub.add_dataset(Dataset::new("small", &[10], DataBuf::Produced(crate::output::Produced::new(10, move |s, out| {
        for (k, o) in out.iter_mut().enumerate() {
            *o = 2.0 * value(s + k);
        }
    })), "Gy"));
    g.add_group(sub);
    f.add_group(g);
    (f, big, small)
}

// Produced datasets read back bit for bit as ordinary f64 arrays, equal to the materialised tree;
// the file is the same bytes as one written from plain vectors.
#[test]
fn produced_datasets_round_trip_bit_exact() {
    let dir = Scratch::new("produced");
    let n = 3 * Produced::BLOCK + 64 * 5; // several blocks and a partial one
    let (tree, big, small) = produced_sample(n);
    let p = dir.0.join("p.h5");
    write_atomic(&p, &tree, false).unwrap();
    let back = read(&p).unwrap();
    let g = back.group("grid").unwrap();
    let DataBuf::F64(v) = &g.dataset("dose").unwrap().data else { panic!("f64 expected") };
    assert!(v.len() == big.len() && v.iter().zip(&big).all(|(a, b)| a.to_bits() == b.to_bits()));
    assert_eq!(g.dataset("dose").unwrap().shape, vec![n / 64, 8, 8]);
    assert_eq!(g.dataset("after").unwrap().data, DataBuf::F64(vec![1.0, 2.0, 3.0]));
    let DataBuf::F64(s) = &g.group("inner").unwrap().dataset("small").unwrap().data else { panic!() };
    assert_eq!(s, &small);
    assert!(back.bits_equal(&tree.canonical()), "read-back tree equals the produced one");
    // The same tree from plain vectors gives the identical file.
    let mut plain = tree.clone();
    plain.groups[0].datasets[0].data = DataBuf::F64(big);
    plain.groups[0].groups[0].datasets[0].data = DataBuf::F64(small);
    let q = dir.0.join("q.h5");
    write_atomic(&q, &plain, false).unwrap();
    assert_eq!(std::fs::read(&p).unwrap(), std::fs::read(&q).unwrap());
}

// A disk that fills up while produced values are written leaves the previous file and no
// temporary file behind.
#[test]
fn produced_write_failure_keeps_previous_file() {
    let dir = Scratch::new("produced-full");
    let n = 2 * Produced::BLOCK;
    let (tree, _, _) = produced_sample(n);
    let p = dir.0.join("p.h5");
    write_atomic(&p, &sample(1.0), false).unwrap();
    let before = std::fs::read(&p).unwrap();
    // The builder writes the whole file (about 8n bytes) first; a limit past that fails during
    // the in-place fill of the values.
    for limit in [100u64, 8 * n as u64 + 4096, 12 * n as u64] {
        let opts = WriteOptions { overwrite: true, fail_after_bytes: Some(limit) };
        let err = write_atomic_with(&p, &tree, &opts).unwrap_err();
        assert!(matches!(&err, OutputError::Io { source, .. } if source.kind() == io::ErrorKind::StorageFull), "{err}");
        assert_eq!(std::fs::read(&p).unwrap(), before);
        assert_eq!(dir.entries(), vec!["p.h5"]);
    }
}
