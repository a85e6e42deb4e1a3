//! Phantom builder: a union of simple shapes voxelised onto a grid.
//!
//! Parts are painted in order, later parts overriding earlier ones. A voxel takes the part that
//! holds its centre, or with supersampling `s > 1` the part holding most of its `s³` sub-cell
//! centres (ties go to the later part, and to any part over the background). Each part may
//! name a region; the builder returns a region-label grid beside the voxel grid.

use crate::voxel::{GridLayout, MaterialIndices, VoxelGrid};
use crate::{GeometryError, Vec3};
use serde::{Deserialize, Serialize};

/// A solid shape (all lengths in cm; surfaces belong to the shape).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum Shape {
    /// An axis-aligned box.
    Box {
        /// Centre (cm).
        center_cm: [f64; 3],
        /// Half-widths along x, y, z (cm).
        half_size_cm: [f64; 3],
    },
    /// A right circular cylinder along any direction.
    Cylinder {
        /// Centre of the cylinder, half-way along its axis (cm).
        center_cm: [f64; 3],
        /// Direction of the axis (any non-zero vector; normalised).
        axis: [f64; 3],
        /// Radius (cm).
        radius_cm: f64,
        /// Full length along the axis (cm).
        length_cm: f64,
    },
    /// An ellipsoid with axes along x, y, z.
    Ellipsoid {
        /// Centre (cm).
        center_cm: [f64; 3],
        /// Semi-axes along x, y, z (cm).
        semi_axes_cm: [f64; 3],
    },
    /// A sphere.
    Sphere {
        /// Centre (cm).
        center_cm: [f64; 3],
        /// Radius (cm).
        radius_cm: f64,
    },
}

/// One part of a phantom: a shape, its material and an optional region name.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PhantomPart {
    /// The shape.
    pub shape: Shape,
    /// Material index into [`PhantomSpec::materials`].
    pub material: u16,
    /// Region name for the label grid; parts with the same name share a label. Unnamed parts
    /// get `part_<k>` (k = the part's position, from 0).
    #[serde(default)]
    pub region: Option<String>,
}

fn default_supersample() -> u32 {
    1
}

/// A phantom description.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PhantomSpec {
    /// Voxels along x, y, z.
    pub dims: [usize; 3],
    /// Voxel edge lengths (cm).
    pub voxel_size_cm: [f64; 3],
    /// Low corner of voxel (0,0,0) (cm).
    pub origin_cm: [f64; 3],
    /// Material names; part and background materials index this list.
    pub materials: Vec<String>,
    /// Material of voxels no part covers (label 0, region "background").
    pub background_material: u16,
    /// The parts, painted in order.
    #[serde(default)]
    pub parts: Vec<PhantomPart>,
    /// Sub-cells per voxel edge for the majority test (1 = centre test only; at most 8).
    #[serde(default = "default_supersample")]
    pub supersample: u32,
}

/// A built phantom: the voxel grid and its region labels.
#[derive(Clone, Debug, PartialEq)]
pub struct Phantom {
    /// The voxel grid (no density array: densities are the materials' nominal ones).
    pub grid: VoxelGrid,
    /// Region label per voxel (same order as the grid).
    pub labels: Vec<u16>,
    /// Label names: `label_names[0] == "background"`.
    pub label_names: Vec<String>,
}

/// Invalid phantom description.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum PhantomError {
    /// A size that is not finite and positive, or a centre that is not finite.
    #[error("part {part}: `{field}` = {value} must be finite{}", if *field == "center_cm" { "" } else { " and > 0" })]
    BadNumber {
        /// Part index (from 0).
        part: usize,
        /// Field name.
        field: &'static str,
        /// The value given.
        value: f64,
    },
    /// A cylinder axis of zero length.
    #[error("part {part}: cylinder `axis` must be a non-zero vector")]
    ZeroAxis {
        /// Part index.
        part: usize,
    },
    /// A material index beyond the material list.
    #[error("{}: material {material} is out of range; `materials` has {count} entries (indices 0–{})", match part { Some(p) => format!("part {p}"), None => "background_material".to_string() }, count.saturating_sub(1))]
    MaterialOutOfRange {
        /// Part index, or `None` for the background.
        part: Option<usize>,
        /// The index given.
        material: u16,
        /// Number of materials.
        count: usize,
    },
    /// A supersampling factor outside 1–8.
    #[error("supersample = {value} must be between 1 and 8")]
    BadSupersample {
        /// The value given.
        value: u32,
    },
    /// More distinct regions than a u16 label holds.
    #[error("{count} regions exceed the 65535 labels a u16 grid holds")]
    TooManyRegions {
        /// Number of regions.
        count: usize,
    },
    /// The grid layout is invalid.
    #[error(transparent)]
    Grid(#[from] GeometryError),
}

/// A shape prepared for fast inside tests.
#[derive(Clone, Copy, Debug)]
enum Solid {
    Box {
        c: Vec3,
        h: Vec3,
    },
    Cylinder {
        c: Vec3,
        u: Vec3,
        r2: f64,
        half_len: f64,
    },
    Ellipsoid {
        c: Vec3,
        inv: Vec3,
    },
    Sphere {
        c: Vec3,
        r2: f64,
    },
}

fn v3(a: [f64; 3]) -> Vec3 {
    Vec3::new(a[0], a[1], a[2])
}

impl Solid {
    fn new(part: usize, s: &Shape) -> Result<(Solid, Vec3, Vec3), PhantomError> {
        let finite = |field: &'static str, a: [f64; 3]| {
            a.iter().try_for_each(|&v| {
                if v.is_finite() {
                    Ok(())
                } else {
                    Err(PhantomError::BadNumber {
                        part,
                        field,
                        value: v,
                    })
                }
            })
        };
        let positive = |field: &'static str, v: f64| {
            if v.is_finite() && v > 0.0 {
                Ok(())
            } else {
                Err(PhantomError::BadNumber {
                    part,
                    field,
                    value: v,
                })
            }
        };
        Ok(match *s {
            Shape::Box {
                center_cm,
                half_size_cm,
            } => {
                finite("center_cm", center_cm)?;
                half_size_cm
                    .iter()
                    .try_for_each(|&v| positive("half_size_cm", v))?;
                let (c, h) = (v3(center_cm), v3(half_size_cm));
                (Solid::Box { c, h }, c - h, c + h)
            }
            Shape::Cylinder {
                center_cm,
                axis,
                radius_cm,
                length_cm,
            } => {
                finite("center_cm", center_cm)?;
                finite("axis", axis)?;
                positive("radius_cm", radius_cm)?;
                positive("length_cm", length_cm)?;
                let u = v3(axis)
                    .try_normalised()
                    .ok_or(PhantomError::ZeroAxis { part })?;
                let c = v3(center_cm);
                let ext = |ua: f64| {
                    ua.abs() * 0.5 * length_cm + radius_cm * (1.0 - ua * ua).max(0.0).sqrt()
                };
                let e = Vec3::new(ext(u.x), ext(u.y), ext(u.z));
                (
                    Solid::Cylinder {
                        c,
                        u,
                        r2: radius_cm * radius_cm,
                        half_len: 0.5 * length_cm,
                    },
                    c - e,
                    c + e,
                )
            }
            Shape::Ellipsoid {
                center_cm,
                semi_axes_cm,
            } => {
                finite("center_cm", center_cm)?;
                semi_axes_cm
                    .iter()
                    .try_for_each(|&v| positive("semi_axes_cm", v))?;
                let (c, s) = (v3(center_cm), v3(semi_axes_cm));
                (
                    Solid::Ellipsoid {
                        c,
                        inv: Vec3::new(1.0 / s.x, 1.0 / s.y, 1.0 / s.z),
                    },
                    c - s,
                    c + s,
                )
            }
            Shape::Sphere {
                center_cm,
                radius_cm,
            } => {
                finite("center_cm", center_cm)?;
                positive("radius_cm", radius_cm)?;
                let c = v3(center_cm);
                let r = Vec3::new(radius_cm, radius_cm, radius_cm);
                (
                    Solid::Sphere {
                        c,
                        r2: radius_cm * radius_cm,
                    },
                    c - r,
                    c + r,
                )
            }
        })
    }

    #[inline]
    fn contains(&self, p: Vec3) -> bool {
        match *self {
            Solid::Box { c, h } => {
                let d = p - c;
                d.x.abs() <= h.x && d.y.abs() <= h.y && d.z.abs() <= h.z
            }
            Solid::Cylinder { c, u, r2, half_len } => {
                let v = p - c;
                let t = v.dot(u);
                t.abs() <= half_len && (v - u * t).norm_squared() <= r2
            }
            Solid::Ellipsoid { c, inv } => {
                let d = p - c;
                let q = Vec3::new(d.x * inv.x, d.y * inv.y, d.z * inv.z);
                q.norm_squared() <= 1.0
            }
            Solid::Sphere { c, r2 } => (p - c).norm_squared() <= r2,
        }
    }
}

/// Voxelises `spec` (see the module documentation for the rules).
///
/// # Errors
/// An invalid layout, size, axis, material index or supersampling factor, naming the part and
/// field.
pub fn build_phantom(spec: &PhantomSpec) -> Result<Phantom, PhantomError> {
    let layout = GridLayout {
        dims: spec.dims,
        voxel_size_cm: v3(spec.voxel_size_cm),
        origin_cm: v3(spec.origin_cm),
    };
    layout.validate()?;
    if !(1..=8).contains(&spec.supersample) {
        return Err(PhantomError::BadSupersample {
            value: spec.supersample,
        });
    }
    let count = spec.materials.len();
    if spec.background_material as usize >= count {
        return Err(PhantomError::MaterialOutOfRange {
            part: None,
            material: spec.background_material,
            count,
        });
    }
    // Labels: 0 = background; one per distinct region name, in order of first appearance.
    let mut label_names = vec!["background".to_string()];
    let mut part_label = Vec::with_capacity(spec.parts.len());
    let mut solids = Vec::with_capacity(spec.parts.len());
    for (k, part) in spec.parts.iter().enumerate() {
        if part.material as usize >= count {
            return Err(PhantomError::MaterialOutOfRange {
                part: Some(k),
                material: part.material,
                count,
            });
        }
        let (solid, lo, hi) = Solid::new(k, &part.shape)?;
        // Voxel-index range that can hold a sample point of this part (widened by one voxel).
        let mut range = [[0usize; 2]; 3];
        for (a, r) in range.iter_mut().enumerate() {
            let o = layout.origin_cm.axis(a);
            let s = layout.voxel_size_cm.axis(a);
            let n = layout.dims[a] as f64;
            let i0 = ((lo.axis(a) - o) / s - 1.0).floor().clamp(0.0, n);
            let i1 = ((hi.axis(a) - o) / s + 1.0).ceil().clamp(0.0, n);
            *r = [i0 as usize, i1 as usize];
        }
        solids.push((solid, range));
        let name = part.region.clone().unwrap_or_else(|| format!("part_{k}"));
        let label = match label_names.iter().position(|n| *n == name) {
            Some(i) => i,
            None => {
                label_names.push(name);
                label_names.len() - 1
            }
        };
        if label > u16::MAX as usize {
            return Err(PhantomError::TooManyRegions {
                count: label_names.len(),
            });
        }
        part_label.push(label as u16);
    }
    let n = layout.num_voxels() as usize;
    let wide = count > 256;
    let mut mat8: Vec<u8> = if wide {
        Vec::new()
    } else {
        vec![spec.background_material as u8; n]
    };
    let mut mat16: Vec<u16> = if wide {
        vec![spec.background_material; n]
    } else {
        Vec::new()
    };
    let mut labels = vec![0u16; n];
    let s = spec.supersample as usize;
    let mut votes = vec![0u32; spec.parts.len() + 1];
    let size = layout.voxel_size_cm;
    for iz in 0..layout.dims[2] {
        for iy in 0..layout.dims[1] {
            for ix in 0..layout.dims[0] {
                let ijk = [ix, iy, iz];
                let candidates = || {
                    solids.iter().enumerate().rev().filter(move |(_, (_, r))| {
                        (0..3).all(|a| ijk[a] >= r[a][0] && ijk[a] < r[a][1])
                    })
                };
                let winner_at = |p: Vec3| {
                    candidates()
                        .find(|(_, (sol, _))| sol.contains(p))
                        .map(|(k, _)| k)
                };
                let low = Vec3::new(
                    layout.plane_cm(0, ix),
                    layout.plane_cm(1, iy),
                    layout.plane_cm(2, iz),
                );
                let winner = if s == 1 {
                    winner_at(low + size * 0.5)
                } else {
                    votes.iter_mut().for_each(|v| *v = 0);
                    let inv = 1.0 / s as f64;
                    for a in 0..s {
                        for b in 0..s {
                            for c in 0..s {
                                let f = Vec3::new(
                                    (a as f64 + 0.5) * inv * size.x,
                                    (b as f64 + 0.5) * inv * size.y,
                                    (c as f64 + 0.5) * inv * size.z,
                                );
                                let w = winner_at(low + f);
                                votes[w.map_or(0, |k| k + 1)] += 1;
                            }
                        }
                    }
                    // Most votes; ties to the later part (and any part over the background).
                    let mut best = 0;
                    for (k, &v) in votes.iter().enumerate() {
                        if v > 0 && v >= votes[best] {
                            best = k;
                        }
                    }
                    best.checked_sub(1)
                };
                if let Some(k) = winner {
                    let i = layout.index(ijk);
                    let m = spec.parts[k].material;
                    if wide {
                        mat16[i] = m;
                    } else {
                        mat8[i] = m as u8;
                    }
                    labels[i] = part_label[k];
                }
            }
        }
    }
    let material = if wide {
        MaterialIndices::U16(mat16)
    } else {
        MaterialIndices::U8(mat8)
    };
    let grid = VoxelGrid::new(layout, material, None, spec.materials.clone())?;
    Ok(Phantom {
        grid,
        labels,
        label_names,
    })
}
