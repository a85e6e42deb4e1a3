//! Peak heap use while building grids, measured with a counting allocator (this test binary
//! only). Loading must not hold the arrays twice: peak ≤ final arrays + staging buffers.

use dosemill_geometry::phantom::{build_phantom, PhantomPart, PhantomSpec, Shape};
use dosemill_geometry::voxel_file::{read_raw_voxels, write_raw_voxels};
use dosemill_geometry::{GridLayout, MaterialIndices, Vec3, VoxelGrid};
use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;

struct Counting;
static CURRENT: AtomicUsize = AtomicUsize::new(0);
static PEAK: AtomicUsize = AtomicUsize::new(0);
/// Tests in this binary measure one at a time.
static SERIAL: Mutex<()> = Mutex::new(());

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, l: Layout) -> *mut u8 {
        let p = unsafe { System.alloc(l) };
        if !p.is_null() {
            let now = CURRENT.fetch_add(l.size(), Ordering::SeqCst) + l.size();
            PEAK.fetch_max(now, Ordering::SeqCst);
        }
        p
    }
    unsafe fn dealloc(&self, p: *mut u8, l: Layout) {
        unsafe { System.dealloc(p, l) };
        CURRENT.fetch_sub(l.size(), Ordering::SeqCst);
    }
}

#[global_allocator]
static A: Counting = Counting;

/// Heap growth at the peak of `f`, above what was in use before it.
fn peak_during<T>(f: impl FnOnce() -> T) -> (T, usize) {
    let base = CURRENT.load(Ordering::SeqCst);
    PEAK.store(base, Ordering::SeqCst);
    let out = f();
    (out, PEAK.load(Ordering::SeqCst) - base)
}

const SLACK: usize = 256 * 1024; // staging buffers (64 KiB each), paths, header text

#[test]
fn raw_load_does_not_double_the_arrays() {
    let _g = SERIAL.lock().unwrap();
    let dims = [96, 96, 64];
    let n = 96 * 96 * 64;
    let layout = GridLayout {
        dims,
        voxel_size_cm: Vec3::new(0.1, 0.1, 0.1),
        origin_cm: Vec3::ZERO,
    };
    let dir = std::env::temp_dir().join(format!("dosemill-geometry-{}-mem", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    for (wide, dens) in [(false, false), (true, false), (false, true), (true, true)] {
        let m: Vec<u16> = (0..n).map(|i| (i % 2) as u16).collect();
        let mats = if wide {
            MaterialIndices::U16(m)
        } else {
            MaterialIndices::U8(m.iter().map(|&x| x as u8).collect())
        };
        let g = VoxelGrid::new(
            layout,
            mats,
            dens.then(|| vec![1.0; n]),
            vec!["a".into(), "b".into()],
        )
        .unwrap();
        let h = dir.join(format!("m{wide}{dens}.toml"));
        write_raw_voxels(&g, &h, true).unwrap();
        let final_bytes = g.heap_bytes();
        drop(g);
        let (back, peak) = peak_during(|| read_raw_voxels(&h).unwrap());
        assert_eq!(back.heap_bytes(), final_bytes);
        assert!(
            peak <= final_bytes + SLACK,
            "wide={wide} density={dens}: peak {peak} B for {final_bytes} B of arrays"
        );
    }
}

#[test]
fn phantom_build_does_not_double_the_arrays() {
    let _g = SERIAL.lock().unwrap();
    let spec = PhantomSpec {
        dims: [64, 64, 64],
        voxel_size_cm: [0.1; 3],
        origin_cm: [-3.2; 3],
        materials: vec!["air".into(), "water".into()],
        background_material: 0,
        parts: vec![PhantomPart {
            shape: Shape::Sphere {
                center_cm: [0.0; 3],
                radius_cm: 2.0,
            },
            material: 1,
            region: None,
        }],
        supersample: 2,
    };
    let (ph, peak) = peak_during(|| build_phantom(&spec).unwrap());
    let arrays = ph.grid.heap_bytes() + ph.labels.len() * 2;
    assert!(
        peak <= arrays + SLACK,
        "peak {peak} B for {arrays} B of arrays"
    );
}
