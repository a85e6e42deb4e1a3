//! dosemill geometry: slab stacks and voxel grids with exact ray traversal.
//!
//! The transport engine follows a photon region by region: it carries the photon's
//! [`Region`], asks [`SlabStack::step`] for the distance to the next boundary and the region
//! beyond it, and looks the medium up with [`SlabStack::material_of`]. The geometry knows
//! nothing of physics: a material is an index into the engine's material list.
//!
//! ```
//! use dosemill_geometry::{Layer, Lateral, Medium, Region, SlabStack, Vec3};
//! let layers = vec![Layer { material: 0, density_g_cm3: 1.0, thickness_cm: 5.0 }];
//! let air = Some(Medium::new(1, 0.0012));
//! let stack = SlabStack::with_margin(0.0, layers, Lateral::Infinite, air, 10.0, (50.0, 50.0)).unwrap();
//! let (mut p, d) = (Vec3::new(0.0, 0.0, -10.0), Vec3::Z);
//! let mut r = stack.locate(p);
//! let mut path_in_water = 0.0;
//! while !r.is_escaped() {
//!     let b = stack.step(p, d, r);
//!     if r == Region(0) { path_in_water += b.distance_cm; }
//!     p = b.landing(p, d);
//!     r = b.next;
//! }
//! assert_eq!(path_in_water, 5.0);
//! ```
#![deny(missing_docs)]

mod bricks;
mod error;
mod geometry;
pub mod phantom;
mod prefetch;
mod region;
mod slab;
mod vec3;
mod voxel;
pub mod voxel_file;

pub use bricks::{BrickMedium, BrickTable, BrickWalk, GridExit, MAX_CLASSES, VARIES};
pub use error::GeometryError;
pub use geometry::Geometry;
pub use prefetch::prefetch;
pub use region::{Aabb, Axis, Boundary, Chord, Medium, Region, World};
pub use slab::{Lateral, Layer, SlabStack};
pub use vec3::Vec3;
pub use voxel::{GridLayout, MaterialIndices, VoxelGrid, VoxelSegment, VoxelWalk};
