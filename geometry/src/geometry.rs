//! The closed set of geometries the engine transports through.

use crate::region::{Aabb, Boundary, Medium, Region, World};
use crate::{SlabStack, Vec3, VoxelGrid};

/// A geometry: a slab stack or a voxel grid, each inside its world box. Matched, not boxed, so
/// the per-interaction queries compile to a branch and a direct call.
#[derive(Clone, Debug, PartialEq)]
pub enum Geometry {
    /// Plane-parallel layers.
    Slabs(SlabStack),
    /// A voxel grid.
    Voxels(VoxelGrid),
}

impl Geometry {
    /// The region containing `p` (for starting points; see the crate's boundary conventions).
    #[inline]
    pub fn locate(&self, p: Vec3) -> Region {
        match self {
            Geometry::Slabs(s) => s.locate(p),
            Geometry::Voxels(v) => v.locate(p),
        }
    }

    /// The next boundary along unit `d` from `p` in region `r`, and the region beyond.
    #[inline]
    pub fn step(&self, p: Vec3, d: Vec3, r: Region) -> Boundary {
        match self {
            Geometry::Slabs(s) => s.step(p, d, r),
            Geometry::Voxels(v) => v.step(p, d, r),
        }
    }

    /// `(material index, density g/cm³)` of region `r`, or `None` for vacuum.
    #[inline]
    pub fn material_of(&self, r: Region) -> Option<(u16, f64)> {
        match self {
            Geometry::Slabs(s) => s.material_of(r),
            Geometry::Voxels(v) => v.material_of(r),
        }
    }

    /// The world (medium and box).
    pub fn world(&self) -> &World {
        match self {
            Geometry::Slabs(s) => s.world(),
            Geometry::Voxels(v) => v.world(),
        }
    }

    /// The world box (cm); photons leaving it escape.
    pub fn world_bounds(&self) -> Aabb {
        self.world().bounds
    }

    /// The medium filling the world outside the object (`None` = vacuum).
    pub fn world_medium(&self) -> Option<Medium> {
        self.world().medium
    }

    /// The box occupied by the object (layers or grid).
    pub fn object_bounds(&self) -> Aabb {
        match self {
            Geometry::Slabs(s) => s.block(),
            Geometry::Voxels(v) => v.bounds(),
        }
    }

    /// Number of object regions (layers or voxels); regions `0..num_regions()` are valid
    /// besides [`Region::WORLD`].
    pub fn num_regions(&self) -> usize {
        match self {
            Geometry::Slabs(s) => s.num_layers(),
            Geometry::Voxels(v) => v.num_voxels(),
        }
    }
}

impl From<SlabStack> for Geometry {
    fn from(s: SlabStack) -> Self {
        Geometry::Slabs(s)
    }
}

impl From<VoxelGrid> for Geometry {
    fn from(v: VoxelGrid) -> Self {
        Geometry::Voxels(v)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Workers share one geometry by reference: it must be `Send + Sync` (compile-time check).
    #[test]
    fn geometry_is_shareable_between_threads() {
        fn shareable<T: Send + Sync>() {}
        shareable::<Geometry>();
        shareable::<crate::VoxelWalk<'static>>();
    }
}
