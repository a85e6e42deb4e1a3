//! Regions, boundary crossings, axis-aligned boxes and the medium of a region.

use crate::Vec3;
use serde::{Deserialize, Serialize};

/// A region of a geometry: a slab layer index, a voxel index, the world around the object,
/// or "escaped" (outside the world box; the photon is lost to the problem).
///
/// Regions are small integers so they can be stored per photon and compared cheaply. The two
/// largest `u32` values are reserved for [`Region::WORLD`] and [`Region::ESCAPED`], so an object
/// has at most `u32::MAX - 1` regions (layers or voxels).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Region(pub u32);

impl Region {
    /// The world medium around the object (vacuum or a material such as air), inside the world box.
    pub const WORLD: Region = Region(u32::MAX - 1);
    /// Outside the world box: the photon has left the problem and is not followed further.
    pub const ESCAPED: Region = Region(u32::MAX);
    /// Largest number of object regions (layers or voxels) a geometry may have.
    pub const MAX_OBJECT_REGIONS: u64 = (u32::MAX - 1) as u64;

    /// The region of object cell `i` (layer or voxel index).
    #[inline]
    pub fn object(i: usize) -> Region {
        debug_assert!((i as u64) < Self::MAX_OBJECT_REGIONS);
        Region(i as u32)
    }

    /// True for [`Region::ESCAPED`].
    #[inline]
    pub fn is_escaped(self) -> bool {
        self == Region::ESCAPED
    }

    /// True for [`Region::WORLD`].
    #[inline]
    pub fn is_world(self) -> bool {
        self == Region::WORLD
    }

    /// The layer or voxel index, or `None` for the world and for escaped photons.
    #[inline]
    pub fn index(self) -> Option<usize> {
        if self.0 < u32::MAX - 1 {
            Some(self.0 as usize)
        } else {
            None
        }
    }
}

/// The axis whose plane a boundary crossing lies on.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Axis {
    /// A plane x = const.
    X,
    /// A plane y = const.
    Y,
    /// A plane z = const.
    Z,
    /// No plane is known (for example the photon was already on the far side of the boundary);
    /// [`Boundary::landing`] then does not snap.
    None,
}

impl Axis {
    /// The axis number 0, 1, 2, or `None` for [`Axis::None`].
    #[inline]
    pub fn index(self) -> Option<usize> {
        match self {
            Axis::X => Some(0),
            Axis::Y => Some(1),
            Axis::Z => Some(2),
            Axis::None => None,
        }
    }

    /// The axis for number 0, 1 or 2.
    #[inline]
    pub fn from_index(a: usize) -> Axis {
        match a {
            0 => Axis::X,
            1 => Axis::Y,
            2 => Axis::Z,
            _ => Axis::None,
        }
    }
}

/// The next boundary along a ray, as returned by the `step` queries.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Boundary {
    /// Distance (cm) from the query point to the boundary along the unit direction; never
    /// negative, never NaN for finite input. It may be zero when the point lies on the boundary.
    pub distance_cm: f64,
    /// The region entered on crossing the boundary ([`Region::ESCAPED`] when leaving the world).
    pub next: Region,
    /// The axis of the boundary plane crossed.
    pub axis: Axis,
    /// The coordinate of the boundary plane along `axis` (cm).
    pub plane_cm: f64,
}

impl Boundary {
    /// The crossing point `p + distance_cm * d`, with its coordinate along the crossed axis set
    /// exactly to the plane's. Using this rather than `p + d * distance_cm` puts the photon exactly
    /// on the boundary, so no rounding leaves it a hair short of the region it was handed to.
    #[inline]
    pub fn landing(&self, p: Vec3, d: Vec3) -> Vec3 {
        let q = p + d * self.distance_cm;
        match self.axis.index() {
            Some(a) => q.with_axis(a, self.plane_cm),
            None => q,
        }
    }
}

/// An axis-aligned box `[min, max]` (cm).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Aabb {
    /// Lowest corner (cm).
    pub min_cm: Vec3,
    /// Highest corner (cm).
    pub max_cm: Vec3,
}

/// Where a ray meets a box: the entry and exit distances and the entry plane.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Chord {
    /// Distance to the entry point (cm); negative when the ray starts inside.
    pub enter_cm: f64,
    /// Distance to the exit point (cm).
    pub exit_cm: f64,
    /// Axis of the entry plane ([`Axis::None`] when every axis is parallel and inside).
    pub enter_axis: Axis,
    /// Axis of the exit plane.
    pub exit_axis: Axis,
}

impl Aabb {
    /// The box with the given corners (not checked; see [`Aabb::is_valid`]).
    pub const fn new(min_cm: Vec3, max_cm: Vec3) -> Self {
        Aabb { min_cm, max_cm }
    }

    /// The box centred on `center` with half-widths `half`.
    pub fn centered(center: Vec3, half: Vec3) -> Self {
        Aabb {
            min_cm: center - half,
            max_cm: center + half,
        }
    }

    /// True when every corner coordinate is finite and min ≤ max on every axis.
    pub fn is_valid(&self) -> bool {
        self.min_cm.is_finite()
            && self.max_cm.is_finite()
            && self.min_cm.x <= self.max_cm.x
            && self.min_cm.y <= self.max_cm.y
            && self.min_cm.z <= self.max_cm.z
    }

    /// True when `p` is inside or on the surface (closed box).
    #[inline]
    pub fn contains(&self, p: Vec3) -> bool {
        p.x >= self.min_cm.x
            && p.x <= self.max_cm.x
            && p.y >= self.min_cm.y
            && p.y <= self.max_cm.y
            && p.z >= self.min_cm.z
            && p.z <= self.max_cm.z
    }

    /// True when `other` lies inside this box (surfaces may touch).
    pub fn contains_box(&self, other: &Aabb) -> bool {
        self.contains(other.min_cm) && self.contains(other.max_cm)
    }

    /// Extent along each axis (cm).
    #[inline]
    pub fn size(&self) -> Vec3 {
        self.max_cm - self.min_cm
    }

    /// The largest absolute corner coordinate, a length scale for rounding tolerances.
    pub fn scale_cm(&self) -> f64 {
        let a = self.min_cm;
        let b = self.max_cm;
        [a.x, a.y, a.z, b.x, b.y, b.z]
            .iter()
            .fold(0.0f64, |m, v| m.max(v.abs()))
    }

    /// Distance (cm, ≥ 0) from `p`, taken to be inside, to the box surface along unit `d`,
    /// with the axis and coordinate of the exit plane. A point already outside gives zero.
    #[inline]
    pub fn exit(&self, p: Vec3, d: Vec3) -> (f64, Axis, f64) {
        let mut t = f64::INFINITY;
        let mut axis = Axis::None;
        let mut plane = 0.0;
        for a in 0..3 {
            let da = d.axis(a);
            let (ta, pl) = if da > 0.0 {
                let pl = self.max_cm.axis(a);
                ((pl - p.axis(a)) / da, pl)
            } else if da < 0.0 {
                let pl = self.min_cm.axis(a);
                ((pl - p.axis(a)) / da, pl)
            } else {
                continue;
            };
            if ta < t {
                t = ta;
                axis = Axis::from_index(a);
                plane = pl;
            }
        }
        (t.max(0.0), axis, plane)
    }

    /// Entry and exit distances of the line `p + t d` through the closed box (slab method),
    /// or `None` when the line misses it. A line parallel to a face and lying on it counts as
    /// inside. The returned interval may lie wholly behind `p` (negative distances).
    #[inline]
    pub fn chord(&self, p: Vec3, d: Vec3) -> Option<Chord> {
        let mut t0 = f64::NEG_INFINITY;
        let mut t1 = f64::INFINITY;
        let mut a0 = Axis::None;
        let mut a1 = Axis::None;
        for a in 0..3 {
            let da = d.axis(a);
            let pa = p.axis(a);
            let lo = self.min_cm.axis(a);
            let hi = self.max_cm.axis(a);
            if da == 0.0 {
                if pa < lo || pa > hi {
                    return None;
                }
                continue;
            }
            let inv = 1.0 / da;
            let (ta, tb) = if inv > 0.0 {
                ((lo - pa) * inv, (hi - pa) * inv)
            } else {
                ((hi - pa) * inv, (lo - pa) * inv)
            };
            if ta > t0 {
                t0 = ta;
                a0 = Axis::from_index(a);
            }
            if tb < t1 {
                t1 = tb;
                a1 = Axis::from_index(a);
            }
        }
        if t0 <= t1 {
            Some(Chord {
                enter_cm: t0,
                exit_cm: t1,
                enter_axis: a0,
                exit_axis: a1,
            })
        } else {
            None
        }
    }
}

/// The medium filling a region: an index into the engine's material list and a mass density.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Medium {
    /// Index into the engine's material list (the geometry knows nothing of physics).
    pub material: u16,
    /// Mass density (g/cm³).
    pub density_g_cm3: f64,
}

impl Medium {
    /// A medium of material `material` at density `density_g_cm3`.
    pub const fn new(material: u16, density_g_cm3: f64) -> Self {
        Medium {
            material,
            density_g_cm3,
        }
    }

    /// The `(material, density)` pair returned by the `material_of` queries.
    #[inline]
    pub fn pair(self) -> (u16, f64) {
        (self.material, self.density_g_cm3)
    }
}

/// The world around an object: a box filled with vacuum or one medium (for example air).
/// Photons leaving the world box escape.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct World {
    /// The medium filling the world outside the object; `None` is vacuum.
    pub medium: Option<Medium>,
    /// The world box (cm). It must contain the object.
    pub bounds: Aabb,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn chord_through_unit_cube() {
        let b = Aabb::new(Vec3::ZERO, Vec3::new(1.0, 1.0, 1.0));
        let c = b.chord(Vec3::new(-1.0, 0.5, 0.5), Vec3::X).unwrap();
        assert_eq!((c.enter_cm, c.exit_cm), (1.0, 2.0));
        assert_eq!((c.enter_axis, c.exit_axis), (Axis::X, Axis::X));
        assert!(b.chord(Vec3::new(-1.0, 1.5, 0.5), Vec3::X).is_none());
        // On a face, parallel to it: inside (closed box).
        assert!(b.chord(Vec3::new(-1.0, 1.0, 0.5), Vec3::X).is_some());
        let (t, ax, pl) = b.exit(Vec3::new(0.5, 0.5, 0.25), -Vec3::Z);
        assert_eq!((t, ax, pl), (0.25, Axis::Z, 0.0));
    }

    #[test]
    fn region_indices() {
        assert_eq!(Region::object(3).index(), Some(3));
        assert_eq!(Region::WORLD.index(), None);
        assert_eq!(Region::ESCAPED.index(), None);
        assert!(Region::ESCAPED.is_escaped() && Region::WORLD.is_world());
    }
}
