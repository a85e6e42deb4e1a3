//! Voxel grids: point location, region stepping and exact ray traversal (3D DDA).
//!
//! # Conventions
//! Voxel `(ix, iy, iz)` has flat index `ix + nx * (iy + ny * iz)` (x fastest) and occupies
//! `[o + i s, o + (i + 1) s)` on each axis, where `o` is `origin_cm` (the low corner of voxel
//! (0,0,0)) and `s` is `voxel_size_cm`. Plane `k` along an axis lies at `o + k s`, computed
//! the same way everywhere, so the traversal and the region stepping agree bit for bit on every
//! plane. The grid as a whole is closed: a point on its high faces belongs to the last voxel.
//!
//! During transport the photon's region is passed explicitly to [`VoxelGrid::step`] (never
//! re-located), with the same rules as the slab stack: only planes the direction points at are
//! considered, negative distances from rounding are clamped to zero, ties at edges go to the
//! lower axis (x, then y, then z), and an entry from the world must cross more than a
//! rounding skin of the grid.

use crate::bricks::{BrickMap, BRICK_SHIFT, MIXED};
use crate::region::{Aabb, Axis, Boundary, Medium, Region, World};
use crate::{GeometryError, Vec3};
use serde::{Deserialize, Serialize};

/// Per-voxel material indices, one or two bytes each.
#[derive(Clone, Debug, PartialEq)]
pub enum MaterialIndices {
    /// One byte per voxel (up to 256 materials).
    U8(Vec<u8>),
    /// Two bytes per voxel.
    U16(Vec<u16>),
}

impl MaterialIndices {
    /// The material index of voxel `i`.
    #[inline]
    pub fn get(&self, i: usize) -> u16 {
        match self {
            MaterialIndices::U8(v) => v[i] as u16,
            MaterialIndices::U16(v) => v[i],
        }
    }

    /// Number of voxels.
    #[inline]
    pub fn len(&self) -> usize {
        match self {
            MaterialIndices::U8(v) => v.len(),
            MaterialIndices::U16(v) => v.len(),
        }
    }

    /// True for no voxels.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Bytes per voxel (1 or 2).
    pub fn bytes_per_voxel(&self) -> usize {
        match self {
            MaterialIndices::U8(_) => 1,
            MaterialIndices::U16(_) => 2,
        }
    }

    /// The first voxel whose index is ≥ `count`, with that index.
    fn first_at_or_above(&self, count: usize) -> Option<(usize, u16)> {
        match self {
            MaterialIndices::U8(v) => v
                .iter()
                .position(|&m| m as usize >= count)
                .map(|i| (i, v[i] as u16)),
            MaterialIndices::U16(v) => v
                .iter()
                .position(|&m| m as usize >= count)
                .map(|i| (i, v[i])),
        }
    }
}

/// The shape and placement of a voxel grid.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct GridLayout {
    /// Number of voxels along x, y, z.
    pub dims: [usize; 3],
    /// Voxel edge lengths (cm), finite and > 0.
    pub voxel_size_cm: Vec3,
    /// Low corner of voxel (0,0,0) (cm).
    pub origin_cm: Vec3,
}

impl GridLayout {
    /// Number of voxels.
    pub fn num_voxels(&self) -> u64 {
        self.dims.iter().map(|&n| n as u64).product()
    }

    /// Checks sizes, origin and the voxel count.
    ///
    /// # Errors
    /// A zero dimension, too many voxels, or a non-finite or non-positive size, or a non-finite origin.
    pub fn validate(&self) -> Result<(), GeometryError> {
        if self.dims.contains(&0) {
            return Err(GeometryError::BadDimensions { dims: self.dims });
        }
        let n = self
            .dims
            .iter()
            .try_fold(1u64, |a, &b| a.checked_mul(b as u64))
            .unwrap_or(u64::MAX);
        if n >= Region::MAX_OBJECT_REGIONS || n > usize::MAX as u64 {
            return Err(GeometryError::TooManyRegions { count: n });
        }
        for (what, v) in [
            ("voxel_size_cm.x", self.voxel_size_cm.x),
            ("voxel_size_cm.y", self.voxel_size_cm.y),
            ("voxel_size_cm.z", self.voxel_size_cm.z),
        ] {
            if !(v.is_finite() && v > 0.0) {
                return Err(GeometryError::NonFinite { what, value: v });
            }
        }
        for (what, v) in [
            ("origin_cm.x", self.origin_cm.x),
            ("origin_cm.y", self.origin_cm.y),
            ("origin_cm.z", self.origin_cm.z),
        ] {
            if !v.is_finite() {
                return Err(GeometryError::NonFinite { what, value: v });
            }
        }
        Ok(())
    }

    /// Plane `k` along axis `a` (cm): `origin + k * size`.
    #[inline]
    pub fn plane_cm(&self, a: usize, k: usize) -> f64 {
        self.origin_cm.axis(a) + k as f64 * self.voxel_size_cm.axis(a)
    }

    /// The grid's bounding box (cm).
    pub fn bounds(&self) -> Aabb {
        Aabb::new(
            self.origin_cm,
            Vec3::new(
                self.plane_cm(0, self.dims[0]),
                self.plane_cm(1, self.dims[1]),
                self.plane_cm(2, self.dims[2]),
            ),
        )
    }

    /// Voxel coordinates of flat index `i`.
    #[inline]
    pub fn ijk(&self, i: usize) -> [usize; 3] {
        let [nx, ny, _] = self.dims;
        [i % nx, (i / nx) % ny, i / (nx * ny)]
    }

    /// Flat index of voxel `(ix, iy, iz)`.
    #[inline]
    pub fn index(&self, ijk: [usize; 3]) -> usize {
        ijk[0] + self.dims[0] * (ijk[1] + self.dims[1] * ijk[2])
    }
}

/// One voxel crossed by a ray, as produced by [`VoxelWalk`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct VoxelSegment {
    /// Flat voxel index.
    pub index: usize,
    /// Voxel coordinates `(ix, iy, iz)`.
    pub ijk: [usize; 3],
    /// Distance along the ray where the segment starts (cm).
    pub start_cm: f64,
    /// Path length in this voxel (cm, ≥ 0; zero when the ray only touches an edge or corner
    /// between two voxels it crosses).
    pub length_cm: f64,
}

/// A voxel grid inside a world box.
#[derive(Clone, Debug)]
pub struct VoxelGrid {
    layout: GridLayout,
    material: MaterialIndices,
    density: Option<Vec<f32>>,
    material_names: Vec<String>,
    /// Per material (file table order); NaN until supplied.
    nominal_density_g_cm3: Vec<f64>,
    world: World,
    bounds: Aabb,
    pub(crate) inv_size: Vec3,
    /// Leaving through each grid face (-x, +x, -y, +y, -z, +z) leaves the world at once.
    face_escapes: [bool; 6],
    skin_cm: f64,
    /// Bricks of voxels with one medium, built on first use (see [`VoxelGrid::medium_at_cell`]).
    bricks: std::sync::OnceLock<BrickMap>,
}

impl PartialEq for VoxelGrid {
    /// Equal contents and world; unsupplied nominal densities (NaN) compare equal.
    fn eq(&self, o: &Self) -> bool {
        self.layout == o.layout
            && self.material == o.material
            && self.density == o.density
            && self.material_names == o.material_names
            && self.world == o.world
            && self.nominal_density_g_cm3.len() == o.nominal_density_g_cm3.len()
            && self
                .nominal_density_g_cm3
                .iter()
                .zip(&o.nominal_density_g_cm3)
                .all(|(a, b)| a.to_bits() == b.to_bits())
    }
}

impl VoxelGrid {
    /// Builds a grid from its layout, material indices (into `material_names`), and optional
    /// per-voxel densities (g/cm³). The world is vacuum filling exactly the grid's box; see
    /// [`VoxelGrid::with_world`].
    ///
    /// # Errors
    /// An invalid layout, data arrays of the wrong length, a material index ≥ the number of
    /// material names, or a density that is negative or not finite (naming the voxel).
    pub fn new(
        layout: GridLayout,
        material: MaterialIndices,
        density: Option<Vec<f32>>,
        material_names: Vec<String>,
    ) -> Result<Self, GeometryError> {
        layout.validate()?;
        let n = layout.num_voxels() as usize;
        if material.len() != n {
            return Err(GeometryError::DataLength {
                what: "material indices",
                expected: n,
                actual: material.len(),
            });
        }
        if let Some(d) = &density {
            if d.len() != n {
                return Err(GeometryError::DataLength {
                    what: "densities",
                    expected: n,
                    actual: d.len(),
                });
            }
        }
        if let Some((i, value)) = material.first_at_or_above(material_names.len()) {
            let [ix, iy, iz] = layout.ijk(i);
            return Err(GeometryError::MaterialOutOfRange {
                ix,
                iy,
                iz,
                value,
                count: material_names.len(),
            });
        }
        if let Some(d) = &density {
            if let Some(i) = d.iter().position(|v| !(v.is_finite() && *v >= 0.0)) {
                let [ix, iy, iz] = layout.ijk(i);
                return Err(GeometryError::BadVoxelDensity {
                    ix,
                    iy,
                    iz,
                    value: d[i],
                });
            }
        }
        let bounds = layout.bounds();
        let s = layout.voxel_size_cm;
        let nominal = vec![f64::NAN; material_names.len()];
        let mut g = VoxelGrid {
            layout,
            material,
            density,
            material_names,
            nominal_density_g_cm3: nominal,
            world: World {
                medium: None,
                bounds,
            },
            bounds,
            inv_size: Vec3::new(1.0 / s.x, 1.0 / s.y, 1.0 / s.z),
            face_escapes: [true; 6],
            skin_cm: 0.0,
            bricks: std::sync::OnceLock::new(),
        };
        g.set_world(World {
            medium: None,
            bounds,
        })?;
        Ok(g)
    }

    /// This grid inside `world` (a vacuum or a medium such as air filling a box that contains
    /// the grid).
    ///
    /// # Errors
    /// An invalid world box, a bad world density, or a box that does not contain the grid.
    pub fn with_world(mut self, world: World) -> Result<Self, GeometryError> {
        self.set_world(world)?;
        Ok(self)
    }

    fn set_world(&mut self, world: World) -> Result<(), GeometryError> {
        if !world.bounds.is_valid() {
            return Err(GeometryError::BadWorldBox {
                bounds: world.bounds,
            });
        }
        if let Some(m) = world.medium {
            if !(m.density_g_cm3.is_finite() && m.density_g_cm3 >= 0.0) {
                return Err(GeometryError::BadWorldDensity {
                    value: m.density_g_cm3,
                });
            }
        }
        if !world.bounds.contains_box(&self.bounds) {
            return Err(GeometryError::WorldTooSmall {
                object: self.bounds,
                world: world.bounds,
            });
        }
        let (g, w) = (&self.bounds, &world.bounds);
        self.face_escapes = [
            g.min_cm.x == w.min_cm.x,
            g.max_cm.x == w.max_cm.x,
            g.min_cm.y == w.min_cm.y,
            g.max_cm.y == w.max_cm.y,
            g.min_cm.z == w.min_cm.z,
            g.max_cm.z == w.max_cm.z,
        ];
        self.skin_cm = 1e-12 * w.scale_cm().max(1.0);
        self.world = world;
        Ok(())
    }

    /// Supplies the nominal density (g/cm³) of each material, in the order of
    /// [`VoxelGrid::material_names`]; used for voxels when the grid has no density array.
    ///
    /// # Errors
    /// A wrong number of values, or a value that is negative or not finite.
    pub fn set_nominal_densities(&mut self, density_g_cm3: &[f64]) -> Result<(), GeometryError> {
        self.bricks = std::sync::OnceLock::new();
        if density_g_cm3.len() != self.material_names.len() {
            return Err(GeometryError::DataLength {
                what: "nominal densities",
                expected: self.material_names.len(),
                actual: density_g_cm3.len(),
            });
        }
        if let Some(i) = density_g_cm3
            .iter()
            .position(|v| !(v.is_finite() && *v >= 0.0))
        {
            return Err(GeometryError::BadNominalDensity {
                material: self.material_names[i].clone(),
                value: density_g_cm3[i],
            });
        }
        self.nominal_density_g_cm3.copy_from_slice(density_g_cm3);
        Ok(())
    }

    /// True when every voxel has a density: a density array is present or nominal densities
    /// were supplied.
    pub fn densities_known(&self) -> bool {
        self.density.is_some() || self.nominal_density_g_cm3.iter().all(|d| d.is_finite())
    }

    /// The layout (dimensions, voxel size, origin).
    #[inline]
    pub fn layout(&self) -> &GridLayout {
        &self.layout
    }

    /// Number of voxels along x, y, z.
    #[inline]
    pub fn dims(&self) -> [usize; 3] {
        self.layout.dims
    }

    /// Number of voxels.
    #[inline]
    pub fn num_voxels(&self) -> usize {
        self.material.len()
    }

    /// The grid's bounding box (cm).
    #[inline]
    pub fn bounds(&self) -> Aabb {
        self.bounds
    }

    /// The world around the grid.
    pub fn world(&self) -> &World {
        &self.world
    }

    /// Material indices per voxel (into [`VoxelGrid::material_names`]).
    pub fn material_indices(&self) -> &MaterialIndices {
        &self.material
    }

    /// Per-voxel densities (g/cm³), when the grid has them.
    pub fn densities(&self) -> Option<&[f32]> {
        self.density.as_deref()
    }

    /// Material names, in index order.
    pub fn material_names(&self) -> &[String] {
        &self.material_names
    }

    /// Nominal densities (g/cm³) per material as supplied (NaN where not supplied).
    pub fn nominal_densities(&self) -> &[f64] {
        &self.nominal_density_g_cm3
    }

    /// Largest density (g/cm³) of any voxel of each material, for a majorant in Woodcock
    /// tracking (NaN for a material no voxel uses).
    pub fn max_density_by_material(&self) -> Vec<f64> {
        let mut m = vec![f64::NAN; self.material_names.len()];
        for i in 0..self.num_voxels() {
            let k = self.material.get(i) as usize;
            let d = self.voxel_density(i, k);
            // Also replaces the NaN start value.
            if m[k].is_nan() || d > m[k] {
                m[k] = d;
            }
        }
        m
    }

    /// Heap memory held by the voxel arrays (bytes).
    pub fn heap_bytes(&self) -> usize {
        self.material.len() * self.material.bytes_per_voxel()
            + self.density.as_ref().map_or(0, |d| d.len() * 4)
    }

    #[inline]
    fn voxel_density(&self, i: usize, material: usize) -> f64 {
        match &self.density {
            Some(d) => d[i] as f64,
            None => self.nominal_density_g_cm3[material],
        }
    }

    /// The material index and density (g/cm³) of voxel `i`.
    ///
    /// # Panics
    /// For `i ≥ num_voxels()`.
    #[inline]
    pub fn voxel_medium(&self, i: usize) -> (u16, f64) {
        let m = self.material.get(i);
        (m, self.voxel_density(i, m as usize))
    }

    /// The voxel containing `p` as (index, [ix, iy, iz]), or `None` outside the (closed) grid or
    /// for NaN; the same voxel as [`VoxelGrid::voxel_at`].
    #[inline]
    pub fn cell_at(&self, p: Vec3) -> Option<(usize, [usize; 3])> {
        if !self.bounds.contains(p) {
            return None;
        }
        let [nx, ny, _] = self.layout.dims;
        let ix = self.cell_along(0, p.x, 0.0);
        let iy = self.cell_along(1, p.y, 0.0);
        let iz = self.cell_along(2, p.z, 0.0);
        Some((ix + nx * (iy + ny * iz), [ix, iy, iz]))
    }

    /// The material index and density of voxel `i` at cell `c` (as from [`VoxelGrid::cell_at`]):
    /// the same answer as [`VoxelGrid::voxel_medium`], read from the brick table when the voxel's
    /// 8 × 8 × 8 brick is uniform. The table is built on the first call (one pass over the grid).
    #[inline]
    pub fn medium_at_cell(&self, i: usize, c: [usize; 3]) -> (u16, f64) {
        let b = self.brick_map();
        let cell = b.cells[b.index([c[0] >> BRICK_SHIFT, c[1] >> BRICK_SHIFT, c[2] >> BRICK_SHIFT])];
        if cell.material != MIXED {
            (cell.material, b.densities[cell.slot as usize])
        } else {
            self.voxel_medium(i)
        }
    }

    /// Builds the brick tables that delta tracking walks (otherwise built by the first walk),
    /// so that a run's set-up, not its first history, pays for them.
    pub fn prepare_tracking(&self) {
        let _ = self.brick_map();
    }

    /// The brick table, built on first use.
    #[inline(always)]
    pub(crate) fn brick_map(&self) -> &BrickMap {
        self.bricks.get_or_init(|| BrickMap::build(self))
    }

    /// The voxel coordinate along axis `a` of a point at `x`: the floor of its cell position,
    /// clamped to `lo..=hi` (no correction against the exact plane positions: for points that
    /// rounding may put on the wrong side of a plane, any of the two voxels will do).
    #[inline(always)]
    pub(crate) fn floor_cell(&self, a: usize, x: f64, lo: usize, hi: usize) -> usize {
        let f = (x - self.layout.origin_cm.axis(a)) * self.inv_size.axis(a);
        // `as usize` saturates: negative and NaN give 0.
        (f as usize).clamp(lo, hi)
    }

    /// Index of the voxel containing `p`, or `None` outside the (closed) grid or for NaN.
    /// Exact against the plane positions: voxel `k` on an axis holds `plane_k ≤ x < plane_k+1`
    /// (the last voxel also holds its high face).
    #[inline]
    pub fn voxel_at(&self, p: Vec3) -> Option<usize> {
        self.cell_at(p).map(|(i, _)| i)
    }

    /// The region containing `p`: a voxel, the world (inside the closed world box), or
    /// [`Region::ESCAPED`]. For starting points only.
    #[inline]
    pub fn locate(&self, p: Vec3) -> Region {
        if !self.world.bounds.contains(p) {
            return Region::ESCAPED;
        }
        match self.voxel_at(p) {
            Some(i) => Region::object(i),
            None => Region::WORLD,
        }
    }

    /// The medium of region `r`: `(material index, density g/cm³)` or `None` for vacuum.
    /// Without a density array the density is the nominal one supplied by
    /// [`VoxelGrid::set_nominal_densities`] (NaN if none was).
    #[inline]
    pub fn material_of(&self, r: Region) -> Option<(u16, f64)> {
        match r.index() {
            Some(i) if i < self.material.len() => Some(self.voxel_medium(i)),
            Some(_) => None,
            None if r == Region::WORLD => self.world.medium.map(Medium::pair),
            None => None,
        }
    }

    /// Distance (cm) along unit `d` from `p` to the grid: zero inside or on the surface,
    /// `None` when the ray misses the grid or the grid lies behind it.
    #[inline]
    pub fn distance_to_grid(&self, p: Vec3, d: Vec3) -> Option<f64> {
        let c = self.bounds.chord(p, d)?;
        if c.exit_cm < 0.0 {
            return None;
        }
        Some(c.enter_cm.max(0.0))
    }

    /// The voxel coordinate along axis `a` of a point at `x` moving with component `da`:
    /// floor of the cell position, clamped into the grid, with a point on an inner plane moving
    /// down attributed to the cell below.
    #[inline]
    fn cell_along(&self, a: usize, x: f64, da: f64) -> usize {
        let n = self.layout.dims[a];
        let f = (x - self.layout.origin_cm.axis(a)) * self.inv_size.axis(a);
        // `as usize` saturates: negative and NaN give 0.
        let mut i = (f.max(0.0) as usize).min(n - 1);
        // Correct the rounding of the division against the exact plane positions.
        if i > 0 && x < self.layout.plane_cm(a, i) {
            i -= 1;
        } else if i + 1 < n && x >= self.layout.plane_cm(a, i + 1) {
            i += 1;
        }
        if da < 0.0 && i > 0 && x == self.layout.plane_cm(a, i) {
            i -= 1;
        }
        i
    }

    /// The next boundary along unit direction `d` from `p` inside region `r` and the region
    /// entered there (see the module documentation for the conventions).
    #[inline]
    pub fn step(&self, p: Vec3, d: Vec3, r: Region) -> Boundary {
        debug_assert!(
            (d.norm_squared() - 1.0).abs() < 1e-9,
            "direction {d:?} is not a unit vector"
        );
        match r.index() {
            Some(i) => self.step_voxel(i, p, d),
            None if r == Region::WORLD => self.step_world(p, d),
            None => Boundary {
                distance_cm: 0.0,
                next: Region::ESCAPED,
                axis: Axis::None,
                plane_cm: 0.0,
            },
        }
    }

    #[inline]
    fn step_voxel(&self, i: usize, p: Vec3, d: Vec3) -> Boundary {
        let ijk = self.layout.ijk(i);
        let dims = self.layout.dims;
        let stride = [1, dims[0], dims[0] * dims[1]];
        let mut best = Boundary {
            distance_cm: f64::INFINITY,
            next: Region::ESCAPED,
            axis: Axis::None,
            plane_cm: 0.0,
        };
        for a in 0..3 {
            let da = d.axis(a);
            if da == 0.0 {
                continue;
            }
            let (k, inside, face) = if da > 0.0 {
                (ijk[a] + 1, ijk[a] + 1 < dims[a], 2 * a + 1)
            } else {
                (ijk[a], ijk[a] > 0, 2 * a)
            };
            let plane = self.layout.plane_cm(a, k);
            let t = (plane - p.axis(a)) / da;
            if t < best.distance_cm {
                let next = if inside {
                    Region::object(if da > 0.0 {
                        i + stride[a]
                    } else {
                        i - stride[a]
                    })
                } else if self.face_escapes[face] {
                    Region::ESCAPED
                } else {
                    Region::WORLD
                };
                best = Boundary {
                    distance_cm: t,
                    next,
                    axis: Axis::from_index(a),
                    plane_cm: plane,
                };
            }
        }
        best.distance_cm = best.distance_cm.max(0.0);
        best
    }

    #[inline]
    fn step_world(&self, p: Vec3, d: Vec3) -> Boundary {
        let (t_out, axis_out, plane_out) = self.world.bounds.exit(p, d);
        if let Some(c) = self.bounds.chord(p, d) {
            let t_in = c.enter_cm.max(0.0);
            if c.exit_cm - t_in > self.skin_cm && t_in <= t_out {
                let q = p + d * t_in;
                let mut ijk = [0usize; 3];
                for (a, cell) in ijk.iter_mut().enumerate() {
                    *cell = self.cell_along(a, q.axis(a), d.axis(a));
                }
                let (axis, plane_cm) = match c.enter_axis.index() {
                    Some(a) if c.enter_cm >= 0.0 => {
                        let da = d.axis(a);
                        ijk[a] = if da > 0.0 { 0 } else { self.layout.dims[a] - 1 };
                        let pl = if da > 0.0 {
                            self.bounds.min_cm.axis(a)
                        } else {
                            self.bounds.max_cm.axis(a)
                        };
                        (Axis::from_index(a), pl)
                    }
                    _ => (Axis::None, 0.0),
                };
                return Boundary {
                    distance_cm: t_in,
                    next: Region::object(self.layout.index(ijk)),
                    axis,
                    plane_cm,
                };
            }
        }
        Boundary {
            distance_cm: t_out,
            next: Region::ESCAPED,
            axis: axis_out,
            plane_cm: plane_out,
        }
    }

    /// The voxels crossed by the ray `p + t d`, `0 ≤ t ≤ max_distance_cm`, in order, with the
    /// path length in each (an allocation-free iterator; Amanatides–Woo traversal with plane
    /// distances recomputed from plane indices, so no error accumulates along the ray).
    /// A ray starting outside the grid starts at its entry point.
    #[inline]
    pub fn walk(&self, p: Vec3, d: Vec3, max_distance_cm: f64) -> VoxelWalk<'_> {
        VoxelWalk::new(self, p, d, max_distance_cm)
    }

    /// Calls `f` for every voxel crossed by the ray (see [`VoxelGrid::walk`]).
    #[inline]
    pub fn traverse<F: FnMut(VoxelSegment)>(
        &self,
        p: Vec3,
        d: Vec3,
        max_distance_cm: f64,
        mut f: F,
    ) {
        for s in self.walk(p, d, max_distance_cm) {
            f(s);
        }
    }
}

/// Allocation-free iterator over the voxels a ray crosses; see [`VoxelGrid::walk`].
#[derive(Clone, Debug)]
pub struct VoxelWalk<'a> {
    layout: &'a GridLayout,
    p: Vec3,
    inv_d: [f64; 3],
    ijk: [usize; 3],
    t_cm: f64,
    t_end_cm: f64,
    t_next: [f64; 3],
    done: bool,
}

impl<'a> VoxelWalk<'a> {
    fn new(g: &'a VoxelGrid, p: Vec3, d: Vec3, max_distance_cm: f64) -> Self {
        let mut w = VoxelWalk {
            layout: &g.layout,
            p,
            inv_d: [1.0 / d.x, 1.0 / d.y, 1.0 / d.z],
            ijk: [0; 3],
            t_cm: 0.0,
            t_end_cm: 0.0,
            t_next: [f64::INFINITY; 3],
            done: true,
        };
        let Some(c) = g.bounds.chord(p, d) else {
            return w;
        };
        let t0 = c.enter_cm.max(0.0);
        let t1 = c.exit_cm.min(max_distance_cm);
        // Empty (or NaN) interval: nothing to walk.
        if t0.is_nan() || t1.is_nan() || t0 >= t1 {
            return w;
        }
        let q = p + d * t0;
        for a in 0..3 {
            w.ijk[a] = g.cell_along(a, q.axis(a), d.axis(a));
        }
        if c.enter_cm >= 0.0 {
            if let Some(a) = c.enter_axis.index() {
                w.ijk[a] = if d.axis(a) > 0.0 {
                    0
                } else {
                    g.layout.dims[a] - 1
                };
            }
        }
        for a in 0..3 {
            w.t_next[a] = w.plane_time(a, d.axis(a));
        }
        w.t_cm = t0;
        w.t_end_cm = t1;
        w.done = false;
        w
    }

    /// Distance to the next plane along axis `a` from the current cell.
    #[inline]
    fn plane_time(&self, a: usize, da: f64) -> f64 {
        if da > 0.0 {
            (self.layout.plane_cm(a, self.ijk[a] + 1) - self.p.axis(a)) * self.inv_d[a]
        } else if da < 0.0 {
            (self.layout.plane_cm(a, self.ijk[a]) - self.p.axis(a)) * self.inv_d[a]
        } else {
            f64::INFINITY
        }
    }

    /// Distance along the ray where the walk ends: the grid exit or the maximum distance.
    pub fn end_cm(&self) -> f64 {
        self.t_end_cm
    }
}

impl Iterator for VoxelWalk<'_> {
    type Item = VoxelSegment;

    #[inline]
    fn next(&mut self) -> Option<VoxelSegment> {
        if self.done {
            return None;
        }
        let mut a = 0;
        if self.t_next[1] < self.t_next[a] {
            a = 1;
        }
        if self.t_next[2] < self.t_next[a] {
            a = 2;
        }
        let tn = self.t_next[a];
        let end = tn.min(self.t_end_cm).max(self.t_cm);
        let seg = VoxelSegment {
            index: self.layout.index(self.ijk),
            ijk: self.ijk,
            start_cm: self.t_cm,
            length_cm: end - self.t_cm,
        };
        self.t_cm = end;
        if tn >= self.t_end_cm {
            self.done = true;
        } else {
            let da_pos = self.inv_d[a] > 0.0;
            if da_pos {
                if self.ijk[a] + 1 >= self.layout.dims[a] {
                    self.done = true;
                    return Some(seg);
                }
                self.ijk[a] += 1;
            } else {
                if self.ijk[a] == 0 {
                    self.done = true;
                    return Some(seg);
                }
                self.ijk[a] -= 1;
            }
            self.t_next[a] = self.plane_time(a, if da_pos { 1.0 } else { -1.0 });
        }
        Some(seg)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn grid(dims: [usize; 3]) -> VoxelGrid {
        let n = dims.iter().product();
        let layout = GridLayout {
            dims,
            voxel_size_cm: Vec3::new(1.0, 0.5, 2.0),
            origin_cm: Vec3::new(-1.0, 0.0, 1.0),
        };
        let mats = MaterialIndices::U8((0..n).map(|i| (i % 3) as u8).collect());
        VoxelGrid::new(layout, mats, None, vec!["a".into(), "b".into(), "c".into()]).unwrap()
    }

    /// The brick table answers exactly as the per-voxel arrays, for uniform and mixed bricks,
    /// partial bricks at the grid's edges, per-voxel densities, and after new nominal densities.
    #[test]
    fn brick_lookup_equals_voxel_lookup() {
        let dims = [19, 10, 17];
        let n: usize = dims.iter().product();
        let layout = GridLayout { dims, voxel_size_cm: Vec3::new(0.3, 0.5, 0.2), origin_cm: Vec3::new(-1.0, 0.0, 1.0) };
        let ijk = |i: usize| [i % dims[0], (i / dims[0]) % dims[1], i / (dims[0] * dims[1])];
        // Material 1 in a block that covers some bricks whole and cuts others; 2 in one voxel.
        let mats: Vec<u8> = (0..n).map(|i| { let [x, _, z] = ijk(i); if i == 777 { 2 } else if x < 11 && z >= 3 { 1 } else { 0 } }).collect();
        let dens: Vec<f32> = (0..n).map(|i| if ijk(i)[1] == 9 { 1.5 } else { 1.0 }).collect();
        for density in [None, Some(dens)] {
            let mut g = VoxelGrid::new(layout, MaterialIndices::U8(mats.clone()), density.clone(), vec!["a".into(), "b".into(), "c".into()]).unwrap();
            g.set_nominal_densities(&[1.0, 2.0, 3.0]).unwrap();
            let check = |g: &VoxelGrid| {
                for i in 0..n {
                    let c = ijk(i);
                    let (a, b) = (g.medium_at_cell(i, c), g.voxel_medium(i));
                    assert!(a.0 == b.0 && a.1.to_bits() == b.1.to_bits(), "voxel {i} {c:?}: {a:?} vs {b:?}");
                }
            };
            check(&g);
            let uniform = g.bricks.get().unwrap().cells.iter().filter(|c| c.material != MIXED).count();
            assert!(uniform > 0 && uniform < g.bricks.get().unwrap().cells.len(), "both kinds of brick are exercised");
            // New nominal densities rebuild the table.
            g.set_nominal_densities(&[0.5, 2.5, 3.5]).unwrap();
            check(&g);
        }
    }

    #[test]
    fn index_order_is_x_fastest() {
        let g = grid([3, 4, 5]);
        assert_eq!(g.layout().index([1, 2, 3]), 1 + 3 * (2 + 4 * 3));
        assert_eq!(g.layout().ijk(1 + 3 * (2 + 4 * 3)), [1, 2, 3]);
        assert_eq!(g.voxel_at(Vec3::new(-0.5, 0.25, 1.5)), Some(0));
        assert_eq!(
            g.voxel_at(Vec3::new(0.0, 0.5, 3.0)),
            Some(g.layout().index([1, 1, 1]))
        );
        // High faces belong to the last voxel; beyond is outside.
        assert_eq!(
            g.voxel_at(Vec3::new(2.0, 2.0, 11.0)),
            Some(g.num_voxels() - 1)
        );
        assert_eq!(g.voxel_at(Vec3::new(2.0 + 1e-9, 1.0, 2.0)), None);
        assert_eq!(g.voxel_at(Vec3::new(f64::NAN, 1.0, 2.0)), None);
    }

    #[test]
    fn walk_along_x_axis() {
        let g = grid([3, 4, 5]);
        let segs: Vec<_> = g.walk(Vec3::new(-5.0, 0.25, 1.5), Vec3::X, 100.0).collect();
        assert_eq!(segs.len(), 3);
        assert_eq!(
            segs.iter().map(|s| s.ijk[0]).collect::<Vec<_>>(),
            vec![0, 1, 2]
        );
        assert!(segs.iter().all(|s| s.length_cm == 1.0));
        assert_eq!(segs[0].start_cm, 4.0);
        // Cut short by the maximum distance.
        let segs: Vec<_> = g.walk(Vec3::new(-5.0, 0.25, 1.5), Vec3::X, 5.5).collect();
        assert_eq!(
            segs.iter().map(|s| s.length_cm).collect::<Vec<_>>(),
            vec![1.0, 0.5]
        );
        assert_eq!(
            g.distance_to_grid(Vec3::new(-5.0, 0.25, 1.5), Vec3::X),
            Some(4.0)
        );
        assert_eq!(
            g.distance_to_grid(Vec3::new(-5.0, 0.25, 1.5), -Vec3::X),
            None
        );
    }

    #[test]
    fn out_of_range_material_names_the_voxel() {
        let layout = GridLayout {
            dims: [2, 2, 2],
            voxel_size_cm: Vec3::new(1.0, 1.0, 1.0),
            origin_cm: Vec3::ZERO,
        };
        let mut m = vec![0u8; 8];
        m[layout.index([1, 0, 1])] = 5;
        let e = VoxelGrid::new(
            layout,
            MaterialIndices::U8(m),
            None,
            vec!["water".into(), "bone".into()],
        )
        .unwrap_err();
        assert_eq!(
            e,
            GeometryError::MaterialOutOfRange {
                ix: 1,
                iy: 0,
                iz: 1,
                value: 5,
                count: 2
            }
        );
        let mut dens = vec![1.0f32; 8];
        dens[layout.index([0, 1, 1])] = -0.5;
        let e = VoxelGrid::new(
            layout,
            MaterialIndices::U8(vec![0; 8]),
            Some(dens),
            vec!["water".into()],
        )
        .unwrap_err();
        assert_eq!(
            e,
            GeometryError::BadVoxelDensity {
                ix: 0,
                iy: 1,
                iz: 1,
                value: -0.5
            }
        );
        assert!(e.to_string().contains("(0, 1, 1)"), "{e}");
    }

    #[test]
    fn nominal_densities_are_used_without_a_density_array() {
        let mut g = grid([2, 2, 2]);
        assert!(!g.densities_known());
        g.set_nominal_densities(&[1.0, 1.85, 0.0012]).unwrap();
        assert!(g.densities_known());
        assert_eq!(g.material_of(Region(1)), Some((1, 1.85)));
        assert_eq!(g.material_of(Region::WORLD), None);
        assert!(g.set_nominal_densities(&[1.0]).is_err());
    }

    #[test]
    fn majorant_densities_per_material() {
        let layout = GridLayout {
            dims: [4, 1, 1],
            voxel_size_cm: Vec3::new(1.0, 1.0, 1.0),
            origin_cm: Vec3::ZERO,
        };
        let m = MaterialIndices::U8(vec![0, 1, 0, 1]);
        let g = VoxelGrid::new(
            layout,
            m,
            Some(vec![1.0, 1.5, 1.25, 0.5]),
            vec!["a".into(), "b".into(), "unused".into()],
        )
        .unwrap();
        let maj = g.max_density_by_material();
        assert_eq!(&maj[..2], &[1.25, 1.5]);
        assert!(maj[2].is_nan());
        assert_eq!(g.heap_bytes(), 4 + 16);
    }
}
