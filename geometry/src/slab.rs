//! Slab stacks: plane-parallel layers along +z inside a world box.
//!
//! # Boundary convention
//! A photon's region is carried by the caller and passed to [`SlabStack::step`]; positions on a
//! boundary are never re-located. `step` looks only at the planes the direction points at, so
//! a point on (or, after rounding, a hair outside) the face it has just crossed still steps
//! correctly through its new region. [`SlabStack::locate`] is for starting points only and uses
//! half-open layers `z_front ≤ z < z_back` with closed lateral faces `|x| ≤ half_x`; a ray
//! from the world lying in the back plane of the last layer (`d.z == 0`) is likewise outside.
//!
//! Ties at edges and corners prefer the lateral exit. A ray entering the stack from the world
//! must cross more than a rounding skin (10⁻¹² of the world's size) of it; a grazing touch of an
//! edge or a face the photon has just left is not an entry. Every step therefore either moves
//! the photon on or hands it to a region from which it can only move forward, and every ray
//! ends in [`Region::ESCAPED`] after at most `layers + 3` steps in exact arithmetic (with
//! rounding, a ray grazing an edge may add a few tiny steps; never an unbounded number).

use crate::region::{Aabb, Axis, Boundary, Medium, Region, World};
use crate::{GeometryError, Vec3};
use serde::{Deserialize, Serialize};

/// One layer of a slab stack.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Layer {
    /// Index into the engine's material list.
    pub material: u16,
    /// Mass density (g/cm³), finite and ≥ 0.
    pub density_g_cm3: f64,
    /// Thickness along z (cm), finite and > 0.
    pub thickness_cm: f64,
}

/// Lateral extent of the layers. In TOML: `"infinite"` or `{ box = { half_x_cm = …, half_y_cm = … } }`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case", deny_unknown_fields)]
pub enum Lateral {
    /// The layers fill the world box laterally (infinite slabs clipped by the world).
    Infinite,
    /// The layers are bounded by |x| ≤ `half_x_cm`, |y| ≤ `half_y_cm` (centred on the z axis).
    Box {
        /// Half-width in x (cm).
        half_x_cm: f64,
        /// Half-width in y (cm).
        half_y_cm: f64,
    },
}

/// A stack of layers along +z starting at `z0_cm`, centred on the z axis, inside a world box.
#[derive(Clone, Debug, PartialEq)]
pub struct SlabStack {
    layers: Vec<Layer>,
    /// Plane positions z_0 … z_n (cm), z_0 = front of layer 0.
    z_cm: Vec<f64>,
    lateral: Lateral,
    world: World,
    /// The block occupied by the layers (laterally clipped to the world).
    block: Aabb,
    /// Lateral exit through each block face leaves the world at once: -x, +x, -y, +y.
    lateral_escapes: [bool; 4],
    /// The world extends in front of layer 0 / behind the last layer.
    world_front: bool,
    world_back: bool,
    skin_cm: f64,
}

impl SlabStack {
    /// Builds a stack of `layers` from `z0_cm` on, with lateral extent `lateral`, inside `world`.
    ///
    /// # Errors
    /// No layers, more than [`Region::MAX_OBJECT_REGIONS`] layers, a thickness that is not
    /// finite and positive, a density that is negative or not finite, an invalid world box, or a
    /// world box that does not contain the layers.
    pub fn new(
        z0_cm: f64,
        layers: Vec<Layer>,
        lateral: Lateral,
        world: World,
    ) -> Result<Self, GeometryError> {
        if layers.is_empty() {
            return Err(GeometryError::NoLayers);
        }
        if layers.len() as u64 >= Region::MAX_OBJECT_REGIONS {
            return Err(GeometryError::TooManyRegions {
                count: layers.len() as u64,
            });
        }
        if !z0_cm.is_finite() {
            return Err(GeometryError::NonFinite {
                what: "z0_cm",
                value: z0_cm,
            });
        }
        let mut z_cm = Vec::with_capacity(layers.len() + 1);
        z_cm.push(z0_cm);
        let mut z = z0_cm;
        for (i, l) in layers.iter().enumerate() {
            if !(l.thickness_cm.is_finite() && l.thickness_cm > 0.0) {
                return Err(GeometryError::BadThickness {
                    layer: i,
                    value: l.thickness_cm,
                });
            }
            if !(l.density_g_cm3.is_finite() && l.density_g_cm3 >= 0.0) {
                return Err(GeometryError::BadLayerDensity {
                    layer: i,
                    value: l.density_g_cm3,
                });
            }
            let next = z + l.thickness_cm;
            if next <= z {
                // Thickness below the rounding of z: the plane would not move.
                return Err(GeometryError::BadThickness {
                    layer: i,
                    value: l.thickness_cm,
                });
            }
            z = next;
            z_cm.push(z);
        }
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
        let wb = world.bounds;
        let (x_lo, x_hi, y_lo, y_hi) = match lateral {
            Lateral::Infinite => (wb.min_cm.x, wb.max_cm.x, wb.min_cm.y, wb.max_cm.y),
            Lateral::Box {
                half_x_cm,
                half_y_cm,
            } => {
                if !(half_x_cm.is_finite() && half_x_cm > 0.0) {
                    return Err(GeometryError::NonFinite {
                        what: "half_x_cm",
                        value: half_x_cm,
                    });
                }
                if !(half_y_cm.is_finite() && half_y_cm > 0.0) {
                    return Err(GeometryError::NonFinite {
                        what: "half_y_cm",
                        value: half_y_cm,
                    });
                }
                (-half_x_cm, half_x_cm, -half_y_cm, half_y_cm)
            }
        };
        let block = Aabb::new(Vec3::new(x_lo, y_lo, z0_cm), Vec3::new(x_hi, y_hi, z));
        if !wb.contains_box(&block) || x_lo >= x_hi || y_lo >= y_hi {
            return Err(GeometryError::WorldTooSmall {
                object: block,
                world: wb,
            });
        }
        let lateral_escapes = [
            x_lo == wb.min_cm.x,
            x_hi == wb.max_cm.x,
            y_lo == wb.min_cm.y,
            y_hi == wb.max_cm.y,
        ];
        let skin_cm = 1e-12 * wb.scale_cm().max(1.0);
        Ok(SlabStack {
            layers,
            z_cm,
            lateral,
            world,
            block,
            lateral_escapes,
            world_front: wb.min_cm.z < z0_cm,
            world_back: wb.max_cm.z > z,
            skin_cm,
        })
    }

    /// A stack inside a world box that extends `margin_cm` beyond the layers on every side
    /// (for [`Lateral::Infinite`] the world's lateral half-widths are `lateral_half_cm`, and the
    /// margin applies along z only).
    ///
    /// # Errors
    /// As [`SlabStack::new`], and for a negative or non-finite margin.
    pub fn with_margin(
        z0_cm: f64,
        layers: Vec<Layer>,
        lateral: Lateral,
        world_medium: Option<Medium>,
        margin_cm: f64,
        lateral_half_cm: (f64, f64),
    ) -> Result<Self, GeometryError> {
        if !(margin_cm.is_finite() && margin_cm >= 0.0) {
            return Err(GeometryError::NonFinite {
                what: "margin_cm",
                value: margin_cm,
            });
        }
        let total: f64 = layers.iter().map(|l| l.thickness_cm).sum();
        let (hx, hy) = match lateral {
            Lateral::Infinite => lateral_half_cm,
            Lateral::Box {
                half_x_cm,
                half_y_cm,
            } => (half_x_cm + margin_cm, half_y_cm + margin_cm),
        };
        let bounds = Aabb::new(
            Vec3::new(-hx, -hy, z0_cm - margin_cm),
            Vec3::new(hx, hy, z0_cm + total + margin_cm),
        );
        SlabStack::new(
            z0_cm,
            layers,
            lateral,
            World {
                medium: world_medium,
                bounds,
            },
        )
    }

    /// Number of layers.
    #[inline]
    pub fn num_layers(&self) -> usize {
        self.layers.len()
    }

    /// The layers, front (lowest z) first.
    pub fn layers(&self) -> &[Layer] {
        &self.layers
    }

    /// Front and back plane of layer `i` (cm), `z_front < z_back`.
    ///
    /// # Panics
    /// For `i ≥ num_layers()`.
    #[inline]
    pub fn layer_bounds(&self, i: usize) -> (f64, f64) {
        (self.z_cm[i], self.z_cm[i + 1])
    }

    /// All plane positions z_0 … z_n (cm).
    pub fn planes_cm(&self) -> &[f64] {
        &self.z_cm
    }

    /// Total thickness of the stack (cm).
    #[inline]
    pub fn total_thickness_cm(&self) -> f64 {
        self.z_cm[self.layers.len()] - self.z_cm[0]
    }

    /// The lateral extent as given.
    pub fn lateral(&self) -> Lateral {
        self.lateral
    }

    /// The world around the stack.
    pub fn world(&self) -> &World {
        &self.world
    }

    /// The box occupied by the layers (laterally clipped to the world box).
    pub fn block(&self) -> Aabb {
        self.block
    }

    /// The region containing `p`: a layer (half-open in z, closed laterally), the world (inside
    /// the closed world box), or [`Region::ESCAPED`]. For starting points only; see the module
    /// documentation for positions on boundaries during transport.
    #[inline]
    pub fn locate(&self, p: Vec3) -> Region {
        if !self.world.bounds.contains(p) {
            return Region::ESCAPED;
        }
        let b = &self.block;
        let n = self.layers.len();
        if p.x >= b.min_cm.x
            && p.x <= b.max_cm.x
            && p.y >= b.min_cm.y
            && p.y <= b.max_cm.y
            && p.z >= self.z_cm[0]
            && p.z < self.z_cm[n]
        {
            // Number of planes at or below p.z, minus one.
            let k = self.z_cm.partition_point(|&z| z <= p.z);
            return Region::object((k - 1).min(n - 1));
        }
        Region::WORLD
    }

    /// Mass thickness along the straight segment from `p` along unit `d` for `length_cm`, in
    /// closed form when the segment stays inside the lateral prism of the block (both ends
    /// within its x and y range; the prism is convex, so the whole segment is) and is not
    /// parallel to the planes: each layer, and the world medium inside the world box, is crossed
    /// for (overlap in z) / |d.z|. Calls `f(material, density × path length)` for every medium
    /// crossed, in no particular order, and returns true; returns false and calls nothing when
    /// the segment leaves the prism or `d.z == 0` (then step through the regions instead).
    #[inline]
    pub fn prism_mass_thickness(&self, p: Vec3, d: Vec3, length_cm: f64, mut f: impl FnMut(u16, f64)) -> bool {
        let q = p + d * length_cm;
        let b = &self.block;
        let inside = |v: Vec3| v.x >= b.min_cm.x && v.x <= b.max_cm.x && v.y >= b.min_cm.y && v.y <= b.max_cm.y;
        if !(d.z != 0.0 && length_cm >= 0.0 && length_cm.is_finite() && inside(p) && inside(q)) {
            return false;
        }
        let inv = 1.0 / d.z.abs();
        let (za, zb) = if p.z <= q.z { (p.z, q.z) } else { (q.z, p.z) };
        // The world box clips the segment in z; laterally the block lies inside it.
        let w = &self.world.bounds;
        let (wa, wb) = (za.max(w.min_cm.z), zb.min(w.max_cm.z));
        if wb <= wa {
            return true;
        }
        let n = self.layers.len();
        let mut in_layers = 0.0;
        let first = self.z_cm.partition_point(|&z| z <= wa).saturating_sub(1);
        for i in first..n {
            let (z0, z1) = (self.z_cm[i], self.z_cm[i + 1]);
            if z0 >= wb {
                break;
            }
            let overlap = z1.min(wb) - z0.max(wa);
            if overlap > 0.0 {
                let layer = &self.layers[i];
                f(layer.material, layer.density_g_cm3 * overlap * inv);
                in_layers += overlap;
            }
        }
        if let Some(m) = self.world.medium {
            let rest = wb - wa - in_layers;
            if rest > 0.0 {
                f(m.material, m.density_g_cm3 * rest * inv);
            }
        }
        true
    }

    /// The medium of region `r`: `(material index, density g/cm³)`, or `None` for vacuum
    /// (a vacuum world, or an escaped photon).
    #[inline]
    pub fn material_of(&self, r: Region) -> Option<(u16, f64)> {
        match r.index() {
            Some(i) => self.layers.get(i).map(|l| (l.material, l.density_g_cm3)),
            None if r == Region::WORLD => self.world.medium.map(Medium::pair),
            None => None,
        }
    }

    /// The layer holding height `z` for a ray moving with z-direction `dz`: layers are
    /// half-open, but a point on an inner plane moving down belongs to the layer below.
    #[inline]
    fn layer_at_z(&self, z: f64, dz: f64) -> usize {
        let n = self.layers.len();
        let k = self.z_cm.partition_point(|&zp| zp <= z);
        let mut i = k.saturating_sub(1).min(n - 1);
        if dz < 0.0 && i > 0 && z == self.z_cm[i] {
            i -= 1;
        }
        i
    }

    /// The next boundary along unit direction `d` from `p` inside region `r`, and the region
    /// entered there. For `r == ESCAPED` the answer is a zero step to `ESCAPED`.
    ///
    /// `p` should lie in `r` or on its surface; a point a rounding error outside it is handled
    /// (the distance is clamped to zero and the photon handed on).
    #[inline]
    pub fn step(&self, p: Vec3, d: Vec3, r: Region) -> Boundary {
        debug_assert!(
            (d.norm_squared() - 1.0).abs() < 1e-9,
            "direction {d:?} is not a unit vector"
        );
        match r.index() {
            Some(i) => self.step_layer(i, p, d),
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
    fn step_layer(&self, i: usize, p: Vec3, d: Vec3) -> Boundary {
        let n = self.layers.len();
        let b = &self.block;
        let mut best = Boundary {
            distance_cm: f64::INFINITY,
            next: Region::ESCAPED,
            axis: Axis::None,
            plane_cm: 0.0,
        };
        let lateral_next = |escapes: bool| {
            if escapes {
                Region::ESCAPED
            } else {
                Region::WORLD
            }
        };
        // Lateral planes first: on ties (edges) the lateral exit wins.
        if d.x != 0.0 {
            let (pl, esc) = if d.x > 0.0 {
                (b.max_cm.x, self.lateral_escapes[1])
            } else {
                (b.min_cm.x, self.lateral_escapes[0])
            };
            let t = (pl - p.x) / d.x;
            if t < best.distance_cm {
                best = Boundary {
                    distance_cm: t,
                    next: lateral_next(esc),
                    axis: Axis::X,
                    plane_cm: pl,
                };
            }
        }
        if d.y != 0.0 {
            let (pl, esc) = if d.y > 0.0 {
                (b.max_cm.y, self.lateral_escapes[3])
            } else {
                (b.min_cm.y, self.lateral_escapes[2])
            };
            let t = (pl - p.y) / d.y;
            if t < best.distance_cm {
                best = Boundary {
                    distance_cm: t,
                    next: lateral_next(esc),
                    axis: Axis::Y,
                    plane_cm: pl,
                };
            }
        }
        if d.z != 0.0 {
            let (pl, next) = if d.z > 0.0 {
                let next = if i + 1 < n {
                    Region::object(i + 1)
                } else if self.world_back {
                    Region::WORLD
                } else {
                    Region::ESCAPED
                };
                (self.z_cm[i + 1], next)
            } else {
                let next = if i > 0 {
                    Region::object(i - 1)
                } else if self.world_front {
                    Region::WORLD
                } else {
                    Region::ESCAPED
                };
                (self.z_cm[i], next)
            };
            let t = (pl - p.z) / d.z;
            if t < best.distance_cm {
                best = Boundary {
                    distance_cm: t,
                    next,
                    axis: Axis::Z,
                    plane_cm: pl,
                };
            }
        }
        // A rounding error may put p a hair past the plane: never step backwards.
        // (`max` also maps a NaN distance from a NaN position to zero.)
        best.distance_cm = best.distance_cm.max(0.0);
        best
    }

    #[inline]
    fn step_world(&self, p: Vec3, d: Vec3) -> Boundary {
        let (t_out, axis_out, plane_out) = self.world.bounds.exit(p, d);
        // A ray along the back face of the last layer is outside the stack (layers are
        // half-open in z, as in `locate`); along any other face it is inside.
        let tangent_to_back = d.z == 0.0 && p.z >= self.block.max_cm.z;
        if let Some(c) = self.block.chord(p, d).filter(|_| !tangent_to_back) {
            let t_in = c.enter_cm.max(0.0);
            if c.exit_cm - t_in > self.skin_cm && t_in <= t_out {
                let n = self.layers.len();
                let layer = if c.enter_cm >= 0.0 && c.enter_axis == Axis::Z {
                    if d.z > 0.0 {
                        0
                    } else {
                        n - 1
                    }
                } else {
                    self.layer_at_z(p.z + t_in * d.z, d.z)
                };
                let (axis, plane_cm) = if c.enter_cm >= 0.0 {
                    let a = c.enter_axis;
                    let pl = match a.index() {
                        Some(k) if d.axis(k) > 0.0 => self.block.min_cm.axis(k),
                        Some(k) => self.block.max_cm.axis(k),
                        None => 0.0,
                    };
                    (a, pl)
                } else {
                    (Axis::None, 0.0)
                };
                return Boundary {
                    distance_cm: t_in,
                    next: Region::object(layer),
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
}

#[cfg(test)]
mod tests {
    use super::*;

    fn water_al_stack(lateral: Lateral, margin: f64) -> SlabStack {
        let layers = vec![
            Layer {
                material: 0,
                density_g_cm3: 1.0,
                thickness_cm: 2.0,
            },
            Layer {
                material: 1,
                density_g_cm3: 2.699,
                thickness_cm: 0.5,
            },
        ];
        SlabStack::with_margin(
            1.0,
            layers,
            lateral,
            Some(Medium::new(7, 0.0012)),
            margin,
            (10.0, 10.0),
        )
        .unwrap()
    }

    #[test]
    fn layer_bounds_and_thickness() {
        let s = water_al_stack(Lateral::Infinite, 1.0);
        assert_eq!(s.num_layers(), 2);
        assert_eq!(s.layer_bounds(0), (1.0, 3.0));
        assert_eq!(s.layer_bounds(1), (3.0, 3.5));
        assert_eq!(s.total_thickness_cm(), 2.5);
    }

    #[test]
    fn normal_incidence_walks_every_layer() {
        let s = water_al_stack(Lateral::Infinite, 1.0);
        let mut p = Vec3::new(0.0, 0.0, 0.0);
        let d = Vec3::Z;
        let mut r = s.locate(p);
        assert_eq!(r, Region::WORLD);
        let mut seen = vec![];
        let mut lengths = vec![];
        while !r.is_escaped() {
            let b = s.step(p, d, r);
            seen.push(r);
            lengths.push(b.distance_cm);
            p = b.landing(p, d);
            r = b.next;
        }
        assert_eq!(
            seen,
            vec![Region::WORLD, Region(0), Region(1), Region::WORLD]
        );
        assert_eq!(lengths, vec![1.0, 2.0, 0.5, 1.0]);
        assert_eq!(s.material_of(Region(1)), Some((1, 2.699)));
        assert_eq!(s.material_of(Region::WORLD), Some((7, 0.0012)));
        assert_eq!(s.material_of(Region::ESCAPED), None);
    }

    #[test]
    fn parallel_ray_on_inner_plane_stays_in_its_layer() {
        // On the plane z = 3 between the layers, moving along x: the region passed decides.
        let s = water_al_stack(Lateral::Infinite, 1.0);
        let p = Vec3::new(0.0, 0.0, 3.0);
        assert_eq!(s.locate(p), Region(1));
        for r in [Region(0), Region(1)] {
            let b = s.step(p, Vec3::X, r);
            assert_eq!(b.distance_cm, 10.0);
            assert_eq!(
                b.next,
                Region::ESCAPED,
                "infinite slabs end at the world's side"
            );
        }
    }

    #[test]
    fn bounded_slab_lateral_exit_goes_to_world() {
        let s = water_al_stack(
            Lateral::Box {
                half_x_cm: 2.0,
                half_y_cm: 3.0,
            },
            1.0,
        );
        let b = s.step(Vec3::new(0.0, 0.0, 2.0), Vec3::X, Region(0));
        assert_eq!((b.distance_cm, b.next), (2.0, Region::WORLD));
        let b2 = s.step(Vec3::new(2.0, 0.0, 2.0), Vec3::X, Region::WORLD);
        assert_eq!((b2.distance_cm, b2.next), (1.0, Region::ESCAPED));
        // From the world, aimed back at the side face: enters layer 0 through x = +2.
        let b3 = s.step(Vec3::new(2.5, 0.0, 2.0), -Vec3::X, Region::WORLD);
        assert_eq!(
            (b3.distance_cm, b3.next, b3.axis, b3.plane_cm),
            (0.5, Region(0), Axis::X, 2.0)
        );
        // Lateral entry exactly at the inner plane moving down belongs to the layer below.
        let d = Vec3::new(-1.0, 0.0, -1.0).normalised();
        let b4 = s.step(Vec3::new(2.5, 0.0, 3.5), d, Region::WORLD);
        assert_eq!(b4.next, Region(0));
    }

    #[test]
    fn no_margin_means_escape_at_faces() {
        let s = water_al_stack(Lateral::Infinite, 0.0);
        let b = s.step(Vec3::new(0.0, 0.0, 1.5), -Vec3::Z, Region(0));
        assert_eq!((b.distance_cm, b.next), (0.5, Region::ESCAPED));
        assert_eq!(
            s.locate(Vec3::new(0.0, 0.0, 3.5)),
            Region::WORLD,
            "back face: closed world"
        );
        assert_eq!(s.locate(Vec3::new(0.0, 0.0, 3.6)), Region::ESCAPED);
    }

    #[test]
    fn bad_input_is_a_typed_error() {
        let bad = vec![Layer {
            material: 0,
            density_g_cm3: 1.0,
            thickness_cm: 0.0,
        }];
        let e =
            SlabStack::with_margin(0.0, bad, Lateral::Infinite, None, 1.0, (5.0, 5.0)).unwrap_err();
        assert_eq!(
            e,
            GeometryError::BadThickness {
                layer: 0,
                value: 0.0
            }
        );
        let bad = vec![Layer {
            material: 0,
            density_g_cm3: -1.0,
            thickness_cm: 1.0,
        }];
        let e =
            SlabStack::with_margin(0.0, bad, Lateral::Infinite, None, 1.0, (5.0, 5.0)).unwrap_err();
        assert!(matches!(e, GeometryError::BadLayerDensity { layer: 0, .. }));
        let ok = vec![Layer {
            material: 0,
            density_g_cm3: 1.0,
            thickness_cm: 1.0,
        }];
        let w = World {
            medium: None,
            bounds: Aabb::new(Vec3::new(-1.0, -1.0, 0.0), Vec3::new(1.0, 1.0, 0.5)),
        };
        let e = SlabStack::new(0.0, ok, Lateral::Infinite, w).unwrap_err();
        assert!(matches!(e, GeometryError::WorldTooSmall { .. }));
        assert!(e.to_string().contains("world box"));
    }
}
