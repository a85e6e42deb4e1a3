//! Dose in the voxels of a grid, by two estimators, with per-region sums.
//!
//! - Analog: the energy deposited at interaction points (kerma approximation) in each scoring
//!   voxel.
//! - Track length: for every flight segment, the expected energy transferred and absorbed
//!   locally, ℓ · μen(E) · E in each phantom voxel crossed (the track-length estimate of
//!   fluence × E × μen/ρ), walked exactly through the phantom grid (Amanatides–Woo).
//!
//! Scores are energies (keV per history); the result writer divides by voxel masses.
//! The scoring grid is the phantom grid itself or a coarser grid whose cells are whole blocks of
//! phantom voxels (`block` = phantom voxels per scoring voxel along each axis).
//!
//! Memory: the tally is a shared store (`score/tally.rs`): 16 bytes per scoring voxel for the
//! whole run, whatever the number of worker threads, plus each worker's table of the voxels its
//! current history touched; results stay bitwise independent of the thread count.

use super::{PhotonView, Tally};
use dosemill_geometry::{Region, Vec3, VoxelGrid};
use dosemill_xsdata::material::Material;
use std::sync::Arc;

/// Which estimator a voxel-dose score uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DoseEstimator {
    /// Energy deposited at interaction points.
    Analog,
    /// Track-length estimate of kerma (fluence × E × μen/ρ).
    TrackLength,
}

/// Voxel dose scorer state.
#[derive(Debug, Clone)]
pub struct VoxelDose {
    /// The estimator.
    pub estimator: DoseEstimator,
    /// The phantom grid.
    pub grid: Arc<VoxelGrid>,
    /// Phantom voxels per scoring voxel along x, y, z.
    pub block: [usize; 3],
    /// Scoring grid dimensions.
    pub dims: [usize; 3],
    /// Region label per phantom voxel and the number of regions, if the phantom has labels.
    pub labels: Option<Arc<(Vec<u16>, Vec<String>)>>,
    /// Materials by index (for μen/ρ), as in the problem.
    pub materials: Arc<Vec<Material>>,
    /// Bins: scoring voxels, then one per region (keV per history).
    pub tally: Tally,
}

impl PartialEq for VoxelDose {
    fn eq(&self, o: &Self) -> bool {
        self.estimator == o.estimator && self.block == o.block && self.dims == o.dims && self.tally == o.tally
    }
}

impl VoxelDose {
    /// A zeroed scorer on `grid` with scoring blocks of `block` phantom voxels.
    pub fn new(
        estimator: DoseEstimator,
        grid: Arc<VoxelGrid>,
        block: [usize; 3],
        labels: Option<Arc<(Vec<u16>, Vec<String>)>>,
        materials: Arc<Vec<Material>>,
    ) -> Self {
        let d = grid.dims();
        let dims = [d[0].div_ceil(block[0]), d[1].div_ceil(block[1]), d[2].div_ceil(block[2])];
        let regions = labels.as_ref().map(|l| l.1.len()).unwrap_or(0);
        let tally = Tally::shared_template(dims[0] * dims[1] * dims[2] + regions);
        Self { estimator, grid, block, dims, labels, materials, tally }
    }

    /// Number of scoring voxels.
    pub fn voxels(&self) -> usize {
        self.dims[0] * self.dims[1] * self.dims[2]
    }

    #[inline]
    fn bin_of_phantom_voxel(&self, v: usize) -> usize {
        let d = self.grid.dims();
        let (ix, iy, iz) = (v % d[0], (v / d[0]) % d[1], v / (d[0] * d[1]));
        let (bx, by, bz) = (ix / self.block[0], iy / self.block[1], iz / self.block[2]);
        bx + self.dims[0] * (by + self.dims[1] * bz)
    }

    #[inline]
    fn add_phantom_voxel(&mut self, v: usize, kev: f64, history: u64) {
        let bin = self.bin_of_phantom_voxel(v);
        self.tally.add(bin, kev, history);
        if let Some(l) = &self.labels {
            let r = l.0[v] as usize;
            let n = self.voxels();
            self.tally.add(n + r, kev, history);
        }
    }

    /// Energy deposited at an interaction point.
    #[inline]
    pub fn deposit(&mut self, region: Region, pos: Vec3, kev: f64, history: u64) {
        if self.estimator != DoseEstimator::Analog {
            return;
        }
        let v = match region.index() {
            Some(i) if i < self.grid.num_voxels() => Some(i),
            _ => self.grid.voxel_at(pos).filter(|_| !region.is_world()),
        };
        if let Some(v) = v {
            self.add_phantom_voxel(v, kev, history);
        }
    }

    /// A straight flight (track-length estimator).
    #[inline]
    pub fn segment(&mut self, photon: &PhotonView, length_cm: f64, history: u64) {
        if self.estimator != DoseEstimator::TrackLength {
            return;
        }
        let grid = Arc::clone(&self.grid);
        // μen/ρ of each material at this energy, looked up once per material per segment.
        let mut cache = [f64::NAN; 32];
        for seg in grid.walk(photon.pos, photon.dir, length_cm) {
            let (m, rho) = grid.voxel_medium(seg.index);
            let mi = m as usize;
            let muen = if mi < cache.len() {
                if cache[mi].is_nan() {
                    cache[mi] = muen_rho(&self.materials[mi], photon.kev);
                }
                cache[mi]
            } else {
                muen_rho(&self.materials[mi], photon.kev)
            };
            let kev = seg.length_cm * muen * rho * photon.kev * photon.weight;
            if kev > 0.0 {
                self.add_phantom_voxel(seg.index, kev, history);
            }
        }
    }
}

#[inline]
fn muen_rho(m: &Material, kev: f64) -> f64 {
    m.absorption_table().map(|t| t.muen_rho_cm2_g(kev)).unwrap_or(0.0)
}
