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
}
