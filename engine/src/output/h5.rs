//! HDF5 encoding of the result tree (the only place that uses `hdf5-pure`), atomic writing and
//! reading back.

use std::io::{self, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

use hdf5_pure as h5;

use super::model::{AttrValue, DataBuf, Dataset, Group, ResultFile};
use super::OutputError;

/// Environment variable for fault injection in tests: when set to a byte count `N`, every
/// result-file write fails with "no space left on device" after `N` bytes reached the
/// temporary file, exactly as a full disk would. Unset (the normal case) it does nothing.
pub const FAULT_ENV_VAR: &str = "DOSEMILL_FAULT_DISK_FULL_AFTER_BYTES";

/// How [`write_atomic_with`] writes.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct WriteOptions {
    /// Replace an existing destination file (the CLI's `--force`).
    pub overwrite: bool,
    /// Fault injection: fail as a full disk after this many bytes. `None` in normal use.
    pub fail_after_bytes: Option<u64>,
}

impl WriteOptions {
    /// Options with `overwrite`, and the fault injection of [`FAULT_ENV_VAR`] if it is set.
    pub fn from_env(overwrite: bool) -> Self {
        let fail_after_bytes = std::env::var(FAULT_ENV_VAR)
            .ok()
            .and_then(|v| v.trim().parse().ok());
        WriteOptions {
            overwrite,
            fail_after_bytes,
        }
    }
}

/// Write `file` to `path` atomically: serialise into a temporary file in the same folder,
/// fsync it, then rename it to `path` (and fsync the folder).
///
/// An existing `path` is refused with [`OutputError::Exists`] unless `overwrite`. On any error
/// the temporary file is removed and whatever was at `path` before is left as it was.
/// Honours the fault-injection variable [`FAULT_ENV_VAR`].
pub fn write_atomic(
    path: impl AsRef<Path>,
    file: &ResultFile,
    overwrite: bool,
) -> Result<(), OutputError> {
    write_atomic_with(path, file, &WriteOptions::from_env(overwrite))
}

/// [`write_atomic`] with explicit options (no environment lookup).
pub fn write_atomic_with(
    path: impl AsRef<Path>,
    file: &ResultFile,
    options: &WriteOptions,
) -> Result<(), OutputError> {
    let path = path.as_ref();
    file.validate().map_err(|source| OutputError::Invalid {
        path: path.to_owned(),
        source,
    })?;
    if !options.overwrite && path.exists() {
        return Err(OutputError::Exists {
            path: path.to_owned(),
        });
    }
    let mut produced = Vec::new();
    let builder = build(file, &mut produced);
    commit_atomic(path, options, |sink, tmp_path| {
        let io_err = |source| OutputError::Io {
            path: tmp_path.to_owned(),
            action: "cannot write temporary result file",
            source,
        };
        match builder.finish_to(&mut *sink) {
            Ok(()) => {}
            Err(h5::Error::Io(source)) => return Err(io_err(source)),
            Err(e) => return Err(hdf5_err(path, "/".into(), e)),
        }
        if !produced.is_empty() {
            sink.flush().map_err(io_err)?;
            fill_produced(path, tmp_path, sink, &produced)?;
        }
        Ok(())
    })
}

/// Writes the elements of produced datasets into the storage the builder reserved for them.
///
/// The builder wrote each produced dataset as a contiguous block of zeros taken from a fresh
/// zeroed allocation, whose pages the operating system maps lazily, so they never became
/// resident. Here the finished temporary file is opened for its metadata only, each dataset's
/// storage address is looked up, and the values are written there block by block, so peak
/// memory stays one block whatever the size of the grid.
fn fill_produced(
    path: &Path,
    tmp_path: &Path,
    sink: &mut LimitedWriter<&std::fs::File>,
    produced: &[(String, super::Produced)],
) -> Result<(), OutputError> {
    use std::io::{Seek, SeekFrom};
    let io_err = |source| OutputError::Io {
        path: tmp_path.to_owned(),
        action: "cannot write temporary result file",
        source,
    };
    let file = h5::File::open_streaming(tmp_path).map_err(|e| hdf5_err(path, "/".into(), e))?;
    for (object, data) in produced {
        let ds = file.dataset(object.trim_start_matches('/')).map_err(|e| hdf5_err(path, object.clone(), e))?;
        let layout = ds.layout().map_err(|e| hdf5_err(path, object.clone(), e))?;
        let address = match layout {
            h5::Layout::Contiguous { address: Some(a), size } if size == 8 * data.len() as u64 => a,
            other => {
                return Err(OutputError::Unsupported {
                    path: path.to_owned(),
                    object: object.clone(),
                    what: format!("storage of a produced dataset came out as {other:?}, expected {} contiguous bytes", 8 * data.len()),
                })
            }
        };
        sink.inner.seek(SeekFrom::Start(address)).map_err(io_err)?;
        let mut bytes = Vec::with_capacity(8 * super::Produced::BLOCK);
        let mut start = 0;
        while start < data.len() {
            let k = super::Produced::BLOCK.min(data.len() - start);
            bytes.clear();
            data.le_bytes(start, k, &mut bytes);
            sink.write_all(&bytes).map_err(io_err)?;
            start += k;
        }
    }
    sink.inner.seek(SeekFrom::End(0)).map_err(io_err)?;
    Ok(())
}

/// Write `bytes` to `path` with the same atomic, no-silent-overwrite procedure as
/// [`write_atomic`] (temporary file, fsync, rename). Used for plots and other side files.
/// Honours the fault-injection variable [`FAULT_ENV_VAR`].
pub fn write_bytes_atomic(
    path: impl AsRef<Path>,
    bytes: &[u8],
    overwrite: bool,
) -> Result<(), OutputError> {
    write_stream_atomic(path, overwrite, |w| w.write_all(bytes))
}

/// Write a file produced by `fill` to `path` with the same atomic, no-silent-overwrite
/// procedure as [`write_atomic`], streaming: nothing needs to be assembled in memory first.
/// Honours the fault-injection variable [`FAULT_ENV_VAR`].
pub fn write_stream_atomic(
    path: impl AsRef<Path>,
    overwrite: bool,
    fill: impl FnOnce(&mut dyn Write) -> io::Result<()>,
) -> Result<(), OutputError> {
    let path = path.as_ref();
    let options = WriteOptions::from_env(overwrite);
    if !options.overwrite && path.exists() {
        return Err(OutputError::Exists {
            path: path.to_owned(),
        });
    }
    commit_atomic(path, &options, |sink, tmp_path| {
        let mut w = io::BufWriter::with_capacity(1 << 20, sink);
        fill(&mut w)
            .and_then(|()| w.flush())
            .map_err(|source| OutputError::Io {
                path: tmp_path.to_owned(),
                action: "cannot write temporary file",
                source,
            })
    })
}

/// Create a temporary file beside `path`, let `fill` write it, fsync, and move it into place
/// (refusing an existing `path` unless `options.overwrite`). The temporary file is removed on
/// every error path, so `path` is either the old file or the complete new one.
fn commit_atomic<F>(path: &Path, options: &WriteOptions, fill: F) -> Result<(), OutputError>
where
    F: FnOnce(&mut LimitedWriter<&std::fs::File>, &Path) -> Result<(), OutputError>,
{
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_owned(),
        _ => PathBuf::from("."),
    };
    let (tmp_path, tmp) = create_temp(&dir, path)?;
    let mut guard = TempGuard {
        path: tmp_path.clone(),
        armed: true,
    };

    let mut sink = LimitedWriter {
        inner: &tmp,
        written: 0,
        limit: options.fail_after_bytes,
    };
    fill(&mut sink, &tmp_path)?;
    sink.flush().map_err(|source| OutputError::Io {
        path: tmp_path.clone(),
        action: "cannot write temporary file",
        source,
    })?;
    tmp.sync_all().map_err(|source| OutputError::Io {
        path: tmp_path.clone(),
        action: "cannot flush temporary file to disk",
        source,
    })?;
    drop(tmp);

    let move_into_place = || {
        std::fs::rename(&tmp_path, path).map_err(|source| OutputError::Io {
            path: path.to_owned(),
            action: "cannot move the finished file into place",
            source,
        })
    };
    if options.overwrite {
        move_into_place()?;
    } else {
        // A hard link fails if the destination appeared meanwhile, so nothing is replaced
        // even in a race; fall back to a checked rename where links are unsupported.
        match std::fs::hard_link(&tmp_path, path) {
            Ok(()) => {
                let _ = std::fs::remove_file(&tmp_path);
            }
            Err(e) if e.kind() == io::ErrorKind::AlreadyExists => {
                return Err(OutputError::Exists {
                    path: path.to_owned(),
                });
            }
            Err(_) => {
                if path.exists() {
                    return Err(OutputError::Exists {
                        path: path.to_owned(),
                    });
                }
                move_into_place()?;
            }
        }
    }
    guard.armed = false;
    sync_dir(&dir);
    Ok(())
}

/// Read a result file into the tree. Attributes, groups and datasets come back sorted by name.
///
/// The file is read lazily: metadata and small datasets at once, and a contiguous
/// little-endian float64 dataset of at least [`LAZY_MIN_ELEMENTS`] elements as a
/// [`DataBuf::Produced`] that reads the elements it is asked for from the file (so a report
/// of a 512³ dose grid holds one slice, or one block of 65 536 values, not the grid). Such a
/// dataset keeps the file open; replacing the file by rename leaves the data readable.
pub fn read(path: impl AsRef<Path>) -> Result<ResultFile, OutputError> {
    let path = path.as_ref();
    let handle = std::fs::File::open(path).map_err(|source| OutputError::Io {
        path: path.to_owned(),
        action: "cannot read result file",
        source,
    })?;
    let file_len = handle.metadata().map(|m| m.len()).unwrap_or(0);
    let file = h5::File::open_streaming(path).map_err(|e| hdf5_err(path, "/".into(), e))?;
    let lazy = Lazy { handle: std::sync::Arc::new(handle), file_len };
    let root = file.root();
    let attrs = read_attrs(
        path,
        "/",
        root.attrs().map_err(|e| hdf5_err(path, "/".into(), e))?,
    )?;
    if let Some(d) = sorted(root.datasets().map_err(|e| hdf5_err(path, "/".into(), e))?).first() {
        return Err(OutputError::Unsupported {
            path: path.to_owned(),
            object: format!("/{d}"),
            what: "dataset directly under the root; result files keep datasets in groups".into(),
        });
    }
    let mut groups = Vec::new();
    for name in sorted(root.groups().map_err(|e| hdf5_err(path, "/".into(), e))?) {
        groups.push(read_group(path, &file, &lazy, &name)?);
    }
    Ok(ResultFile { attrs, groups })
}

// ---------------------------------------------------------------------------------------------
// Writing

/// Produced datasets smaller than this are simply materialised (and may be stored compactly).
const PRODUCED_MIN_ELEMENTS: usize = 1 << 16;

/// The builder for `file`; produced datasets are staged as zeros and listed in `produced` by
/// object path, to be filled by [`fill_produced`].
fn build(file: &ResultFile, produced: &mut Vec<(String, super::Produced)>) -> h5::FileBuilder {
    let mut b = h5::FileBuilder::new();
    for (name, value) in &file.attrs {
        b.set_attr(name, to_h5_attr(value));
    }
    for g in &file.groups {
        let mut gb = b.create_group(&g.name);
        fill_group(&mut gb, g, &format!("/{}", g.name), produced);
        b.add_group(gb.finish());
    }
    b
}

fn fill_group(gb: &mut h5::GroupBuilder, g: &Group, at: &str, produced: &mut Vec<(String, super::Produced)>) {
    for (name, value) in &g.attrs {
        gb.set_attr(name, to_h5_attr(value));
    }
    for d in &g.datasets {
        let db = gb.create_dataset(&d.name);
        if let DataBuf::Produced(p) = &d.data {
            if p.len() >= PRODUCED_MIN_ELEMENTS {
                produced.push((format!("{at}/{}", d.name), p.clone()));
            }
        }
        write_dataset(db, d);
    }
    for sub in &g.groups {
        let mut sb = gb.create_group(&sub.name);
        fill_group(&mut sb, sub, &format!("{at}/{}", sub.name), produced);
        gb.add_group(sb.finish());
    }
}

fn write_dataset(db: &mut h5::DatasetBuilder, d: &Dataset) {
    match &d.data {
        // A zeroed allocation: its pages stay unmapped until written, and the builder only
        // reads them (see `fill_produced`).
        DataBuf::Produced(p) if p.len() >= PRODUCED_MIN_ELEMENTS => {
            let t = if p.is_u64() { h5::make_u64_type() } else { h5::make_f64_type() };
            db.with_raw_data(t, vec![0u8; 8 * p.len()], p.len() as u64)
        }
        DataBuf::Produced(p) => match p.to_u64_vec() {
            Some(v) => db.with_u64_data(&v),
            None => db.with_f64_data(&p.to_vec()),
        },
        DataBuf::F64(v) => db.with_f64_data(v),
        DataBuf::F32(v) => db.with_f32_data(v),
        DataBuf::I64(v) => db.with_i64_data(v),
        DataBuf::I32(v) => db.with_i32_data(v),
        DataBuf::U64(v) => db.with_u64_data(v),
        DataBuf::U32(v) => db.with_u32_data(v),
        DataBuf::U16(v) => db.with_u16_data(v),
        DataBuf::U8(v) => db.with_u8_data(v),
        DataBuf::Str(v) => {
            let refs: Vec<&str> = v.iter().map(String::as_str).collect();
            db.with_vlen_strings(&refs)
        }
    };
    let shape: Vec<u64> = d.shape.iter().map(|&n| n as u64).collect();
    db.with_shape(&shape);
    db.set_attr("units", h5::AttrValue::VarLenString(d.units.clone()));
    for (name, value) in &d.attrs {
        db.set_attr(name, to_h5_attr(value));
    }
}

fn to_h5_attr(value: &AttrValue) -> h5::AttrValue {
    match value {
        AttrValue::Str(s) => h5::AttrValue::VarLenString(s.clone()),
        AttrValue::F64(x) => h5::AttrValue::F64(*x),
        AttrValue::I64(x) => h5::AttrValue::I64(*x),
        AttrValue::U64(x) => h5::AttrValue::U64(*x),
        AttrValue::F64s(v) => h5::AttrValue::F64Array(v.clone()),
        AttrValue::I64s(v) => h5::AttrValue::I64Array(v.clone()),
        AttrValue::Bool(b) => h5::AttrValue::U8(u8::from(*b)),
    }
}

static TEMP_COUNTER: AtomicU64 = AtomicU64::new(0);

fn create_temp(dir: &Path, dest: &Path) -> Result<(PathBuf, std::fs::File), OutputError> {
    let stem = dest
        .file_name()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "result".into());
    loop {
        let n = TEMP_COUNTER.fetch_add(1, Ordering::Relaxed);
        let tmp = dir.join(format!(".{stem}.partial-{}-{n}", std::process::id()));
        match std::fs::OpenOptions::new().write(true).create_new(true).open(&tmp) {
            Ok(f) => return Ok((tmp, f)),
            Err(e) if e.kind() == io::ErrorKind::AlreadyExists => continue,
            Err(source) => {
                return Err(OutputError::Io {
                    path: dest.to_owned(),
                    action: "cannot create a temporary file in the destination folder (does the folder exist and is it writable?)",
                    source,
                })
            }
        }
    }
}

/// Removes the temporary file unless disarmed after a successful rename.
struct TempGuard {
    path: PathBuf,
    armed: bool,
}

impl Drop for TempGuard {
    fn drop(&mut self) {
        if self.armed {
            let _ = std::fs::remove_file(&self.path);
        }
    }
}

/// A writer that fails like a full disk after `limit` bytes (no limit in normal use).
struct LimitedWriter<W> {
    inner: W,
    written: u64,
    limit: Option<u64>,
}

impl<W: Write> Write for LimitedWriter<W> {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        let allowed = match self.limit {
            None => buf.len(),
            Some(limit) => {
                let left = limit.saturating_sub(self.written);
                if left == 0 && !buf.is_empty() {
                    return Err(io::Error::new(
                        io::ErrorKind::StorageFull,
                        format!("no space left on device (injected by {FAULT_ENV_VAR})"),
                    ));
                }
                buf.len().min(usize::try_from(left).unwrap_or(usize::MAX))
            }
        };
        let n = self.inner.write(&buf[..allowed])?;
        self.written += n as u64;
        Ok(n)
    }

    fn flush(&mut self) -> io::Result<()> {
        self.inner.flush()
    }
}

#[cfg(unix)]
fn sync_dir(dir: &Path) {
    // Makes the rename durable; failure here cannot undo the rename, so it is not reported.
    if let Ok(d) = std::fs::File::open(dir) {
        let _ = d.sync_all();
    }
}

#[cfg(not(unix))]
fn sync_dir(_dir: &Path) {}

// ---------------------------------------------------------------------------------------------
// Reading

fn sorted(mut v: Vec<String>) -> Vec<String> {
    v.sort();
    v
}

fn hdf5_err(path: &Path, object: String, e: h5::Error) -> OutputError {
    OutputError::Hdf5 {
        path: path.to_owned(),
        object,
        message: e.to_string(),
    }
}

/// A lazily read dataset of `n` 8-byte elements (u64 when `unsigned`, else float64):
/// contiguous, little-endian, inside the file; `None` for any other storage (then it is read
/// at once).
fn lazy_words(ds: &h5::Dataset, lazy: &Lazy, n: usize, unsigned: bool) -> Option<super::Produced> {
    let little_endian = match ds.datatype().ok()? {
        h5::Datatype::FloatingPoint { size: 8, byte_order, .. } if !unsigned => byte_order == h5::DatatypeByteOrder::LittleEndian,
        h5::Datatype::FixedPoint { size: 8, byte_order, .. } if unsigned => byte_order == h5::DatatypeByteOrder::LittleEndian,
        _ => false,
    };
    let address = match ds.layout().ok()? {
        h5::Layout::Contiguous { address: Some(a), size } if size == 8 * n as u64 => a,
        _ => return None,
    };
    if !little_endian || address.checked_add(8 * n as u64)? > lazy.file_len {
        return None;
    }
    let handle = std::sync::Arc::clone(&lazy.handle);
    let read = move |start: usize, count: usize| -> Vec<u8> {
        use std::os::unix::fs::FileExt;
        let mut bytes = vec![0u8; 8 * count];
        if let Err(err) = handle.read_exact_at(&mut bytes, address + 8 * start as u64) {
            panic!("result file became unreadable while in use (elements {start}..{}): {err}", start + count);
        }
        bytes
    };
    Some(if unsigned {
        super::Produced::new_u64(n, move |start, out| {
            let bytes = read(start, out.len());
            for (v, b) in out.iter_mut().zip(bytes.chunks_exact(8)) {
                *v = u64::from_le_bytes(b.try_into().expect("8 bytes"));
            }
        })
    } else {
        super::Produced::new(n, move |start, out| {
            let bytes = read(start, out.len());
            for (v, b) in out.iter_mut().zip(bytes.chunks_exact(8)) {
                *v = f64::from_le_bytes(b.try_into().expect("8 bytes"));
            }
        })
    })
}

/// Smallest float64 or u64 dataset read lazily by [`read`] (elements).
pub const LAZY_MIN_ELEMENTS: usize = 1 << 20;

/// The open result file behind lazily read datasets.
struct Lazy {
    handle: std::sync::Arc<std::fs::File>,
    file_len: u64,
}

fn read_group(path: &Path, file: &h5::File, lazy: &Lazy, gpath: &str) -> Result<Group, OutputError> {
    let object = format!("/{gpath}");
    let e = |err| hdf5_err(path, object.clone(), err);
    let g = file.group(gpath).map_err(e)?;
    let attrs = read_attrs(path, &object, g.attrs().map_err(e)?)?;
    let mut datasets = Vec::new();
    for name in sorted(g.datasets().map_err(e)?) {
        datasets.push(read_dataset(path, file, lazy, &format!("{gpath}/{name}"), &name)?);
    }
    let mut groups = Vec::new();
    for name in sorted(g.groups().map_err(e)?) {
        groups.push(read_group(path, file, lazy, &format!("{gpath}/{name}"))?);
    }
    let name = gpath.rsplit('/').next().unwrap_or(gpath).to_owned();
    Ok(Group {
        name,
        attrs,
        datasets,
        groups,
    })
}

fn read_dataset(
    path: &Path,
    file: &h5::File,
    lazy: &Lazy,
    dpath: &str,
    name: &str,
) -> Result<Dataset, OutputError> {
    let object = format!("/{dpath}");
    let e = |err| hdf5_err(path, object.clone(), err);
    let ds = file.dataset(dpath).map_err(e)?;
    let shape: Vec<usize> = ds
        .shape()
        .map_err(e)?
        .into_iter()
        .map(|n| n as usize)
        .collect();
    let n: usize = shape.iter().product();
    let data = match ds.dtype().map_err(e)? {
        h5::DType::F64 if n >= LAZY_MIN_ELEMENTS => match lazy_words(&ds, lazy, n, false) {
            Some(p) => DataBuf::Produced(p),
            None => DataBuf::F64(ds.read_f64().map_err(e)?),
        },
        h5::DType::F64 => DataBuf::F64(ds.read_f64().map_err(e)?),
        h5::DType::F32 => DataBuf::F32(ds.read_f32().map_err(e)?),
        h5::DType::I64 => DataBuf::I64(ds.read_i64().map_err(e)?),
        h5::DType::I32 => DataBuf::I32(ds.read_i32().map_err(e)?),
        h5::DType::U64 if n >= LAZY_MIN_ELEMENTS => match lazy_words(&ds, lazy, n, true) {
            Some(p) => DataBuf::Produced(p),
            None => DataBuf::U64(ds.read_u64().map_err(e)?),
        },
        h5::DType::U64 => DataBuf::U64(ds.read_u64().map_err(e)?),
        h5::DType::U32 => DataBuf::U32(ds.read_u32().map_err(e)?),
        h5::DType::U16 => DataBuf::U16(ds.read_u16().map_err(e)?),
        h5::DType::U8 => DataBuf::U8(ds.read_u8().map_err(e)?),
        h5::DType::String | h5::DType::VariableLengthString => {
            DataBuf::Str(ds.read_string().map_err(e)?)
        }
        other => {
            return Err(OutputError::Unsupported {
                path: path.to_owned(),
                object,
                what: format!("dataset element type {other} is not one a result file uses"),
            })
        }
    };
    let mut attrs = read_attrs(path, &object, ds.attrs().map_err(e)?)?;
    let Some(pos) = attrs.iter().position(|(n, _)| n == "units") else {
        return Err(OutputError::Unsupported {
            path: path.to_owned(),
            object,
            what: "dataset has no `units` attribute".into(),
        });
    };
    let units = match attrs.remove(pos).1 {
        AttrValue::Str(s) => s,
        other => {
            return Err(OutputError::Unsupported {
                path: path.to_owned(),
                object,
                what: format!(
                    "`units` attribute is a {}, expected a string",
                    other.type_name()
                ),
            })
        }
    };
    let dataset = Dataset {
        name: name.to_owned(),
        shape,
        data,
        units,
        attrs,
    };
    if dataset.element_count() != dataset.data.len() {
        return Err(OutputError::Unsupported {
            path: path.to_owned(),
            object,
            what: format!(
                "shape {:?} does not match {} elements read",
                dataset.shape,
                dataset.data.len()
            ),
        });
    }
    Ok(dataset)
}

fn read_attrs(
    path: &Path,
    object: &str,
    map: std::collections::HashMap<String, h5::AttrValue>,
) -> Result<Vec<(String, AttrValue)>, OutputError> {
    let mut out = Vec::with_capacity(map.len());
    for (name, value) in map {
        let Some(v) = from_h5_attr(&value) else {
            return Err(OutputError::Unsupported {
                path: path.to_owned(),
                object: format!("{object} attribute `{name}`"),
                what: format!(
                    "attribute type {} is not one a result file uses",
                    value.type_name()
                ),
            });
        };
        out.push((name, v));
    }
    out.sort_by(|a, b| a.0.cmp(&b.0));
    Ok(out)
}

fn from_h5_attr(value: &h5::AttrValue) -> Option<AttrValue> {
    use h5::AttrValue as H;
    Some(match value {
        H::F64(x) => AttrValue::F64(*x),
        H::F32(x) => AttrValue::F64(f64::from(*x)),
        H::I64(x) => AttrValue::I64(*x),
        H::I32(x) => AttrValue::I64(i64::from(*x)),
        H::I16(x) => AttrValue::I64(i64::from(*x)),
        H::I8(x) => AttrValue::I64(i64::from(*x)),
        H::U64(x) => AttrValue::U64(*x),
        H::U32(x) => AttrValue::U64(u64::from(*x)),
        H::U16(x) => AttrValue::U64(u64::from(*x)),
        H::U8(0) => AttrValue::Bool(false),
        H::U8(1) => AttrValue::Bool(true),
        H::U8(x) => AttrValue::U64(u64::from(*x)),
        H::F64Array(v) => AttrValue::F64s(v.clone()),
        H::F32Array(v) => AttrValue::F64s(v.iter().map(|&x| f64::from(x)).collect()),
        H::I64Array(v) => AttrValue::I64s(v.clone()),
        other => {
            if let Some(s) = other.as_str() {
                AttrValue::Str(s.to_owned())
            } else if let Some(v) = other.to_i64s() {
                AttrValue::I64s(v)
            } else {
                return None;
            }
        }
    })
}

#[cfg(test)]
mod tests;
