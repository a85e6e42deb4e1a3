//! Voxel file round trips and input errors.
//!
//! The HDF5 cross-check reads our file with h5py (the reference Python binding of the HDF5
//! library, installed by `.ci/requirements.txt`), so the layout is checked against a reader
//! that is not ours.

use dosemill_geometry::voxel_file::{
    parse_voxel_header, read_hdf5_voxels, read_raw_voxels, write_hdf5_voxels, write_raw_voxels,
    VoxelFileError,
};
use dosemill_geometry::{GeometryError, GridLayout, MaterialIndices, Vec3, VoxelGrid};
use std::path::{Path, PathBuf};

fn scratch(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("dosemill-geometry-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn demo_grid(wide: bool, with_density: bool) -> VoxelGrid {
    // Demo data: an invented 5×4×3 grid.
    let layout = GridLayout {
        dims: [5, 4, 3],
        voxel_size_cm: Vec3::new(0.2, 0.25, 0.5),
        origin_cm: Vec3::new(-0.5, -0.5, 1.0),
    };
    let n = 60;
    let m: Vec<u16> = (0..n).map(|i| ((i * 7) % 3) as u16).collect();
    let mats = if wide {
        MaterialIndices::U16(m)
    } else {
        MaterialIndices::U8(m.iter().map(|&x| x as u8).collect())
    };
    let dens = with_density.then(|| (0..n).map(|i| 0.9 + 0.01 * i as f32).collect());
    VoxelGrid::new(
        layout,
        mats,
        dens,
        vec!["air".into(), "soft tissue".into(), "bone".into()],
    )
    .unwrap()
}

#[test]
fn raw_round_trip_all_variants() {
    for (k, (wide, dens)) in [(false, false), (false, true), (true, false), (true, true)]
        .into_iter()
        .enumerate()
    {
        let d = scratch(&format!("raw{k}"));
        let g = demo_grid(wide, dens);
        let h = d.join("demo.toml");
        write_raw_voxels(&g, &h, false).unwrap();
        let back = read_raw_voxels(&h).unwrap();
        assert_eq!(back, g, "variant wide={wide} density={dens}");
        // Bytes per voxel on disk: 1 or 2 for the index, 4 for the density.
        let len = std::fs::metadata(d.join("demo.index.raw")).unwrap().len();
        assert_eq!(len, 60 * if wide { 2 } else { 1 });
        // Never overwrite silently.
        let e = write_raw_voxels(&g, &h, false).unwrap_err();
        assert!(matches!(e, VoxelFileError::Exists { .. }), "{e}");
        write_raw_voxels(&g, &h, true).unwrap();
    }
}

#[test]
fn raw_size_mismatch_names_both_numbers() {
    let d = scratch("mismatch");
    let g = demo_grid(true, true);
    let h = d.join("demo.toml");
    write_raw_voxels(&g, &h, false).unwrap();
    // Truncate the index file by one byte.
    let idx = d.join("demo.index.raw");
    let bytes = std::fs::read(&idx).unwrap();
    std::fs::write(&idx, &bytes[..bytes.len() - 1]).unwrap();
    let e = read_raw_voxels(&h).unwrap_err();
    match &e {
        VoxelFileError::SizeMismatch {
            expected_bytes,
            actual_bytes,
            ..
        } => {
            assert_eq!((*expected_bytes, *actual_bytes), (120, 119));
        }
        other => panic!("wrong error {other}"),
    }
    let msg = e.to_string();
    assert!(
        msg.contains("120") && msg.contains("119") && msg.contains("demo.index.raw"),
        "{msg}"
    );
}

#[test]
fn header_errors_name_the_key_and_line() {
    let p = Path::new("phantom.toml");
    let text = "layout = 1\ndims = [2, 2, 2]\nvoxel_size_cm = [1.0, 1.0, 1.0]\norigin_cm = [0.0, 0.0, 0.0]\nindex_typ = \"u8\"\nindex_file = \"a.raw\"\nmaterials = [\"water\"]\n";
    let e = parse_voxel_header(text, p).unwrap_err().to_string();
    assert!(
        e.contains("phantom.toml") && e.contains("index_typ") && e.contains("line 5"),
        "{e}"
    );
    let text2 = text
        .replace("index_typ", "index_type")
        .replace("layout = 1", "layout = 2");
    let e = parse_voxel_header(&text2, p).unwrap_err().to_string();
    assert!(e.contains("layout 2"), "{e}");
    let text3 = text.replace("index_typ = \"u8\"", "index_type = \"u32\"");
    let e = parse_voxel_header(&text3, p).unwrap_err().to_string();
    assert!(e.contains("u32") && e.contains("line 5"), "{e}");
}

#[test]
fn raw_bad_contents_name_the_voxel() {
    let d = scratch("contents");
    let g = demo_grid(false, true);
    let h = d.join("demo.toml");
    write_raw_voxels(&g, &h, false).unwrap();
    let layout = *g.layout();
    // Material 3 at voxel (4, 1, 2) with a 3-entry table.
    let idx = d.join("demo.index.raw");
    let mut bytes = std::fs::read(&idx).unwrap();
    let first = layout.index([4, 1, 2]);
    bytes[first] = 3;
    std::fs::write(&idx, &bytes).unwrap();
    let e = read_raw_voxels(&h).unwrap_err();
    match &e {
        VoxelFileError::Grid { source, path } => {
            assert_eq!(
                **source,
                GeometryError::MaterialOutOfRange {
                    ix: 4,
                    iy: 1,
                    iz: 2,
                    value: 3,
                    count: 3
                }
            );
            assert!(path.ends_with("demo.index.raw"));
        }
        other => panic!("wrong error {other}"),
    }
    assert!(e.to_string().contains("(4, 1, 2)"));
    // Restore, then put a NaN density at voxel (0, 3, 1).
    std::fs::write(
        &idx,
        std::fs::read(&idx)
            .map(|mut b| {
                b[first] = 0;
                b
            })
            .unwrap(),
    )
    .unwrap();
    let den = d.join("demo.density.raw");
    let mut db = std::fs::read(&den).unwrap();
    let j = layout.index([0, 3, 1]) * 4;
    db[j..j + 4].copy_from_slice(&f32::NAN.to_le_bytes());
    std::fs::write(&den, &db).unwrap();
    let e = read_raw_voxels(&h).unwrap_err();
    match &e {
        VoxelFileError::Grid { source, path } => {
            match **source {
                GeometryError::BadVoxelDensity { ix, iy, iz, value } => {
                    assert_eq!((ix, iy, iz), (0, 3, 1));
                    assert!(value.is_nan());
                }
                ref other => panic!("wrong error {other}"),
            }
            assert!(path.ends_with("demo.density.raw"));
        }
        other => panic!("wrong error {other}"),
    }
}

#[test]
fn hdf5_round_trip_all_variants() {
    for (k, (wide, dens)) in [(false, false), (false, true), (true, false), (true, true)]
        .into_iter()
        .enumerate()
    {
        let d = scratch(&format!("h5_{k}"));
        let g = demo_grid(wide, dens);
        let f = d.join("demo.h5");
        write_hdf5_voxels(&g, &f, false).unwrap();
        assert!(matches!(
            write_hdf5_voxels(&g, &f, false),
            Err(VoxelFileError::Exists { .. })
        ));
        let back = read_hdf5_voxels(&f).unwrap();
        assert_eq!(back, g, "variant wide={wide} density={dens}");
    }
}

#[test]
fn hdf5_out_of_range_material_names_the_voxel() {
    use hdf5_pure::{AttrValue, FileBuilder};
    let d = scratch("h5bad");
    let f = d.join("bad.h5");
    let mut b = FileBuilder::new();
    b.set_attr("voxel_layout", AttrValue::I64(1));
    b.set_attr("voxel_size_cm", AttrValue::F64Array(vec![1.0, 1.0, 1.0]));
    b.set_attr("origin_cm", AttrValue::F64Array(vec![0.0, 0.0, 0.0]));
    b.set_attr(
        "material_names",
        AttrValue::StringArray(vec!["water".into()]),
    );
    // shape [nz=2, ny=1, nx=3]; voxel (2, 0, 1) = flat 5 holds 1.
    b.create_dataset("material_index")
        .with_u8_data(&[0, 0, 0, 0, 0, 1])
        .with_shape(&[2, 1, 3]);
    std::fs::write(&f, b.finish().unwrap()).unwrap();
    let e = read_hdf5_voxels(&f).unwrap_err();
    match &e {
        VoxelFileError::Grid { source, .. } => {
            assert_eq!(
                **source,
                GeometryError::MaterialOutOfRange {
                    ix: 2,
                    iy: 0,
                    iz: 1,
                    value: 1,
                    count: 1
                }
            )
        }
        other => panic!("wrong error {other}"),
    }
    // A missing attribute is named.
    let mut b = FileBuilder::new();
    b.set_attr("voxel_layout", AttrValue::I64(1));
    b.create_dataset("material_index")
        .with_u8_data(&[0])
        .with_shape(&[1, 1, 1]);
    std::fs::write(&f, b.finish().unwrap()).unwrap();
    let e = read_hdf5_voxels(&f).unwrap_err().to_string();
    assert!(e.contains("voxel_size_cm"), "{e}");
}

#[test]
fn hdf5_layout_reads_back_in_h5py() {
    let d = scratch("h5py");
    let g = demo_grid(true, true);
    let f = d.join("demo.h5");
    write_hdf5_voxels(&g, &f, false).unwrap();
    // h5py gives datasets in C order [nz, ny, nx]: element [iz, iy, ix] is voxel (ix, iy, iz).
    let script = r#"
import sys, h5py
f = h5py.File(sys.argv[1], 'r')
m = f['material_index']; r = f['density_g_cm3']
names = [n.decode() if isinstance(n, bytes) else str(n) for n in f.attrs['material_names']]
print(m.dtype, m.shape, int(m[2, 1, 4]), '%.6f' % float(r[2, 1, 4]), [float(v) for v in f.attrs['voxel_size_cm']], [float(v) for v in f.attrs['origin_cm']], names, int(f.attrs['voxel_layout']))
"#;
    let out = std::process::Command::new("python3")
        .arg("-c")
        .arg(script)
        .arg(&f)
        .output()
        .expect("python3 runs");
    assert!(
        out.status.success(),
        "h5py failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let i = g.layout().index([4, 1, 2]);
    let expect = format!(
        "uint16 (3, 4, 5) {} {:.6} [0.2, 0.25, 0.5] [-0.5, -0.5, 1.0] ['air', 'soft tissue', 'bone'] 1",
        g.material_indices().get(i),
        g.densities().unwrap()[i]
    );
    assert_eq!(String::from_utf8_lossy(&out.stdout).trim(), expect);
}
