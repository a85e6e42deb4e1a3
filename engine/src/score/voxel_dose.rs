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
use dosemill_geometry::{BrickTable, Region, Vec3, VoxelGrid};
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
    /// The region labels summarised by bricks and cells: most deposits find their label in
    /// this small table instead of the large per-voxel array (a cache miss at nearly every
    /// deposit otherwise).
    label_bricks: Option<Arc<BrickTable>>,
    /// log2 of `block` per axis when every entry is a power of two.
    block_shift: Option<[u32; 3]>,
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
        let label_bricks = labels.as_ref().filter(|l| l.0.len() == grid.num_voxels()).map(|l| Arc::new(BrickTable::build(d, |v| l.0[v])));
        let block_shift = block.iter().all(|b| b.is_power_of_two()).then(|| block.map(|b| b.trailing_zeros()));
        Self { estimator, grid, block, dims, labels, materials, tally, label_bricks, block_shift }
    }

    /// Number of scoring voxels.
    pub fn voxels(&self) -> usize {
        self.dims[0] * self.dims[1] * self.dims[2]
    }

    /// Voxel coordinates of phantom voxel `v` (a region index, so below 2³²).
    #[inline(always)]
    fn ijk(&self, v: usize) -> [usize; 3] {
        let d = self.grid.dims();
        let (v, nx, ny) = (v as u32, d[0] as u32, d[1] as u32);
        let q = v / nx;
        let z = q / ny;
        [(v - q * nx) as usize, (q - z * ny) as usize, z as usize]
    }

    #[inline(always)]
    fn bin_of_cell(&self, c: [usize; 3]) -> usize {
        let [bx, by, bz] = match self.block_shift {
            Some(s) => [c[0] >> s[0], c[1] >> s[1], c[2] >> s[2]],
            None => [c[0] / self.block[0], c[1] / self.block[1], c[2] / self.block[2]],
        };
        bx + self.dims[0] * (by + self.dims[1] * bz)
    }

    #[inline]
    fn add_phantom_voxel(&mut self, v: usize, kev: f64, history: u64) {
        let c = self.ijk(v);
        let bin = self.bin_of_cell(c);
        self.tally.add(bin, kev, history);
        if let Some(l) = &self.labels {
            let r = Self::label_of(l, self.label_bricks.as_deref(), v, c) as usize;
            let n = self.voxels();
            self.tally.add(n + r, kev, history);
        }
    }

    /// The region label of phantom voxel `v` at cell `c`, from the summarised labels when its
    /// brick or 2 × 2 × 2 cell has one.
    #[inline(always)]
    fn label_of(labels: &(Vec<u16>, Vec<String>), bricks: Option<&BrickTable>, v: usize, c: [usize; 3]) -> u16 {
        bricks.and_then(|b| b.get(c)).unwrap_or_else(|| labels.0[v])
    }

    /// A real collision about to happen in phantom voxel `v`: asks for the dose bin's sums and
    /// the voxel's region label, which the deposits there will read, so that the interaction's
    /// sampling hides their cache misses. Changes no value.
    #[inline]
    pub fn collision_ahead(&self, v: usize) {
        if self.estimator != DoseEstimator::Analog || v >= self.grid.num_voxels() {
            return;
        }
        let c = self.ijk(v);
        self.tally.prefetch(self.bin_of_cell(c));
        if let Some(b) = self.label_bricks.as_deref() {
            b.prefetch(c);
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

#[cfg(test)]
mod tests {
    use super::*;
    use dosemill_geometry::{GridLayout, MaterialIndices};

    /// Voxel coordinates, scoring bins and region labels found through the summarised labels
    /// are the ones of the per-voxel arrays, for every voxel of a grid whose sizes are not
    /// multiples of the brick or the block.
    #[test]
    fn cells_bins_and_labels_match_the_voxel_arrays() {
        let dims = [21, 13, 18];
        let n: usize = dims.iter().product();
        let layout = GridLayout { dims, voxel_size_cm: Vec3::new(0.1, 0.2, 0.3), origin_cm: Vec3::ZERO };
        let grid = Arc::new(VoxelGrid::new(layout, MaterialIndices::U8(vec![0; n]), None, vec!["water".into()]).unwrap());
        let labels: Vec<u16> = (0..n).map(|i| { let [x, y, z] = layout.ijk(i); if x < 10 && z >= 4 { 1 } else if i == 500 { 2 } else { (y >= 9) as u16 * 3 } }).collect();
        let l = Arc::new((labels.clone(), vec!["a".into(), "b".into(), "c".into(), "d".into()]));
        let water = Arc::new(vec![dosemill_xsdata::library::lookup("water").unwrap()]);
        for block in [[1, 1, 1], [4, 2, 8], [3, 5, 2]] {
            let d = VoxelDose::new(DoseEstimator::Analog, grid.clone(), block, Some(l.clone()), water.clone());
            assert_eq!(d.block_shift.is_some(), block.iter().all(|b| b.is_power_of_two()));
            let bricks = d.label_bricks.as_deref().expect("label bricks");
            let summarised = (0..n).filter(|&v| bricks.get(layout.ijk(v)).is_some()).count();
            assert!(summarised > 0 && summarised < n, "labels both from the table and from the voxels");
            for v in 0..n {
                let c = layout.ijk(v);
                assert_eq!(d.ijk(v), c);
                let bin = c[0] / block[0] + d.dims[0] * (c[1] / block[1] + d.dims[1] * (c[2] / block[2]));
                assert_eq!(d.bin_of_cell(c), bin, "voxel {c:?}");
                assert_eq!(VoxelDose::label_of(&l, Some(bricks), v, c), labels[v], "voxel {c:?}");
            }
        }
    }
}
