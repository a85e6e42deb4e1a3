//! Result files written by `dosemill_engine::output` are read back with h5py, the Python
//! interface to the HDF5 reference C library (PyPI `h5py`), as an independent reader: every
//! dataset's shape, dtype, values (bit for bit), `units` attribute, every attribute and the
//! long-string round trip must match. Skipped with a message when h5py is missing, except
//! when `CI=true`, where a missing h5py fails the test.

use std::path::{Path, PathBuf};
use std::process::Command;

use dosemill_engine::output::{self, AttrValue, DataBuf, Dataset, Group, ResultFile};
use serde_json::{json, Map, Value};

fn scratch(tag: &str) -> PathBuf {
    let p = std::env::temp_dir().join(format!("dosemill-h5py-{tag}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&p);
    std::fs::create_dir_all(&p).unwrap();
    p
}

/// True when `python3 -c "import h5py"` works; otherwise skip, or panic under CI=true.
fn h5py_available() -> bool {
    let ok = Command::new("python3")
        .args(["-c", "import h5py, numpy"])
        .output()
        .map(|o| o.status.success())
        .unwrap_or(false);
    if !ok {
        if std::env::var("CI").as_deref() == Ok("true") {
            panic!("h5py is not importable by python3, and CI=true requires this check to run (pip install h5py)");
        }
        eprintln!("SKIPPED: python3 cannot import h5py; install it (pip install h5py) to run the h5py read-back check");
    }
    ok
}

fn attr_spec(v: &AttrValue) -> Value {
    match v {
        AttrValue::Str(s) => json!({"type": "str", "value": s}),
        AttrValue::F64(x) => json!({"type": "f64", "value": x.to_bits()}),
        AttrValue::I64(x) => json!({"type": "i64", "value": x}),
        AttrValue::U64(x) => json!({"type": "u64", "value": x}),
        AttrValue::F64s(v) => {
            json!({"type": "f64s", "value": v.iter().map(|x| x.to_bits()).collect::<Vec<_>>()})
        }
        AttrValue::I64s(v) => json!({"type": "i64s", "value": v}),
        AttrValue::Bool(b) => json!({"type": "bool", "value": b}),
    }
}

fn attrs_spec(attrs: &[(String, AttrValue)]) -> Value {
    Value::Object(
        attrs
            .iter()
            .map(|(k, v)| (k.clone(), attr_spec(v)))
            .collect(),
    )
}

fn values_spec(d: &DataBuf) -> Value {
    match d {
        DataBuf::F64(v) => json!(v.iter().map(|x| x.to_bits()).collect::<Vec<_>>()),
        DataBuf::F32(v) => json!(v.iter().map(|x| x.to_bits()).collect::<Vec<_>>()),
        DataBuf::I64(v) => json!(v),
        DataBuf::I32(v) => json!(v),
        DataBuf::U64(v) => json!(v),
        DataBuf::U32(v) => json!(v),
        DataBuf::U16(v) => json!(v),
        DataBuf::U8(v) => json!(v),
        DataBuf::Str(v) => json!(v),
        DataBuf::Produced(p) => json!(p.to_vec().iter().map(|x| x.to_bits()).collect::<Vec<_>>()),
    }
}

fn group_spec(
    g: &Group,
    parent: &str,
    groups: &mut Map<String, Value>,
    datasets: &mut Map<String, Value>,
) {
    let path = format!("{parent}/{}", g.name);
    groups.insert(path.clone(), json!({"attrs": attrs_spec(&g.attrs)}));
    for d in &g.datasets {
        datasets.insert(
            format!("{path}/{}", d.name),
            json!({
                "shape": d.shape,
                "dtype": d.data.type_name(),
                "units": d.units,
                "values": values_spec(&d.data),
                "attrs": attrs_spec(&d.attrs),
            }),
        );
    }
    for sub in &g.groups {
        group_spec(sub, &path, groups, datasets);
    }
}

fn spec(f: &ResultFile) -> Value {
    let (mut groups, mut datasets) = (Map::new(), Map::new());
    for g in &f.groups {
        group_spec(g, "", &mut groups, &mut datasets);
    }
    json!({"attrs": attrs_spec(&f.attrs), "groups": groups, "datasets": datasets})
}

/// A deck-like text of at least `bytes` bytes with non-ASCII characters, newlines and quotes.
fn long_text(bytes: usize) -> String {
    let mut s = String::new();
    let mut i = 0;
    while s.len() < bytes {
        s.push_str(&format!(
            "[layer.{i}]  # demo deck line, \"quoted\", µ = 0.2 cm⁻¹, Δz ≥ 1 mm\n"
        ));
        i += 1;
    }
    s
}

fn demo_file() -> ResultFile {
    let mut f = ResultFile::new();
    f.set_attr("dosemill_version", "0.1.0");
    f.set_attr("git_commit", "0123456789abcdef");
    f.set_attr("seed", u64::MAX);
    f.set_attr("histories", 10_000_000u64);
    f.set_attr("threads", 2u64);
    f.set_attr("wall_time_s", 12.625);
    f.set_attr("start_time", "2026-01-31T12:00:00Z");
    f.set_attr("completion", "partial");
    f.set_attr("deck_text", long_text(50_000));
    f.set_attr("negative", i64::MIN);
    f.set_attr("is_demo", true);
    f.set_attr("not_demo", false);
    f.set_attr("tiny", f64::MIN_POSITIVE / 4.0); // subnormal survives bit for bit
    f.set_attr("list", vec![1.0, -0.0, 1e-300]);
    f.set_attr("ilist", AttrValue::I64s(vec![-3, 0, 7]));

    let mut grid = Group::with_kind("grid", "dose_grid");
    let (ni, nj, nk) = (3usize, 4usize, 5usize);
    let vals: Vec<f64> = (0..ni * nj * nk)
        .map(|n| n as f64 * 0.1 + 1.0 / 3.0)
        .collect();
    grid.add_dataset(Dataset::f64_nd("dose", &[ni, nj, nk], vals, "Gy"));
    for (axis, n) in [ni, nj, nk].into_iter().enumerate() {
        let edges: Vec<f64> = (0..=n).map(|e| e as f64 * 0.25).collect();
        grid.attach_axis("dose", axis, &format!("edges{axis}_cm"), &edges, "cm")
            .unwrap();
    }
    let mut nested = Group::new("materials");
    nested.set_attr("count", 2u64);
    let mut deeper = Group::with_kind("deeper", "misc");
    deeper.add_dataset(Dataset::new(
        "index",
        &[ni, nj, nk],
        DataBuf::U16(vec![65535; ni * nj * nk]),
        "1",
    ));
    deeper.add_dataset(Dataset::new(
        "mask",
        &[2, 2],
        DataBuf::U8(vec![0, 1, 254, 255]),
        "1",
    ));
    deeper.add_dataset(Dataset::new(
        "counts",
        &[3],
        DataBuf::U64(vec![0, 1 << 53, u64::MAX]),
        "1",
    ));
    deeper.add_dataset(Dataset::new(
        "u32",
        &[2],
        DataBuf::U32(vec![u32::MAX, 7]),
        "1",
    ));
    deeper.add_dataset(Dataset::new(
        "signed",
        &[2],
        DataBuf::I64(vec![i64::MIN, i64::MAX]),
        "1",
    ));
    deeper.add_dataset(Dataset::new(
        "i32",
        &[2],
        DataBuf::I32(vec![i32::MIN, -1]),
        "1",
    ));
    deeper.add_dataset(
        Dataset::new("single", &[2, 1], DataBuf::F32(vec![0.1, f32::MAX]), "keV")
            .with_attr("note", "f32"),
    );
    deeper.add_dataset(Dataset::new("scalar", &[], DataBuf::F64(vec![-1.5]), "s"));
    // A grid whose values are produced while the file is written (filled in place after the
    // builder reserved its storage): large enough to take that path.
    let (pi, pj, pk) = (64, 32, 48);
    deeper.add_dataset(Dataset::new(
        "produced",
        &[pi, pj, pk],
        DataBuf::Produced(dosemill_engine::output::Produced::new(pi * pj * pk, |start, out| {
            for (k, o) in out.iter_mut().enumerate() {
                *o = ((start + k) as f64).ln_1p() / 7.0 - 1.0;
            }
        })),
        "Gy",
    ));
    deeper.add_dataset(Dataset::new("empty", &[0], DataBuf::F64(vec![]), "Gy"));
    deeper.add_dataset(Dataset::text("resolved_deck", &long_text(100_000)));
    deeper.add_dataset(Dataset::new(
        "labels",
        &[3],
        DataBuf::Str(vec!["water".into(), "".into(), "bone — cortical".into()]),
        "1",
    ));
    nested.add_group(deeper);
    grid.add_group(nested);
    f.add_group(grid);
    f
}

#[test]
fn h5py_reads_every_type_exactly() {
    if !h5py_available() {
        return;
    }
    let dir = scratch("all");
    let h5 = dir.join("demo.h5");
    let file = demo_file();
    output::write_atomic(&h5, &file, false).unwrap();
    let spec_path = dir.join("spec.json");
    std::fs::write(&spec_path, serde_json::to_vec_pretty(&spec(&file)).unwrap()).unwrap();
    let out = run_checker(&h5, &spec_path);
    assert!(out.0, "h5py check failed:\n{}", out.1);
    assert!(out.1.contains("0 mismatches"), "{}", out.1);

    // The module's own reader agrees too.
    let back = output::read(&h5).unwrap();
    assert!(back.bits_equal(&file.canonical()));
    let _ = std::fs::remove_dir_all(&dir);
}

/// The checker must be able to fail: a spec that disagrees with the file in one value is caught.
#[test]
fn h5py_checker_detects_a_wrong_value() {
    if !h5py_available() {
        return;
    }
    let dir = scratch("neg");
    let h5 = dir.join("demo.h5");
    let file = demo_file();
    output::write_atomic(&h5, &file, false).unwrap();
    let mut s = spec(&file);
    s["datasets"]["/grid/dose"]["values"][7] = json!((2.0f64).to_bits());
    s["attrs"]["deck_text"]["value"] = json!(long_text(50_000) + "x");
    s["datasets"]["/grid/materials/deeper/mask"]["units"] = json!("Gy");
    let spec_path = dir.join("spec.json");
    std::fs::write(&spec_path, serde_json::to_vec(&s).unwrap()).unwrap();
    let (ok, text) = run_checker(&h5, &spec_path);
    assert!(!ok, "checker accepted a wrong spec:\n{text}");
    assert!(text.contains("3 mismatches"), "{text}");
    let _ = std::fs::remove_dir_all(&dir);
}

fn run_checker(h5: &Path, spec: &Path) -> (bool, String) {
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/py/check_result.py");
    let o = Command::new("python3")
        .arg(&script)
        .arg(h5)
        .arg(spec)
        .output()
        .unwrap();
    let text = format!(
        "{}{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    );
    (o.status.success(), text)
}
