//! Typed errors of geometry construction.

use crate::region::Aabb;

/// Invalid geometry description.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum GeometryError {
    /// A slab stack with no layers.
    #[error("the slab stack has no layers; give at least one layer")]
    NoLayers,
    /// More layers or voxels than a region number can hold.
    #[error("{count} regions exceed the limit of {} layers or voxels", crate::Region::MAX_OBJECT_REGIONS - 1)]
    TooManyRegions {
        /// Number asked for.
        count: u64,
    },
    /// A layer thickness that is not finite and positive.
    #[error("layer {layer}: thickness_cm = {value} must be finite and > 0")]
    BadThickness {
        /// Layer index (0 = front).
        layer: usize,
        /// The value given (cm).
        value: f64,
    },
    /// A layer density that is negative or not finite.
    #[error("layer {layer}: density_g_cm3 = {value} must be finite and ≥ 0")]
    BadLayerDensity {
        /// Layer index (0 = front).
        layer: usize,
        /// The value given (g/cm³).
        value: f64,
    },
    /// A world medium density that is negative or not finite.
    #[error("world medium: density_g_cm3 = {value} must be finite and ≥ 0")]
    BadWorldDensity {
        /// The value given (g/cm³).
        value: f64,
    },
    /// A length or coordinate that is not finite (or not positive where a size is needed).
    #[error("{what} = {value} must be finite (and positive for a size)")]
    NonFinite {
        /// The parameter's name.
        what: &'static str,
        /// The value given.
        value: f64,
    },
    /// A world box with non-finite corners or min > max.
    #[error("world box {bounds:?} is invalid: corners must be finite with min ≤ max")]
    BadWorldBox {
        /// The box given.
        bounds: Aabb,
    },
    /// The world box does not contain the object.
    #[error("the world box {world:?} does not contain the object's box {object:?}; enlarge the world box")]
    WorldTooSmall {
        /// The object's bounding box.
        object: Aabb,
        /// The world box given.
        world: Aabb,
    },
    /// A voxel grid with a zero dimension.
    #[error("grid dimensions {dims:?} must all be at least 1")]
    BadDimensions {
        /// The dimensions given (nx, ny, nz).
        dims: [usize; 3],
    },
    /// A data array whose length does not match the grid.
    #[error("{what}: expected {expected} values, found {actual}")]
    DataLength {
        /// Which array.
        what: &'static str,
        /// Number expected.
        expected: usize,
        /// Number found.
        actual: usize,
    },
    /// A voxel whose material index is not in the material table.
    #[error("voxel ({ix}, {iy}, {iz}): material index {value} is out of range; the material table has {count} entries (indices 0–{})", count.saturating_sub(1))]
    MaterialOutOfRange {
        /// Voxel x index.
        ix: usize,
        /// Voxel y index.
        iy: usize,
        /// Voxel z index.
        iz: usize,
        /// The index found.
        value: u16,
        /// Number of materials in the table.
        count: usize,
    },
    /// A voxel whose density is negative or not finite.
    #[error("voxel ({ix}, {iy}, {iz}): density {value} g/cm³ must be finite and ≥ 0")]
    BadVoxelDensity {
        /// Voxel x index.
        ix: usize,
        /// Voxel y index.
        iy: usize,
        /// Voxel z index.
        iz: usize,
        /// The density found (g/cm³).
        value: f32,
    },
    /// A nominal material density that is negative or not finite.
    #[error("material `{material}`: nominal density {value} g/cm³ must be finite and ≥ 0")]
    BadNominalDensity {
        /// Material name.
        material: String,
        /// The value given (g/cm³).
        value: f64,
    },
}
