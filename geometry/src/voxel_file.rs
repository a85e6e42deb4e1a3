//! Reading and writing voxel grids: raw little-endian arrays described by a TOML header, and
//! HDF5 files in a layout of our own. See `geometry/README.md` for both layouts.
//!
//! Memory: raw arrays are read straight into their final vectors (u8 directly; u16 and f32
//! through a 64 KiB staging buffer), so loading a raw grid needs its final size plus 64 KiB,
//! not twice it. HDF5 files are opened for on-demand reading (not buffered whole) and each
//! dataset is decoded into its vector by the HDF5 library. Writing HDF5 copies the arrays into
//! the library's file builder (one transient copy) and encodes straight to the file.

use crate::voxel::{GridLayout, MaterialIndices, VoxelGrid};
use crate::{GeometryError, Vec3};
use serde::{Deserialize, Serialize};
use std::fs;
use std::io::{BufReader, BufWriter, Read, Write};
use std::path::{Path, PathBuf};

/// The header layout version written and understood by this crate.
pub const VOXEL_HEADER_LAYOUT: i64 = 1;

/// Errors reading or writing voxel files.
#[derive(Debug, thiserror::Error)]
pub enum VoxelFileError {
    /// The operating system refused a read or write.
    #[error("{}: {source}", path.display())]
    Io {
        /// The file concerned.
        path: PathBuf,
        /// The underlying error.
        source: std::io::Error,
    },
    /// The TOML header does not parse or has a wrong or unknown key (the message names line,
    /// column and key).
    #[error("{}: {message}", path.display())]
    Header {
        /// The header file.
        path: PathBuf,
        /// What is wrong, where, and how to fix it.
        message: String,
    },
    /// A data file whose size does not match the header.
    #[error(
        "{}: {what} file has {actual_bytes} bytes, but the header's dims {dims:?} with {bytes_per_voxel} byte(s) per voxel need {expected_bytes} bytes; check `dims`, `index_type` and the file",
        path.display()
    )]
    SizeMismatch {
        /// The data file.
        path: PathBuf,
        /// Which array (material index or density).
        what: &'static str,
        /// Bytes the header implies.
        expected_bytes: u64,
        /// Bytes found.
        actual_bytes: u64,
        /// The dimensions in the header.
        dims: [usize; 3],
        /// Bytes per voxel.
        bytes_per_voxel: usize,
    },
    /// The data describe an invalid grid (out-of-range material, bad density, …).
    #[error("{}: {source}", path.display())]
    Grid {
        /// The file read.
        path: PathBuf,
        /// What is wrong with the grid.
        source: Box<GeometryError>,
    },
    /// An HDF5 file that cannot be read or written, or lacks an item of the layout.
    #[error("{}: {message}", path.display())]
    Hdf5 {
        /// The HDF5 file.
        path: PathBuf,
        /// What is wrong.
        message: String,
    },
    /// The target of a write exists and overwriting was not asked for.
    #[error("{} exists; remove it or choose another name (files are never overwritten silently)", path.display())]
    Exists {
        /// The existing file.
        path: PathBuf,
    },
}

fn io_err(path: &Path) -> impl FnOnce(std::io::Error) -> VoxelFileError + '_ {
    move |source| VoxelFileError::Io {
        path: path.to_path_buf(),
        source,
    }
}

/// The integer type of the material-index array.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum IndexType {
    /// One unsigned byte per voxel.
    U8,
    /// Two bytes per voxel, little-endian unsigned.
    U16,
}

/// The TOML header of a raw voxel file (layout 1). Unknown keys are errors.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct VoxelHeader {
    /// Layout version; must be 1.
    pub layout: i64,
    /// Voxels along x, y, z.
    pub dims: [usize; 3],
    /// Voxel edge lengths (cm).
    pub voxel_size_cm: [f64; 3],
    /// Low corner of voxel (0,0,0) (cm).
    pub origin_cm: [f64; 3],
    /// Integer type of the material-index file.
    pub index_type: IndexType,
    /// Material-index file, relative to the header's folder; x fastest, then y, then z.
    pub index_file: String,
    /// Optional density file (f32 little-endian, g/cm³), same order.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub density_file: Option<String>,
    /// Material names: index `i` in the index file means `materials[i]`.
    pub materials: Vec<String>,
}

impl VoxelHeader {
    fn layout_of(&self) -> GridLayout {
        GridLayout {
            dims: self.dims,
            voxel_size_cm: Vec3::new(
                self.voxel_size_cm[0],
                self.voxel_size_cm[1],
                self.voxel_size_cm[2],
            ),
            origin_cm: Vec3::new(self.origin_cm[0], self.origin_cm[1], self.origin_cm[2]),
        }
    }
}

/// Parses a header from TOML text; `path` names the file in errors.
///
/// # Errors
/// [`VoxelFileError::Header`] for bad TOML, a missing, misspelt or unknown key, or a layout
/// other than 1.
pub fn parse_voxel_header(text: &str, path: &Path) -> Result<VoxelHeader, VoxelFileError> {
    let h: VoxelHeader = toml::from_str(text).map_err(|e| VoxelFileError::Header {
        path: path.to_path_buf(),
        message: format!(
            "{}(valid keys: layout, dims, voxel_size_cm, origin_cm, index_type, index_file, density_file, materials)",
            e
        ),
    })?;
    if h.layout != VOXEL_HEADER_LAYOUT {
        return Err(VoxelFileError::Header {
            path: path.to_path_buf(),
            message: format!("key `layout`: layout {} is not understood; this version reads layout {VOXEL_HEADER_LAYOUT}", h.layout),
        });
    }
    Ok(h)
}

fn check_size(
    path: &Path,
    what: &'static str,
    dims: [usize; 3],
    bpv: usize,
) -> Result<usize, VoxelFileError> {
    let n: u64 = dims.iter().map(|&d| d as u64).product();
    let expected = n * bpv as u64;
    let actual = fs::metadata(path).map_err(io_err(path))?.len();
    if actual != expected {
        return Err(VoxelFileError::SizeMismatch {
            path: path.to_path_buf(),
            what,
            expected_bytes: expected,
            actual_bytes: actual,
            dims,
            bytes_per_voxel: bpv,
        });
    }
    Ok(n as usize)
}

/// Reads `n` little-endian values of `W` bytes each into a vector built by `conv`, through a
/// 64 KiB staging buffer.
fn read_le<T: Copy + Default, const W: usize>(
    path: &Path,
    n: usize,
    conv: fn([u8; W]) -> T,
) -> Result<Vec<T>, VoxelFileError> {
    let f = fs::File::open(path).map_err(io_err(path))?;
    let mut r = BufReader::with_capacity(1 << 16, f);
    let mut out = Vec::with_capacity(n);
    let mut buf = vec![0u8; (1 << 16) / W * W];
    let mut left = n;
    while left > 0 {
        let k = left.min(buf.len() / W);
        r.read_exact(&mut buf[..k * W]).map_err(io_err(path))?;
        out.extend(
            buf[..k * W]
                .chunks_exact(W)
                .map(|c| conv(c.try_into().expect("chunk of W bytes"))),
        );
        left -= k;
    }
    Ok(out)
}

/// Reads a raw voxel grid from its TOML header and the data files it names.
///
/// # Errors
/// Unreadable files, a bad header, a data file whose size differs from the header's, or
/// invalid contents (material index out of range, negative or non-finite density), each
/// naming the file concerned.
pub fn read_raw_voxels(header_path: &Path) -> Result<VoxelGrid, VoxelFileError> {
    let text = fs::read_to_string(header_path).map_err(io_err(header_path))?;
    let h = parse_voxel_header(&text, header_path)?;
    let layout = h.layout_of();
    layout.validate().map_err(|source| VoxelFileError::Grid {
        path: header_path.to_path_buf(),
        source: Box::new(source),
    })?;
    let dir = header_path.parent().unwrap_or(Path::new("."));
    let index_path = dir.join(&h.index_file);
    let material = match h.index_type {
        IndexType::U8 => {
            let n = check_size(&index_path, "material-index", h.dims, 1)?;
            let mut v = vec![0u8; n];
            fs::File::open(&index_path)
                .and_then(|mut f| f.read_exact(&mut v))
                .map_err(io_err(&index_path))?;
            MaterialIndices::U8(v)
        }
        IndexType::U16 => {
            let n = check_size(&index_path, "material-index", h.dims, 2)?;
            MaterialIndices::U16(read_le::<u16, 2>(&index_path, n, u16::from_le_bytes)?)
        }
    };
    let (density, grid_path) = match &h.density_file {
        Some(f) => {
            let p = dir.join(f);
            let n = check_size(&p, "density", h.dims, 4)?;
            (Some(read_le::<f32, 4>(&p, n, f32::from_le_bytes)?), p)
        }
        None => (None, index_path.clone()),
    };
    VoxelGrid::new(layout, material, density, h.materials.clone()).map_err(|source| {
        // Name the file the offending value came from.
        let path = match source {
            GeometryError::BadVoxelDensity { .. } => grid_path,
            _ => index_path,
        };
        VoxelFileError::Grid {
            path,
            source: Box::new(source),
        }
    })
}

/// Writes `bytes` to `path` through a temporary file in the same folder and a rename.
fn write_atomic(
    path: &Path,
    overwrite: bool,
    fill: impl FnOnce(&mut dyn Write) -> std::io::Result<()>,
) -> Result<(), VoxelFileError> {
    if !overwrite && path.exists() {
        return Err(VoxelFileError::Exists {
            path: path.to_path_buf(),
        });
    }
    let mut tmp = path.as_os_str().to_owned();
    tmp.push(".partial");
    let tmp = PathBuf::from(tmp);
    let f = fs::File::create(&tmp).map_err(io_err(&tmp))?;
    let mut w = BufWriter::with_capacity(1 << 16, f);
    fill(&mut w).and_then(|_| w.flush()).map_err(io_err(&tmp))?;
    drop(w);
    fs::rename(&tmp, path).map_err(io_err(path))
}

/// Writes `grid` as a TOML header at `header_path` plus data files beside it named
/// `<stem>.index.raw` and (with densities) `<stem>.density.raw`. The index type is the grid's.
/// Each file is written to a temporary name and renamed; an existing file is an error unless
/// `overwrite` is true.
///
/// # Errors
/// An existing target without `overwrite`, or a failed write.
pub fn write_raw_voxels(
    grid: &VoxelGrid,
    header_path: &Path,
    overwrite: bool,
) -> Result<(), VoxelFileError> {
    let stem = header_path
        .file_stem()
        .and_then(|s| s.to_str())
        .unwrap_or("voxels")
        .to_string();
    let dir = header_path.parent().unwrap_or(Path::new("."));
    let index_file = format!("{stem}.index.raw");
    let density_file = grid.densities().map(|_| format!("{stem}.density.raw"));
    let l = grid.layout();
    let header = VoxelHeader {
        layout: VOXEL_HEADER_LAYOUT,
        dims: l.dims,
        voxel_size_cm: [l.voxel_size_cm.x, l.voxel_size_cm.y, l.voxel_size_cm.z],
        origin_cm: [l.origin_cm.x, l.origin_cm.y, l.origin_cm.z],
        index_type: match grid.material_indices() {
            MaterialIndices::U8(_) => IndexType::U8,
            MaterialIndices::U16(_) => IndexType::U16,
        },
        index_file: index_file.clone(),
        density_file: density_file.clone(),
        materials: grid.material_names().to_vec(),
    };
    let text = toml::to_string(&header).map_err(|e| VoxelFileError::Header {
        path: header_path.to_path_buf(),
        message: e.to_string(),
    })?;
    write_atomic(&dir.join(&index_file), overwrite, |w| {
        match grid.material_indices() {
            MaterialIndices::U8(v) => w.write_all(v),
            MaterialIndices::U16(v) => v.iter().try_for_each(|x| w.write_all(&x.to_le_bytes())),
        }
    })?;
    if let (Some(f), Some(d)) = (&density_file, grid.densities()) {
        write_atomic(&dir.join(f), overwrite, |w| {
            d.iter().try_for_each(|x| w.write_all(&x.to_le_bytes()))
        })?;
    }
    write_atomic(header_path, overwrite, |w| {
        w.write_all(
            b"# Voxel grid header (dosemill layout 1); data are little-endian, x fastest.\n",
        )?;
        w.write_all(text.as_bytes())
    })
}

/// Names of the items of the HDF5 voxel layout (layout 1).
pub mod hdf5_names {
    /// Root attribute: layout version (integer 1).
    pub const LAYOUT: &str = "voxel_layout";
    /// Root attribute: voxel edge lengths (cm), 3 floats x, y, z.
    pub const VOXEL_SIZE: &str = "voxel_size_cm";
    /// Root attribute: low corner of voxel (0,0,0) (cm), 3 floats.
    pub const ORIGIN: &str = "origin_cm";
    /// Root attribute: material names, string array; index `i` means `names[i]`.
    pub const MATERIALS: &str = "material_names";
    /// Dataset: material index per voxel, u8 or u16, shape [nz, ny, nx].
    pub const MATERIAL_INDEX: &str = "material_index";
    /// Optional dataset: density per voxel (g/cm³), f32, shape [nz, ny, nx].
    pub const DENSITY: &str = "density_g_cm3";
}

fn h5_err(path: &Path) -> impl Fn(hdf5_pure::Error) -> VoxelFileError + '_ {
    move |e| VoxelFileError::Hdf5 {
        path: path.to_path_buf(),
        message: e.to_string(),
    }
}

/// Writes `grid` to an HDF5 file at `path` in the layout of [`hdf5_names`] (temporary file,
/// then rename; an existing file is an error unless `overwrite`).
///
/// # Errors
/// An existing target without `overwrite`, or a failed encode or write.
pub fn write_hdf5_voxels(
    grid: &VoxelGrid,
    path: &Path,
    overwrite: bool,
) -> Result<(), VoxelFileError> {
    use hdf5_pure::{AttrValue, FileBuilder};
    let l = grid.layout();
    let shape = [l.dims[2] as u64, l.dims[1] as u64, l.dims[0] as u64];
    let mut b = FileBuilder::new();
    b.set_attr(hdf5_names::LAYOUT, AttrValue::I64(VOXEL_HEADER_LAYOUT));
    b.set_attr(
        hdf5_names::VOXEL_SIZE,
        AttrValue::F64Array(vec![
            l.voxel_size_cm.x,
            l.voxel_size_cm.y,
            l.voxel_size_cm.z,
        ]),
    );
    b.set_attr(
        hdf5_names::ORIGIN,
        AttrValue::F64Array(vec![l.origin_cm.x, l.origin_cm.y, l.origin_cm.z]),
    );
    b.set_attr(
        hdf5_names::MATERIALS,
        AttrValue::StringArray(grid.material_names().to_vec()),
    );
    match grid.material_indices() {
        MaterialIndices::U8(v) => {
            b.create_dataset(hdf5_names::MATERIAL_INDEX)
                .with_u8_data(v)
                .with_shape(&shape);
        }
        MaterialIndices::U16(v) => {
            b.create_dataset(hdf5_names::MATERIAL_INDEX)
                .with_u16_data(v)
                .with_shape(&shape);
        }
    }
    if let Some(d) = grid.densities() {
        b.create_dataset(hdf5_names::DENSITY)
            .with_f32_data(d)
            .with_shape(&shape);
    }
    // Encode straight into the temporary file rather than into a byte vector first.
    write_atomic(path, overwrite, |w| {
        b.finish_to(w)
            .map_err(|e| std::io::Error::other(e.to_string()))
    })
}

/// Reads a voxel grid from an HDF5 file in the layout of [`hdf5_names`]. The file is read
/// on demand (not buffered whole), each dataset straight into its vector.
///
/// # Errors
/// An unreadable file, a missing or mistyped item (named in the message), a dataset shape that
/// is not 3-D or differs between datasets, or invalid contents (naming the voxel).
pub fn read_hdf5_voxels(path: &Path) -> Result<VoxelGrid, VoxelFileError> {
    use hdf5_pure::{AttrValue, DType, File};
    let bad = |message: String| VoxelFileError::Hdf5 {
        path: path.to_path_buf(),
        message,
    };
    let file = File::open_streaming(path).map_err(h5_err(path))?;
    let attrs = file.root().attrs().map_err(h5_err(path))?;
    let get = |name: &str| {
        attrs.get(name).ok_or_else(|| bad(format!("root attribute `{name}` is missing; this reader expects dosemill voxel layout {VOXEL_HEADER_LAYOUT}")))
    };
    let layout_v = match get(hdf5_names::LAYOUT)? {
        AttrValue::I64(v) => *v,
        AttrValue::I32(v) => *v as i64,
        AttrValue::U8(v) => *v as i64,
        other => {
            return Err(bad(format!(
                "root attribute `{}` must be an integer, found {other:?}",
                hdf5_names::LAYOUT
            )))
        }
    };
    if layout_v != VOXEL_HEADER_LAYOUT {
        return Err(bad(format!(
            "layout {layout_v} is not understood; this version reads layout {VOXEL_HEADER_LAYOUT}"
        )));
    }
    let vec3 = |name: &str| -> Result<Vec3, VoxelFileError> {
        match get(name)? {
            AttrValue::F64Array(v) if v.len() == 3 => Ok(Vec3::new(v[0], v[1], v[2])),
            AttrValue::F32Array(v) if v.len() == 3 => {
                Ok(Vec3::new(v[0] as f64, v[1] as f64, v[2] as f64))
            }
            other => Err(bad(format!(
                "root attribute `{name}` must be 3 floats (x, y, z in cm), found {other:?}"
            ))),
        }
    };
    let voxel_size_cm = vec3(hdf5_names::VOXEL_SIZE)?;
    let origin_cm = vec3(hdf5_names::ORIGIN)?;
    let names = match get(hdf5_names::MATERIALS)? {
        AttrValue::StringArray(v) => v
            .iter()
            .map(|s| s.trim_end_matches('\0').to_string())
            .collect(),
        AttrValue::VarLenStringArray(v) => v.clone(),
        AttrValue::String(s) => vec![s.clone()],
        other => {
            return Err(bad(format!(
                "root attribute `{}` must be a string array, found {other:?}",
                hdf5_names::MATERIALS
            )))
        }
    };
    let ds = file
        .dataset(hdf5_names::MATERIAL_INDEX)
        .map_err(|e| bad(format!("dataset `{}`: {e}", hdf5_names::MATERIAL_INDEX)))?;
    let shape = ds.shape().map_err(h5_err(path))?;
    if shape.len() != 3 {
        return Err(bad(format!(
            "dataset `{}` has shape {shape:?}; it must be 3-D [nz, ny, nx]",
            hdf5_names::MATERIAL_INDEX
        )));
    }
    let dims = [shape[2] as usize, shape[1] as usize, shape[0] as usize];
    let material = match ds.dtype().map_err(h5_err(path))? {
        DType::U8 => MaterialIndices::U8(ds.read_u8().map_err(h5_err(path))?),
        DType::U16 => MaterialIndices::U16(ds.read_u16().map_err(h5_err(path))?),
        other => {
            return Err(bad(format!(
                "dataset `{}` has type {other:?}; it must be u8 or u16",
                hdf5_names::MATERIAL_INDEX
            )))
        }
    };
    let density = if file
        .root()
        .datasets()
        .map_err(h5_err(path))?
        .iter()
        .any(|n| n == hdf5_names::DENSITY)
    {
        let dd = file.dataset(hdf5_names::DENSITY).map_err(h5_err(path))?;
        let dshape = dd.shape().map_err(h5_err(path))?;
        if dshape != shape {
            return Err(bad(format!(
                "dataset `{}` has shape {dshape:?} but `{}` has {shape:?}; they must match",
                hdf5_names::DENSITY,
                hdf5_names::MATERIAL_INDEX
            )));
        }
        match dd.dtype().map_err(h5_err(path))? {
            DType::F32 => Some(dd.read_f32().map_err(h5_err(path))?),
            other => {
                return Err(bad(format!(
                    "dataset `{}` has type {other:?}; it must be f32",
                    hdf5_names::DENSITY
                )))
            }
        }
    } else {
        None
    };
    let layout = GridLayout {
        dims,
        voxel_size_cm,
        origin_cm,
    };
    VoxelGrid::new(layout, material, density, names).map_err(|source| VoxelFileError::Grid {
        path: path.to_path_buf(),
        source: Box::new(source),
    })
}
