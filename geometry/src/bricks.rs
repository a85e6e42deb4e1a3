//! Bricks of 8 × 8 × 8 voxels: small tables of the grid's media for fast lookups, and the
//! regions of constant local majorant that delta (Woodcock) tracking walks through.
//!
//! Each brick is *uniform* (all its voxels share one material and density) or *mixed*, and
//! belongs to a **majorant class**: a list of (material, largest density) pairs covering every
//! voxel of every brick of the class, so `max over the list of (μ/ρ)(E) · ρ` bounds μ of every
//! such voxel at every energy, bit for bit when evaluated with the same μ/ρ. A brick's class is
//! chosen by its *leading pair*, the (material, density) of its densest voxel: bricks of soft
//! tissue, of tissue and air, of tissue and lung share a class (its majorant is the tissue's μ in
//! practice), while bricks holding bone lead with bone and get a class of their own. The class
//! list is the union of its bricks' lists (largest density per material). When a grid has more
//! than [`MAX_CLASSES`] distinct leading pairs (per-voxel densities), bricks are grouped by
//! leading material alone. Bricks holding a material index ≥ 64 fall back to the grid-wide
//! majorant ([`BrickMedium::Global`]). The class is only a grouping for efficiency: whatever the
//! grouping, the list covers every voxel of the class, so tracking stays exact.
//!
//! For tracking, each brick also stores its **reach** in each of the eight octants of direction:
//! `r` (at most 15) such that the box of (r+1)³ bricks with this brick at its corner, extending
//! forward along that octant's signs (clipped to the grid), holds bricks of one class only. A ray is
//! walked box by box ([`BrickWalk`]): entering a brick, it takes the box of its direction's
//! octant; over each such stretch the majorant is constant, and a tentative collision is
//! attributed to a voxel of the stretch's box (its coordinates are clamped into the box, so
//! rounding at a face never picks a voxel the majorant does not cover).

use crate::{Vec3, VoxelGrid};
use std::collections::HashMap;

/// Voxels per brick edge: 2^`BRICK_SHIFT`.
pub(crate) const BRICK_SHIFT: u32 = 3;
/// Material index marking a mixed brick.
pub(crate) const MIXED: u16 = u16::MAX;
/// Class index of a brick covered by the grid-wide majorant only.
const GLOBAL: u16 = u16::MAX;
/// Most majorant classes of a grid.
pub const MAX_CLASSES: usize = 64;
/// Largest reach stored (bricks; four bits per octant).
const MAX_REACH: u8 = 15;

/// One brick: its medium, majorant class and reach, in one small record (one cache line read
/// per brick entered).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub(crate) struct Brick {
    /// Material of a uniform brick, or [`MIXED`].
    pub material: u16,
    /// Uniform: slot of the density in [`BrickMap::densities`].
    pub slot: u16,
    /// Majorant class, or [`GLOBAL`].
    pub class: u16,
    /// Reach per direction octant, four bits each (octant `o` in bits 4o..4o+4; bit a of `o`
    /// set for a negative component along axis a; see the module documentation).
    pub reach: u32,
}

impl Brick {
    #[inline(always)]
    pub fn reach(&self, octant: usize) -> usize {
        ((self.reach >> (4 * octant)) & 0xf) as usize
    }
}

/// The majorant over a stretch of a brick walk.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum BrickMedium {
    /// The majorant of this class (an index into [`VoxelGrid::majorant_classes`]).
    Class(u16),
    /// Only the grid-wide majorant covers the stretch.
    Global,
}

/// The bricks of a grid (built on first use).
#[derive(Clone, Debug)]
pub(crate) struct BrickMap {
    pub dims: [usize; 3],
    pub cells: Vec<Brick>,
    pub densities: Vec<f64>,
    /// Majorant classes: (material, largest density g/cm³) lists.
    pub classes: Vec<Vec<(u16, f64)>>,
    /// Without a per-voxel density array: each voxel's material, summarised (a voxel's medium
    /// is then its material at the nominal density).
    pub materials: Option<BrickTable>,
}

impl BrickMap {
    pub fn build(g: &VoxelGrid) -> BrickMap {
        let [nx, ny, nz] = g.layout().dims;
        let b = 1usize << BRICK_SHIFT;
        let dims = [nx.div_ceil(b), ny.div_ceil(b), nz.div_ceil(b)];
        let nb = dims[0] * dims[1] * dims[2];
        let mut first: Vec<Option<(u16, f64)>> = vec![None; nb];
        let mut mixed = vec![false; nb];
        for iz in 0..nz {
            for iy in 0..ny {
                let row = nx * (iy + ny * iz);
                let brow = dims[0] * ((iy >> BRICK_SHIFT) + dims[1] * (iz >> BRICK_SHIFT));
                for ix in 0..nx {
                    let k = brow + (ix >> BRICK_SHIFT);
                    if mixed[k] {
                        continue;
                    }
                    let (m, rho) = g.voxel_medium(row + ix);
                    match first[k] {
                        None => first[k] = Some((m, rho)),
                        Some((m0, r0)) => mixed[k] = m0 != m || r0.to_bits() != rho.to_bits(),
                    }
                }
            }
        }
        let mut densities: Vec<f64> = Vec::new();
        let mut cells: Vec<Brick> = first
            .iter()
            .zip(&mixed)
            .map(|(f, &x)| match (f, x) {
                (Some((m, rho)), false) => {
                    let slot = match densities.iter().position(|d| d.to_bits() == rho.to_bits()) {
                        Some(j) => j,
                        None => {
                            densities.push(*rho);
                            densities.len() - 1
                        }
                    };
                    if slot < u16::MAX as usize && *m != MIXED {
                        Brick { material: *m, slot: slot as u16, class: GLOBAL, reach: 0 }
                    } else {
                        Brick { material: MIXED, slot: 0, class: GLOBAL, reach: 0 }
                    }
                }
                _ => Brick { material: MIXED, slot: 0, class: GLOBAL, reach: 0 },
            })
            .collect();
        let (class, classes) = assign_classes(&brick_lists(g, dims, &cells, &densities));
        let reach = reach(dims, &class);
        for ((c, &k), r) in cells.iter_mut().zip(&class).zip(&reach) {
            c.class = k;
            c.reach = r.iter().enumerate().fold(0u32, |a, (o, &v)| a | (v as u32) << (4 * o));
        }
        let materials = g.densities().is_none().then(|| BrickTable::build(g.layout().dims, |v| g.material_indices().get(v)));
        BrickMap { dims, cells, densities, classes, materials }
    }

    #[inline(always)]
    pub fn index(&self, b: [usize; 3]) -> usize {
        b[0] + self.dims[0] * (b[1] + self.dims[1] * b[2])
    }

    #[inline(always)]
    fn medium(&self, k: usize) -> BrickMedium {
        match self.cells[k].class {
            GLOBAL => BrickMedium::Global,
            c => BrickMedium::Class(c),
        }
    }
}

/// The (material, largest density) list of each brick, or `None` when one of its materials has
/// an index ≥ 64 (those bricks use the grid-wide majorant).
fn brick_lists(g: &VoxelGrid, dims: [usize; 3], cells: &[Brick], densities: &[f64]) -> Vec<Option<Vec<(u16, f64)>>> {
    let [nx, ny, nz] = g.layout().dims;
    let mut out = vec![None; cells.len()];
    for bz in 0..dims[2] {
        for by in 0..dims[1] {
            for bx in 0..dims[0] {
                let k = bx + dims[0] * (by + dims[1] * bz);
                let c = cells[k];
                if c.material != MIXED {
                    if c.material < 64 {
                        out[k] = Some(vec![(c.material, densities[c.slot as usize])]);
                    }
                    continue;
                }
                let mut mask = 0u64;
                let mut max = [0.0f64; 64];
                let mut wide = false;
                let lo = [bx << BRICK_SHIFT, by << BRICK_SHIFT, bz << BRICK_SHIFT];
                let hi = [(lo[0] + 8).min(nx), (lo[1] + 8).min(ny), (lo[2] + 8).min(nz)];
                for iz in lo[2]..hi[2] {
                    for iy in lo[1]..hi[1] {
                        for ix in lo[0]..hi[0] {
                            let (m, rho) = g.voxel_medium(ix + nx * (iy + ny * iz));
                            if m >= 64 {
                                wide = true;
                                continue;
                            }
                            if mask & (1 << m) == 0 || rho > max[m as usize] {
                                max[m as usize] = rho;
                            }
                            mask |= 1 << m;
                        }
                    }
                }
                if !wide {
                    out[k] = Some((0..64u16).filter(|&m| mask & (1 << m) != 0).map(|m| (m, max[m as usize])).collect());
                }
            }
        }
    }
    out
}

/// The majorant class of every brick and the classes' lists (see the module documentation).
fn assign_classes(lists: &[Option<Vec<(u16, f64)>>]) -> (Vec<u16>, Vec<Vec<(u16, f64)>>) {
    // The leading pair: the largest density, the lowest material index among equals.
    let lead = |l: &Vec<(u16, f64)>| l.iter().fold((u16::MAX, f64::NEG_INFINITY), |a, &(m, r)| if r > a.1 { (m, r) } else { a });
    let pairs: std::collections::HashSet<(u16, u64)> = lists.iter().flatten().map(|l| { let (m, r) = lead(l); (m, r.to_bits()) }).collect();
    let by_pair = pairs.len() <= MAX_CLASSES;
    let key = |l: &Vec<(u16, f64)>| { let (m, r) = lead(l); if by_pair { (m, r.to_bits()) } else { (m, 0) } };
    let mut ids: HashMap<(u16, u64), u16> = HashMap::new();
    let mut max: Vec<[f64; 64]> = Vec::new();
    let mut mask: Vec<u64> = Vec::new();
    let class = lists
        .iter()
        .map(|l| match l {
            None => GLOBAL,
            Some(l) => {
                let c = *ids.entry(key(l)).or_insert_with(|| {
                    max.push([0.0; 64]);
                    mask.push(0);
                    (max.len() - 1) as u16
                });
                for &(m, r) in l {
                    let slot = &mut max[c as usize][m as usize];
                    if mask[c as usize] & (1 << m) == 0 || r > *slot {
                        *slot = r;
                    }
                    mask[c as usize] |= 1 << m;
                }
                c
            }
        })
        .collect();
    let classes = max.iter().zip(&mask).map(|(mx, &k)| (0..64u16).filter(|&m| k & (1 << m) != 0).map(|m| (m, mx[m as usize])).collect()).collect();
    (class, classes)
}

/// The reach of every brick in every octant (see the module documentation), by dynamic
/// programming: a brick's box in an octant has size r + 1 = 1 + the smallest box size of its
/// (up to 7) forward neighbours in that octant, if they all have its class (else r = 0); the
/// neighbours' boxes and the brick itself cover the larger box. Neighbours beyond the grid
/// do not limit it (boxes are clipped to the grid).
#[allow(clippy::needless_range_loop)] // octants and axes index several arrays
fn reach(dims: [usize; 3], cells: &[u16]) -> Vec<[u8; 8]> {
    let idx = |b: [usize; 3]| b[0] + dims[0] * (b[1] + dims[1] * b[2]);
    let mut r = vec![[0u8; 8]; cells.len()];
    for oct in 0..8usize {
        let neg = [oct & 1 != 0, oct & 2 != 0, oct & 4 != 0];
        // Visit bricks so that the forward neighbours come first.
        let order = |a: usize, i: usize| if neg[a] { i } else { dims[a] - 1 - i };
        for iz in 0..dims[2] {
            for iy in 0..dims[1] {
                for ix in 0..dims[0] {
                    let b = [order(0, ix), order(1, iy), order(2, iz)];
                    let k = idx(b);
                    let mut least = MAX_REACH;
                    let mut same = true;
                    for e in 1..8usize {
                        let mut n = b;
                        let mut inside = true;
                        for a in 0..3 {
                            if e & (1 << a) != 0 {
                                if neg[a] {
                                    inside &= n[a] > 0;
                                    n[a] = n[a].wrapping_sub(1);
                                } else {
                                    n[a] += 1;
                                    inside &= n[a] < dims[a];
                                }
                            }
                        }
                        if inside {
                            let j = idx(n);
                            same &= cells[j] == cells[k];
                            least = least.min(r[j][oct]);
                        }
                    }
                    r[k][oct] = if same { (least + 1).min(MAX_REACH) } else { 0 };
                }
            }
        }
    }
    r
}

/// Marks "the voxels differ" in a [`BrickTable`]; a voxel whose value is this is never summarised.
pub const VARIES: u16 = u16::MAX;
/// Top-table entries with this bit point into the cell table.
const SPLIT: u32 = 1 << 31;

/// A u16 value per voxel (a material, a medium, a region label) summarised for fast reads: per
/// 8 × 8 × 8 brick the value all its voxels share, and inside a brick whose voxels differ, per
/// 2 × 2 × 2 cell the value its voxels share. The tables are small (4 bytes per brick, 128 per
/// brick that varies) and stay in cache where the per-voxel array would miss at nearly every read.
#[derive(Clone, Debug, PartialEq)]
pub struct BrickTable {
    dims: [usize; 2],
    top: Vec<u32>,
    cells: Vec<u16>,
}

impl BrickTable {
    /// Summarises `value(flat voxel index)` over a grid of `voxel_dims` voxels (x fastest).
    /// `value` is called in a deterministic order, up to twice per voxel.
    pub fn build(voxel_dims: [usize; 3], mut value: impl FnMut(usize) -> u16) -> BrickTable {
        let [nx, ny, nz] = voxel_dims;
        let b = 1usize << BRICK_SHIFT;
        let bd = [nx.div_ceil(b), ny.div_ceil(b), nz.div_ceil(b)];
        let mut top = vec![VARIES as u32; bd[0] * bd[1] * bd[2]];
        let mut seen = vec![false; top.len()];
        let mut split = vec![false; top.len()];
        for iz in 0..nz {
            for iy in 0..ny {
                let row = nx * (iy + ny * iz);
                let brow = bd[0] * ((iy >> BRICK_SHIFT) + bd[1] * (iz >> BRICK_SHIFT));
                for ix in 0..nx {
                    let k = brow + (ix >> BRICK_SHIFT);
                    if split[k] {
                        continue;
                    }
                    let v = value(row + ix) as u32;
                    if !seen[k] {
                        seen[k] = true;
                        top[k] = v;
                    } else if top[k] != v {
                        split[k] = true;
                    }
                }
            }
        }
        let mut cells = Vec::new();
        for bz in 0..bd[2] {
            for by in 0..bd[1] {
                for bx in 0..bd[0] {
                    let k = bx + bd[0] * (by + bd[1] * bz);
                    if !split[k] {
                        continue;
                    }
                    let base = cells.len();
                    top[k] = SPLIT | (base / 64) as u32;
                    cells.resize(base + 64, VARIES);
                    let mut seen = [false; 64];
                    let mut varies = [false; 64];
                    for iz in bz << BRICK_SHIFT..((bz + 1) << BRICK_SHIFT).min(nz) {
                        for iy in by << BRICK_SHIFT..((by + 1) << BRICK_SHIFT).min(ny) {
                            for ix in bx << BRICK_SHIFT..((bx + 1) << BRICK_SHIFT).min(nx) {
                                let j = Self::cell_of([ix, iy, iz]);
                                if varies[j] {
                                    continue;
                                }
                                let v = value(ix + nx * (iy + ny * iz));
                                if !seen[j] {
                                    seen[j] = true;
                                    cells[base + j] = v;
                                } else if cells[base + j] != v {
                                    varies[j] = true;
                                    cells[base + j] = VARIES;
                                }
                            }
                        }
                    }
                }
            }
        }
        BrickTable { dims: [bd[0], bd[1]], top, cells }
    }

    /// Cell of voxel `c` inside its brick (0..64).
    #[inline(always)]
    fn cell_of(c: [usize; 3]) -> usize {
        ((c[0] & 7) >> 1) | (((c[1] & 7) >> 1) << 2) | (((c[2] & 7) >> 1) << 4)
    }

    /// The value of voxel `c` when its brick or its 2 × 2 × 2 cell has one value, else `None`
    /// (read the voxel itself).
    #[inline(always)]
    pub fn get(&self, c: [usize; 3]) -> Option<u16> {
        let t = self.top[self.brick_of(c)];
        let v = if t & SPLIT == 0 { t as u16 } else { self.cells[(t & !SPLIT) as usize * 64 + Self::cell_of(c)] };
        (v != VARIES).then_some(v)
    }

    /// Asks for what [`Self::get`] at `c` will read (the brick's entry, and its cell's when the
    /// brick is split), without waiting for it.
    #[inline(always)]
    pub fn prefetch(&self, c: [usize; 3]) {
        // The brick's entry is small and usually cached; reading it here lets the split
        // brick's cell entry, the likelier miss, be asked for too.
        let Some(&t) = self.top.get(self.brick_of(c)) else { return };
        if t & SPLIT == 0 {
            return;
        }
        if let Some(v) = self.cells.get((t & !SPLIT) as usize * 64 + Self::cell_of(c)) {
            crate::prefetch(v);
        }
    }

    /// Index into `top` of the brick holding voxel `c`.
    #[inline(always)]
    fn brick_of(&self, c: [usize; 3]) -> usize {
        (c[0] >> BRICK_SHIFT) + self.dims[0] * ((c[1] >> BRICK_SHIFT) + self.dims[1] * (c[2] >> BRICK_SHIFT))
    }

    /// Heap bytes held.
    pub fn heap_bytes(&self) -> usize {
        self.top.len() * 4 + self.cells.len() * 2
    }
}

/// How a brick walk ended: through the grid face on `axis` (0, 1, 2) at plane `plane_cm`, at
/// distance `distance_cm` along the ray.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct GridExit {
    /// Distance along the ray (cm).
    pub distance_cm: f64,
    /// Axis of the face.
    pub axis: usize,
    /// The face's coordinate (cm).
    pub plane_cm: f64,
}

/// A walk along the ray `origin + t · dir` through a grid's stretches of constant medium entry
/// (see the module documentation). Allocation-free; from [`VoxelGrid::brick_walk`].
#[derive(Clone, Debug)]
pub struct BrickWalk<'a> {
    grid: &'a VoxelGrid,
    map: &'a BrickMap,
    origin: Vec3,
    dir: Vec3,
    /// Octant of `dir` (bit a set for a negative component along axis a).
    octant: usize,
    /// The origin in voxel units, (origin − grid origin) / voxel size, per axis (−∞ for an
    /// axis the ray does not move along).
    origin_vox: [f64; 3],
    /// Voxel size / dir per axis: distance along the ray per voxel (infinite for a zero
    /// component).
    per_voxel_cm: [f64; 3],
    /// Start and end of the current stretch (cm along the ray).
    start_cm: f64,
    end_cm: f64,
    exit_axis: usize,
    /// The current cube in voxels, inclusive, per axis.
    vlo: [usize; 3],
    vhi: [usize; 3],
    medium: BrickMedium,
}

impl<'a> BrickWalk<'a> {
    #[inline]
    #[allow(clippy::needless_range_loop)] // axes index several arrays
    pub(crate) fn new(grid: &'a VoxelGrid, map: &'a BrickMap, origin: Vec3, dir: Vec3) -> Self {
        let layout = grid.layout();
        let mut w = BrickWalk {
            grid,
            map,
            origin,
            dir,
            octant: (dir.x < 0.0) as usize | ((dir.y < 0.0) as usize) << 1 | ((dir.z < 0.0) as usize) << 2,
            origin_vox: [0.0; 3],
            per_voxel_cm: [0.0; 3],
            start_cm: 0.0,
            end_cm: 0.0,
            exit_axis: 0,
            vlo: [0; 3],
            vhi: [0; 3],
            medium: BrickMedium::Global,
        };
        let mut brick = [0usize; 3];
        for a in 0..3 {
            let u = (origin.axis(a) - layout.origin_cm.axis(a)) * grid.inv_size.axis(a);
            // `as usize` saturates: negative and NaN give 0.
            brick[a] = (u as usize).min(layout.dims[a] - 1) >> BRICK_SHIFT;
            let da = dir.axis(a);
            if da != 0.0 {
                w.origin_vox[a] = u;
                w.per_voxel_cm[a] = layout.voxel_size_cm.axis(a) / da.abs();
            } else {
                // The ray never reaches a plane of this axis: (plane − (−∞)) · ∞ = ∞.
                w.origin_vox[a] = f64::NEG_INFINITY;
                w.per_voxel_cm[a] = f64::INFINITY;
            }
        }
        w.enter(brick);
        w
    }

    /// Makes the box of brick `b` in the walk's octant the current stretch, starting at
    /// `start_cm`. The stretch ends where the ray reaches the box's forward plane on some axis
    /// (distances from plane indices in voxel units, so no error accumulates along the ray).
    #[inline(always)]
    fn enter(&mut self, b: [usize; 3]) {
        let k = self.map.index(b);
        let r = self.map.cells[k].reach(self.octant);
        self.medium = self.map.medium(k);
        let dims = &self.grid.layout().dims;
        let mut end = f64::INFINITY;
        let mut axis = 0;
        for a in 0..3 {
            let t = if self.octant & (1 << a) == 0 {
                let hi = (b[a] + r).min(self.map.dims[a] - 1);
                self.vlo[a] = b[a] << BRICK_SHIFT;
                self.vhi[a] = (((hi + 1) << BRICK_SHIFT).min(dims[a])) - 1;
                ((self.vhi[a] + 1) as f64 - self.origin_vox[a]) * self.per_voxel_cm[a]
            } else {
                let lo = b[a].saturating_sub(r);
                self.vlo[a] = lo << BRICK_SHIFT;
                self.vhi[a] = (((b[a] + 1) << BRICK_SHIFT).min(dims[a])) - 1;
                (self.origin_vox[a] - self.vlo[a] as f64) * self.per_voxel_cm[a]
            };
            if t < end {
                end = t;
                axis = a;
            }
        }
        self.end_cm = end.max(self.start_cm);
        self.exit_axis = axis;
    }

    /// Where the current stretch starts and ends along the ray (cm), and its medium.
    #[inline(always)]
    pub fn stretch(&self) -> (f64, f64, BrickMedium) {
        (self.start_cm, self.end_cm, self.medium)
    }

    /// Restarts the current stretch at `t_cm` (after a virtual collision there).
    #[inline(always)]
    pub fn resume_at(&mut self, t_cm: f64) {
        self.start_cm = t_cm.min(self.end_cm);
    }

    /// The point at distance `t_cm` along the ray.
    #[inline(always)]
    pub fn point(&self, t_cm: f64) -> Vec3 {
        self.origin + self.dir * t_cm
    }

    /// The voxel of the current stretch at distance `t_cm` (within the stretch), as flat index
    /// and coordinates: the voxel containing the point, its coordinates clamped into the
    /// stretch's box.
    #[inline(always)]
    pub fn voxel_at(&self, t_cm: f64) -> (usize, [usize; 3]) {
        let q = self.point(t_cm);
        let d = self.grid.layout().dims;
        let ix = self.grid.floor_cell(0, q.x, self.vlo[0], self.vhi[0]);
        let iy = self.grid.floor_cell(1, q.y, self.vlo[1], self.vhi[1]);
        let iz = self.grid.floor_cell(2, q.z, self.vlo[2], self.vhi[2]);
        (ix + d[0] * (iy + d[1] * iz), [ix, iy, iz])
    }

    /// The material index and density of voxel `v` at coordinates `c` (as from
    /// [`BrickWalk::voxel_at`]): [`VoxelGrid::voxel_medium`], read from the brick table when the
    /// voxel's brick is uniform, else from the summarised materials when its 2 × 2 × 2 cell is.
    #[inline(always)]
    pub fn voxel_medium(&self, v: usize, c: [usize; 3]) -> (u16, f64) {
        let b = self.map.cells[self.map.index([c[0] >> BRICK_SHIFT, c[1] >> BRICK_SHIFT, c[2] >> BRICK_SHIFT])];
        if b.material != MIXED {
            return (b.material, self.map.densities[b.slot as usize]);
        }
        match self.map.materials.as_ref().and_then(|t| t.get(c)) {
            Some(m) => (m, self.grid.nominal_densities()[m as usize]),
            None => self.grid.voxel_medium(v),
        }
    }

    /// Moves to the next stretch; `Err` with the exit when the ray leaves the grid instead.
    #[inline(always)]
    pub fn advance(&mut self) -> Result<(), GridExit> {
        let a = self.exit_axis;
        let layout = self.grid.layout();
        let t = self.end_cm;
        let mut b = [0usize; 3];
        if self.octant & (1 << a) == 0 {
            let k = self.vhi[a] + 1;
            if k >= layout.dims[a] {
                return Err(GridExit { distance_cm: t, axis: a, plane_cm: layout.plane_cm(a, k) });
            }
            b[a] = k >> BRICK_SHIFT;
        } else {
            if self.vlo[a] == 0 {
                return Err(GridExit { distance_cm: t, axis: a, plane_cm: layout.plane_cm(a, 0) });
            }
            b[a] = (self.vlo[a] - 1) >> BRICK_SHIFT;
        }
        let q = self.point(t);
        for o in [(a + 1) % 3, (a + 2) % 3] {
            b[o] = self.grid.floor_cell(o, q.axis(o), self.vlo[o], self.vhi[o]) >> BRICK_SHIFT;
        }
        self.start_cm = t;
        self.enter(b);
        Ok(())
    }
}

impl VoxelGrid {
    /// A walk along `origin + t · dir` (unit `dir`; `origin` in the closed grid) through the
    /// stretches of constant medium entry used for delta tracking with local majorants.
    #[inline]
    pub fn brick_walk(&self, origin: Vec3, dir: Vec3) -> BrickWalk<'_> {
        BrickWalk::new(self, self.brick_map(), origin, dir)
    }

    /// The majorant classes of the grid's mixed bricks: (material index, largest density g/cm³)
    /// lists; see [`BrickMedium::Class`].
    pub fn majorant_classes(&self) -> &[Vec<(u16, f64)>] {
        &self.brick_map().classes
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::{GridLayout, MaterialIndices};

    /// Every voxel of every brick is covered by its brick's class (the class lists its material
    /// at a density at least its own) and a uniform brick's medium is each voxel's; bricks with
    /// a material index ≥ 64 use the grid-wide majorant; and the box of every brick in every
    /// octant holds only its own class, and is as large as that allows. Cases: nominal
    /// densities, a few per-voxel densities (classes by leading pair), many (by leading
    /// material), and a material beyond the first 64.
    #[test]
    fn classes_and_reach_cover_their_voxels() {
        let dims = [69, 40, 61];
        let n: usize = dims.iter().product();
        let layout = GridLayout { dims, voxel_size_cm: Vec3::new(0.3, 0.5, 0.2), origin_cm: Vec3::new(-1.0, 0.0, 1.0) };
        let ijk = |i: usize| [i % dims[0], (i / dims[0]) % dims[1], i / (dims[0] * dims[1])];
        let mats: Vec<u8> = (0..n)
            .map(|i| {
                let [x, y, z] = ijk(i);
                if (x as i64 - 34).pow(2) + (z as i64 - 30).pow(2) < 26 * 26 { 1 } else if y > 30 && x < 12 { 2 } else { 0 }
            })
            .collect();
        let few: Vec<f32> = (0..n).map(|i| 1.0 + (ijk(i)[0] % 5) as f32 * 0.1 * (ijk(i)[2] > 50) as u8 as f32).collect();
        let many: Vec<f32> = (0..n).map(|i| 1.0 + ijk(i)[0] as f32 * 1e-2 + ijk(i)[2] as f32 * 1e-3).collect();
        let mut wide = mats.clone();
        for (i, m) in wide.iter_mut().enumerate() {
            if ijk(i)[1] < 5 && ijk(i)[0] > 60 {
                *m = 65;
            }
        }
        let names: Vec<String> = (0..70).map(|k| format!("m{k}")).collect();
        let nominal: Vec<f64> = (0..70).map(|k| [1.0, 2.0, 0.3][k % 3]).collect();
        for (case, (mats, density)) in [(&mats, None), (&mats, Some(few)), (&mats, Some(many)), (&wide, None)].into_iter().enumerate() {
            let mut g = VoxelGrid::new(layout, MaterialIndices::U8(mats.clone()), density, names.clone()).unwrap();
            g.set_nominal_densities(&nominal).unwrap();
            let map = g.brick_map();
            let mut kinds = [0usize; 3];
            for i in 0..n {
                let c = ijk(i);
                let k = map.index([c[0] >> 3, c[1] >> 3, c[2] >> 3]);
                let (m, rho) = g.voxel_medium(i);
                let cell = map.cells[k];
                if cell.material != MIXED {
                    kinds[0] += 1;
                    assert!(cell.material == m && map.densities[cell.slot as usize].to_bits() == rho.to_bits(), "case {case} voxel {c:?}");
                }
                match map.medium(k) {
                    BrickMedium::Class(cl) => {
                        kinds[1] += 1;
                        assert!(map.classes[cl as usize].iter().any(|&(cm, cr)| cm == m && cr >= rho), "case {case} voxel {c:?}");
                    }
                    BrickMedium::Global => {
                        kinds[2] += 1;
                        let lo = [c[0] & !7, c[1] & !7, c[2] & !7];
                        let mut has_wide = false;
                        for z in lo[2]..(lo[2] + 8).min(dims[2]) {
                            for y in lo[1]..(lo[1] + 8).min(dims[1]) {
                                for x in lo[0]..(lo[0] + 8).min(dims[0]) {
                                    has_wide |= mats[x + dims[0] * (y + dims[1] * z)] >= 64;
                                }
                            }
                        }
                        assert!(has_wide, "case {case}: brick of voxel {c:?} needs no fallback");
                    }
                }
            }
            assert!((kinds[0] > 0) == (case != 2) && kinds[1] > kinds[0] && (kinds[2] > 0) == (case == 3), "case {case}: {kinds:?}");
            assert!(map.classes.len() <= MAX_CLASSES);
            if case == 2 {
                assert!(map.classes.len() <= 3, "many densities: classes by leading material");
            }
            let bd = map.dims;
            let mut reached = 0;
            for bz in 0..bd[2] {
                for by in 0..bd[1] {
                    for bx in 0..bd[0] {
                        let b = [bx, by, bz];
                        let k = map.index(b);
                        for oct in 0..8 {
                            let r = map.cells[k].reach(oct);
                            reached += (r > 0) as usize;
                            // The box in this octant, and the box one larger.
                            let range = |a: usize, r: usize| if oct & (1 << a) == 0 { b[a]..(b[a] + r + 1).min(bd[a]) } else { b[a].saturating_sub(r)..b[a] + 1 };
                            let mut other = false;
                            for z in range(2, r + 1) {
                                for y in range(1, r + 1) {
                                    for x in range(0, r + 1) {
                                        let inner = range(0, r).contains(&x) && range(1, r).contains(&y) && range(2, r).contains(&z);
                                        let differs = map.cells[map.index([x, y, z])].class != map.cells[k].class;
                                        assert!(!(inner && differs), "brick {b:?} octant {oct} reach {r}");
                                        other |= differs;
                                    }
                                }
                            }
                            // Not smaller than needed: the box one larger holds another entry,
                            // unless it reaches no further brick or the reach is capped.
                            let grows = (0..3).any(|a| range(a, r + 1).len() > range(a, r).len());
                            assert!(other || !grows || r == MAX_REACH as usize, "brick {b:?} octant {oct}: reach {r} could be larger");
                        }
                    }
                }
            }
            assert!(reached > 0, "some bricks reach beyond themselves");
        }
    }

    /// A summarised table answers each voxel's own value or nothing, for a grid whose sizes are
    /// not multiples of 8, with uniform bricks, uniform 2 × 2 × 2 cells inside varying bricks,
    /// varying cells, and voxels holding the marker value itself; asking for a voxel's entries
    /// ahead ([`BrickTable::prefetch`]) changes nothing.
    #[test]
    fn brick_table_answers_each_voxels_value() {
        let dims = [29, 18, 23];
        let n: usize = dims.iter().product();
        let ijk = |i: usize| [i % dims[0], (i / dims[0]) % dims[1], i / (dims[0] * dims[1])];
        let value = |i: usize| {
            let [x, y, z] = ijk(i);
            if i == 4000 { VARIES } else if x < 13 { 7 } else if (x + y + z) % 2 == 0 && z > 15 { 3 } else { ((y / 3) % 2) as u16 }
        };
        let t = BrickTable::build(dims, value);
        let (mut found, mut cells, mut none) = (0, 0, 0);
        for i in 0..n {
            let c = ijk(i);
            // A prefetch first (every brick kind, grid edges included) must not panic or change
            // the answer.
            t.prefetch(c);
            match t.get(c) {
                Some(v) => {
                    assert_eq!(v, value(i), "voxel {c:?}");
                    found += 1;
                    let k = (c[0] >> 3) + t.dims[0] * ((c[1] >> 3) + t.dims[1] * (c[2] >> 3));
                    cells += (t.top[k] & SPLIT != 0) as usize;
                }
                None => none += 1,
            }
        }
        assert!(found > cells && cells > 0 && none > 0, "all three cases: {found} found, {cells} of them from cells, {none} not");
        assert_eq!(t.get(ijk(4000)), None);
        assert_eq!(t.heap_bytes(), t.top.len() * 4 + t.cells.len() * 2);
    }

    /// A walk visits stretches in order, each voxel it reports lies in its stretch's medium, and
    /// it leaves the grid where the box exit says.
    #[test]
    fn walk_covers_the_ray_to_the_grid_exit() {
        let dims = [40, 33, 26];
        let n: usize = dims.iter().product();
        let layout = GridLayout { dims, voxel_size_cm: Vec3::new(0.25, 0.3, 0.4), origin_cm: Vec3::new(-5.0, -5.0, 0.0) };
        let ijk = |i: usize| [i % dims[0], (i / dims[0]) % dims[1], i / (dims[0] * dims[1])];
        let mats: Vec<u8> = (0..n).map(|i| { let [x, y, z] = ijk(i); ((x / 13 + y / 11 + z / 7) % 3) as u8 }).collect();
        let mut g = VoxelGrid::new(layout, MaterialIndices::U8(mats), None, vec!["a".into(), "b".into(), "c".into()]).unwrap();
        g.set_nominal_densities(&[1.0, 2.0, 0.3]).unwrap();
        let b = g.bounds();
        let mut state = 12345u64;
        let mut uni = || {
            state = state.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
            (state >> 11) as f64 / (1u64 << 53) as f64
        };
        for k in 0..2000 {
            let p = Vec3::new(
                b.min_cm.x + uni() * (b.max_cm.x - b.min_cm.x),
                b.min_cm.y + uni() * (b.max_cm.y - b.min_cm.y),
                b.min_cm.z + uni() * (b.max_cm.z - b.min_cm.z),
            );
            // Some directions along axes and diagonals, to hit planes, edges and corners.
            let d = match k % 4 {
                0 => Vec3::new(uni() - 0.5, uni() - 0.5, uni() - 0.5).normalised(),
                1 => [Vec3::X, -Vec3::Y, Vec3::Z, -Vec3::X][k / 4 % 4],
                2 => Vec3::new(1.0, 1.0, -1.0).normalised(),
                _ => Vec3::new(-1.0, 0.0, 1.0).normalised(),
            };
            let (t_exit, _, _) = b.exit(p, d);
            let mut w = g.brick_walk(p, d);
            let mut last = 0.0;
            let mut steps = 0;
            let exit = loop {
                let (s, e, medium) = w.stretch();
                assert!(s == last && e >= s, "stretches in order: {s} {e} after {last}");
                for f in [0.0, 0.5, 1.0] {
                    let (v, cell) = w.voxel_at(s + f * (e - s));
                    assert_eq!(cell, ijk(v));
                    let (m, rho) = g.voxel_medium(v);
                    let (wm, wr) = w.voxel_medium(v, cell);
                    assert!(wm == m && wr.to_bits() == rho.to_bits());
                    match medium {
                        BrickMedium::Class(c) => assert!(g.majorant_classes()[c as usize].iter().any(|&(cm, cr)| cm == m && cr >= rho)),
                        BrickMedium::Global => panic!("no fallback expected"),
                    }
                    // The voxel is the one containing the point, up to rounding on a face.
                    let q = w.point(s + f * (e - s));
                    let c = ijk(v);
                    for a in 0..3 {
                        let (lo, hi) = (layout.plane_cm(a, c[a]), layout.plane_cm(a, c[a] + 1));
                        assert!(q.axis(a) >= lo - 1e-9 && q.axis(a) <= hi + 1e-9, "point {q:?} outside voxel {c:?}");
                    }
                }
                last = e;
                steps += 1;
                assert!(steps < 1000, "walk does not end");
                if let Err(x) = w.advance() {
                    break x;
                }
            };
            assert!((exit.distance_cm - t_exit).abs() < 1e-9, "exit {} vs {t_exit}", exit.distance_cm);
            let face = if d.axis(exit.axis) > 0.0 { b.max_cm.axis(exit.axis) } else { b.min_cm.axis(exit.axis) };
            assert_eq!(exit.plane_cm, face);
        }
    }
}
