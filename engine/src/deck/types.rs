//! The resolved deck: plain Rust values with every default filled in and every reference checked.
//! The engine maps these onto its own types; nothing here depends on the engine.
//!
//! Coordinates are in cm in one right-handed frame; slab geometry stacks layers along +z.

use std::path::PathBuf;

/// Everything a run needs, validated, with defaults filled in.
#[derive(Debug, Clone, PartialEq)]
pub struct ResolvedDeck {
    /// `[run]`: histories, seeds, physics switches, output.
    pub run: Run,
    /// `[source]`: beam geometry and energy.
    pub source: Source,
    /// `[[material]]`: user-defined materials, in deck order (included decks first).
    pub materials: Vec<Material>,
    /// `[geometry]`: slabs or voxels.
    pub geometry: Geometry,
    /// `[[score]]`: what to tally, in deck order.
    pub scores: Vec<Score>,
}

/// Run control, `[run]`.
#[derive(Debug, Clone, PartialEq)]
pub struct Run {
    /// Number of photon histories to start (1 ..= 1e15).
    pub histories: u64,
    /// Seed of the random streams; with `histories_per_chunk` it fixes every history's stream.
    pub seed: u64,
    /// Worker threads; `None` means one per available core.
    pub threads: Option<u32>,
    /// Histories per chunk; a chunk is the unit of reproducible random streams and of merging.
    pub histories_per_chunk: u64,
    /// Stop early once a named score reaches a relative uncertainty.
    pub stop_at_uncertainty: Option<StopAtUncertainty>,
    /// Stop after this wall-clock time (s), finishing the chunks in flight.
    pub time_limit_s: Option<f64>,
    /// Photons below this energy (keV) are absorbed on the spot.
    pub energy_cutoff_kev: f64,
    /// Compton scattering with bound-electron corrections (incoherent scattering function).
    pub bound_compton: bool,
    /// Rayleigh (coherent) scattering.
    pub rayleigh: bool,
    /// Fluorescence photons after photoelectric absorption.
    pub fluorescence: bool,
    /// Result file (HDF5). Default: `<deck stem>.h5` beside the deck.
    pub output: PathBuf,
    /// Write a checkpoint this often (s of wall-clock time).
    pub checkpoint_interval_s: Option<f64>,
}

/// `stop_at_uncertainty = { score = "...", relative = 0.01 }`.
#[derive(Debug, Clone, PartialEq)]
pub struct StopAtUncertainty {
    /// Name of a `[[score]]` in this deck.
    pub score: String,
    /// Target relative standard uncertainty (0 < relative ≤ 1), of the score's total.
    pub relative: f64,
}

/// The photon source, `[source]`.
#[derive(Debug, Clone, PartialEq)]
pub struct Source {
    /// Where photons start and which way they go.
    pub shape: SourceShape,
    /// Their energies.
    pub energy: SourceEnergy,
    /// `[source.energy_bias]`: importance sampling of the energy (`None`: analog).
    pub energy_bias: Option<EnergyBias>,
    /// `[source.field_bias]`: importance sampling of the start direction (`None`: analog).
    pub field_bias: Option<FieldBias>,
}

/// `[source.energy_bias]`: source energies drawn in proportion to the spectrum times an
/// importance (the uncollided transmission from the source to the centre of a detector face,
/// raised to a floor), each photon starting with the weight that keeps every score unbiased.
#[derive(Debug, Clone, PartialEq)]
pub struct EnergyBias {
    /// Name of the `kind = "detector"` score whose face centre sets the importance.
    pub toward: String,
    /// Floor of the importance relative to its largest value (0 < floor ≤ 1; 1 is analog):
    /// weights stay below 1 / floor times the spectrum's mean importance.
    pub floor: f64,
}

/// Default floor of `[source.energy_bias]`.
pub const ENERGY_BIAS_FLOOR_DEFAULT: f64 = 0.1;

/// `[source.field_bias]`: start rays drawn over the field in proportion to an importance that
/// falls off with the distance between where the ray meets a detector's plane and that
/// detector's central ROI, each photon starting with the weight that keeps every score
/// unbiased.
#[derive(Debug, Clone, PartialEq)]
pub struct FieldBias {
    /// Name of the `kind = "detector"` score whose ROI sets the importance.
    pub toward: String,
    /// e-folding length of the importance with the distance from the ROI, in the detector's
    /// plane (cm).
    pub length_cm: f64,
    /// Floor of the importance relative to its largest value (0 < floor ≤ 1; 1 is analog).
    pub floor: f64,
}

/// Default floor of `[source.field_bias]`.
pub const FIELD_BIAS_FLOOR_DEFAULT: f64 = 0.1;
/// Default e-folding length of `[source.field_bias]` (cm).
pub const FIELD_BIAS_LENGTH_DEFAULT_CM: f64 = 8.0;

/// Source geometry. `direction` is as written (not normalised; never zero).
#[derive(Debug, Clone, PartialEq)]
pub enum SourceShape {
    /// Every photon starts at `position_cm` going along `direction`.
    Pencil {
        /// Start point (cm).
        position_cm: [f64; 3],
        /// Direction of flight.
        direction: [f64; 3],
    },
    /// Parallel photons, start points uniform over `field` centred on `position_cm`, in the
    /// plane normal to `direction`.
    Parallel {
        /// Centre of the field (cm).
        position_cm: [f64; 3],
        /// Direction of flight.
        direction: [f64; 3],
        /// Field shape and size in the start plane.
        field: Field,
    },
    /// Photons from a point, aimed uniformly over `field` as defined in the plane normal to
    /// `direction` at `field_distance_cm` from the point.
    Point {
        /// The focal spot (cm).
        position_cm: [f64; 3],
        /// Central axis.
        direction: [f64; 3],
        /// Field shape and size at `field_distance_cm`.
        field: Field,
        /// Distance from the point to the plane where `field` is defined (cm).
        field_distance_cm: f64,
        /// Width and height of a uniform focal spot centred on `position_cm`, along the
        /// beam frame's u and v axes (cm); `[0, 0]` (the default): a point focus.
        focal_spot_cm: [f64; 2],
    },
}

/// A field: rectangle (`width_cm` along the frame's first transverse axis) or circle.
#[derive(Debug, Clone, PartialEq)]
pub enum Field {
    /// Full width and height (cm).
    Rectangle {
        /// Full width (cm).
        width_cm: f64,
        /// Full height (cm).
        height_cm: f64,
    },
    /// Circle of radius `radius_cm`.
    Circle {
        /// Radius (cm).
        radius_cm: f64,
    },
}

/// Photon energies: exactly one of a single energy, a spectrum file or a tube.
#[derive(Debug, Clone, PartialEq)]
pub enum SourceEnergy {
    /// One energy (keV), 1–800.
    Monoenergetic {
        /// Photon energy (keV).
        energy_kev: f64,
    },
    /// A tabulated spectrum read from a two-column file (energy keV, relative weight).
    SpectrumFile {
        /// The file, joined to the deck's folder when written relative.
        path: PathBuf,
        /// Energies (keV), strictly increasing, within 1–800.
        energies_kev: Vec<f64>,
        /// Relative weights (≥ 0, at least one > 0), as written (not normalised).
        weights: Vec<f64>,
    },
    /// An x-ray tube, modelled by the spectrum module.
    Tube(Tube),
}

/// `[source.tube]`.
#[derive(Debug, Clone, PartialEq)]
pub struct Tube {
    /// Tube voltage (kV), 15–300.
    pub kvp: f64,
    /// Anode (target) element.
    pub anode: Anode,
    /// Anode angle (degrees), 3–45 (`spectrum::ANODE_ANGLE_RANGE_DEG`).
    pub anode_angle_deg: f64,
    /// Filters in beam order.
    pub filters: Vec<Filter>,
    /// Voltage ripple (% of kVp), 0–50 (`spectrum::RIPPLE_RANGE_PERCENT`); 0 is constant potential.
    pub ripple_percent: f64,
}

/// Anode elements the tube model knows.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Anode {
    /// Tungsten.
    W,
    /// Molybdenum.
    Mo,
    /// Rhodium.
    Rh,
}

impl Anode {
    /// Chemical symbol.
    pub fn symbol(self) -> &'static str {
        match self {
            Anode::W => "W",
            Anode::Mo => "Mo",
            Anode::Rh => "Rh",
        }
    }
}

/// One beam filter.
#[derive(Debug, Clone, PartialEq)]
pub struct Filter {
    /// Filter material (a user-defined material, a library name or an element symbol).
    pub material: MaterialRef,
    /// Thickness (cm).
    pub thickness_cm: f64,
}

/// A reference to a material by name.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct MaterialRef {
    /// The name as written.
    pub name: String,
    /// `true` when a `[[material]]` of this deck defines it; otherwise it is a library name,
    /// checked by [`super::validate_with`].
    pub user_defined: bool,
}

/// A user-defined material, `[[material]]`.
#[derive(Debug, Clone, PartialEq)]
pub struct Material {
    /// Unique name.
    pub name: String,
    /// Mass density (g/cm³).
    pub density_g_cm3: f64,
    /// Elemental make-up.
    pub composition: Composition,
}

/// How a material's elements are given.
#[derive(Debug, Clone, PartialEq)]
pub enum Composition {
    /// A chemical formula such as `H2O` or `Ca10(PO4)6(OH)2`, syntax-checked; the element symbols
    /// in it are known (Z = 1–98).
    Formula(String),
    /// Mass fractions by element, in deck order, summing to 1 within 1e-6 (after normalising
    /// when the deck asked for it).
    MassFractions(Vec<ElementFraction>),
}

/// One element's mass fraction.
#[derive(Debug, Clone, PartialEq)]
pub struct ElementFraction {
    /// Chemical symbol.
    pub symbol: String,
    /// Atomic number.
    pub z: u32,
    /// Mass fraction (0 < w ≤ 1).
    pub mass_fraction: f64,
}

/// What fills space outside the geometry.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum World {
    /// Nothing: photons leaving the geometry are lost (and may be scored as escaping).
    Vacuum,
    /// Library air.
    Air,
}

/// `[geometry]`.
#[derive(Debug, Clone, PartialEq)]
pub enum Geometry {
    /// Layers stacked along +z.
    Slabs(Slabs),
    /// A voxel grid.
    Voxels(Voxels),
}

/// `kind = "slabs"`.
#[derive(Debug, Clone, PartialEq)]
pub struct Slabs {
    /// Outside medium.
    pub world: World,
    /// z of the first layer's front face (cm).
    pub start_z_cm: f64,
    /// Full lateral size [x, y] centred on the z axis (cm); `None` is laterally infinite.
    pub lateral_size_cm: Option<[f64; 2]>,
    /// Layers in beam order.
    pub layers: Vec<Layer>,
}

/// `[[geometry.layer]]`.
#[derive(Debug, Clone, PartialEq)]
pub struct Layer {
    /// Optional region name, for scores and reports.
    pub name: Option<String>,
    /// Material.
    pub material: MaterialRef,
    /// Thickness along z (cm).
    pub thickness_cm: f64,
    /// Density override (g/cm³); `None` takes the material's own.
    pub density_g_cm3: Option<f64>,
}

/// `kind = "voxels"`.
#[derive(Debug, Clone, PartialEq)]
pub struct Voxels {
    /// Outside medium.
    pub world: World,
    /// Where the voxels come from.
    pub content: VoxelContent,
}

/// A regular grid. Voxel (0,0,0) has its outer corner at `origin_cm`.
#[derive(Debug, Clone, PartialEq)]
pub struct Grid {
    /// Voxel counts [nx, ny, nz].
    pub voxels: [u64; 3],
    /// Voxel edge lengths (cm).
    pub voxel_size_cm: [f64; 3],
    /// Corner of the grid with the smallest x, y, z (cm).
    pub origin_cm: [f64; 3],
}

impl Grid {
    /// nx·ny·nz.
    pub fn voxel_count(&self) -> u64 {
        self.voxels.iter().product()
    }
}

/// Voxel sources.
#[derive(Debug, Clone, PartialEq)]
pub enum VoxelContent {
    /// A raw file of labels (little-endian, x fastest) described by the deck.
    Raw {
        /// The file.
        path: PathBuf,
        /// Grid the labels fill.
        grid: Grid,
        /// Bytes per label: 1 (u8) or 2 (u16).
        bytes_per_voxel: u8,
        /// Label → material, sorted by label.
        labels: Vec<(u32, MaterialRef)>,
    },
    /// An HDF5 phantom file (grid and labels inside; read by the geometry crate).
    Hdf5 {
        /// The file.
        path: PathBuf,
    },
    /// A phantom built from shapes on a grid, `[geometry.phantom]`.
    Phantom {
        /// Grid the shapes are drawn on.
        grid: Grid,
        /// Material of voxels no shape covers.
        fill: MaterialRef,
        /// Shapes in drawing order: later shapes overwrite earlier ones.
        shapes: Vec<Shape>,
    },
}

/// One phantom shape.
#[derive(Debug, Clone, PartialEq)]
pub struct Shape {
    /// Form and size.
    pub form: ShapeForm,
    /// Centre (cm).
    pub center_cm: [f64; 3],
    /// Material.
    pub material: MaterialRef,
    /// Density override (g/cm³).
    pub density_g_cm3: Option<f64>,
    /// Optional region name (organ-like regions for dose reports).
    pub region: Option<String>,
}

/// Shape forms.
#[derive(Debug, Clone, PartialEq)]
pub enum ShapeForm {
    /// Axis-aligned box with half edge lengths (cm).
    Box {
        /// Half sizes [x, y, z] (cm).
        half_size_cm: [f64; 3],
    },
    /// Sphere.
    Sphere {
        /// Radius (cm).
        radius_cm: f64,
    },
    /// Axis-aligned ellipsoid with semi-axes (cm).
    Ellipsoid {
        /// Semi-axes [x, y, z] (cm).
        half_size_cm: [f64; 3],
    },
    /// Cylinder along a coordinate axis, `length_cm` long, centred on `center_cm`.
    Cylinder {
        /// Radius (cm).
        radius_cm: f64,
        /// Full length (cm).
        length_cm: f64,
        /// Axis direction.
        axis: Axis,
    },
}

/// Coordinate axes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Axis {
    /// x.
    X,
    /// y.
    Y,
    /// z.
    Z,
}

impl Axis {
    /// `"x"`, `"y"` or `"z"`.
    pub fn name(self) -> &'static str {
        match self {
            Axis::X => "x",
            Axis::Y => "y",
            Axis::Z => "z",
        }
    }

    /// 0, 1 or 2.
    pub fn index(self) -> usize {
        match self {
            Axis::X => 0,
            Axis::Y => 1,
            Axis::Z => 2,
        }
    }
}

/// `[[score]]`.
#[derive(Debug, Clone, PartialEq)]
pub struct Score {
    /// Unique name (letters, digits, `_`, `-`); names the result group.
    pub name: String,
    /// What is scored.
    pub kind: ScoreKind,
}

/// Score kinds and their settings.
#[derive(Debug, Clone, PartialEq)]
pub enum ScoreKind {
    /// Energy deposited per slab layer (slab geometry only).
    LayerEnergy,
    /// Dose in z bins from `z_min_cm` to `z_max_cm`, across the whole lateral extent.
    DepthDose {
        /// Start of the first bin (cm).
        z_min_cm: f64,
        /// End of the last bin (cm).
        z_max_cm: f64,
        /// Bin width (cm); the range is a whole number of bins.
        bin_width_cm: f64,
    },
    /// Energy leaving the geometry forward (+z hemisphere) and backward.
    Escape,
    /// Counts of each interaction type.
    InteractionCounts,
    /// Spectrum of photons leaving the geometry forward.
    TransmittedSpectrum {
        /// Lower edge (keV).
        energy_min_kev: f64,
        /// Upper edge (keV).
        energy_max_kev: f64,
        /// Bin width (keV).
        bin_width_kev: f64,
    },
    /// Air kerma from the fluence through a small disc at a point, photons crossing in both directions.
    AirKerma {
        /// Disc centre (cm).
        position_cm: [f64; 3],
        /// Disc normal.
        normal_axis: Axis,
        /// Disc radius (cm).
        radius_cm: f64,
    },
    /// Dose per voxel.
    VoxelDose {
        /// Estimator.
        estimator: Estimator,
        /// Scoring grid; `None` uses the geometry's own grid.
        grid: Option<Grid>,
    },
    /// A flat imaging detector.
    Detector(Detector),
}

/// Dose estimators.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Estimator {
    /// Energy deposited at interaction points.
    Analog,
    /// Track length × μen/ρ (kerma approximation).
    TrackLength,
}

/// `kind = "detector"`.
#[derive(Debug, Clone, PartialEq)]
pub struct Detector {
    /// Centre of the sensitive face (cm).
    pub position_cm: [f64; 3],
    /// Normal of the face.
    pub normal_axis: Axis,
    /// Full size [u, v] of the face (cm), in the two other axes in x, y, z order.
    pub size_cm: [f64; 2],
    /// Pixel pitch [u, v] (cm).
    pub pixel_pitch_cm: [f64; 2],
    /// Pixels [nu, nv] (size / pitch).
    pub pixels: [u64; 2],
    /// Signal.
    pub response: Response,
    /// Anti-scatter grid in front of the face.
    pub anti_scatter_grid: Option<AntiScatterGrid>,
    /// Size [u, v] of the central region of interest (cm); `None`: 5 cm, or the face if smaller.
    pub roi_size_cm: Option<[f64; 2]>,
    /// Score the expected contribution of every interaction (point detection) instead of crossings.
    pub forced_detection: bool,
    /// Next-event points per site over the whole face, besides the one in the central ROI (1–64).
    pub forced_detection_face_points: usize,
    /// Where the next-event points look from: one point of every flight's ray (expected
    /// collisions) or the collisions the transport samples.
    pub forced_detection_from: ForcedDetectionFrom,
    /// Sites whose uncollided transmission to the face is below this level are played by
    /// Russian roulette (0 = never; 0–1).
    pub forced_detection_roulette_below: f64,
    /// Also draw a coherent-scatter direction from its own angular distribution at each site
    /// (combined with the solid-angle points by the balance heuristic).
    pub forced_detection_coherent_directions: bool,
    /// Fraction of Compton scatterings whose direction is drawn toward the face, the weight
    /// corrected (0 = off, at most [`MAX_FD_STEER`]; needs forced detection).
    pub forced_detection_steer: f64,
    /// Points per pixel axis of the noiseless primary image (1–32; pixels the field edge
    /// crosses are refined further).
    pub primary_subpixels: usize,
    /// Points per focal-spot axis of the noiseless primary image when the source has a focal
    /// spot (1–16).
    pub primary_focal_points: usize,
}

/// Default transmission level below which forced-detection sites are played by Russian
/// roulette (chosen on the P2 reference problem, README).
pub const DEFAULT_FD_ROULETTE_BELOW: f64 = 0.5;
/// Largest steered fraction of Compton directions (the weight factor is at most 1/(1 − s)).
pub const MAX_FD_STEER: f64 = 0.9;
/// Default points per pixel axis of the noiseless primary image.
pub const DEFAULT_PRIMARY_SUBPIXELS: usize = 2;
/// Default points per focal-spot axis of the noiseless primary image.
pub const DEFAULT_PRIMARY_FOCAL_POINTS: usize = 4;

/// Where forced detection looks from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ForcedDetectionFrom {
    /// One point of each flight's whole ray, standing for the collision sampled on it.
    Flights,
    /// The collisions the transport samples.
    Collisions,
}

impl ForcedDetectionFrom {
    /// The deck spelling.
    pub fn name(self) -> &'static str {
        match self {
            ForcedDetectionFrom::Flights => "flights",
            ForcedDetectionFrom::Collisions => "collisions",
        }
    }
}

/// Detector signals.
#[derive(Debug, Clone, PartialEq)]
pub enum Response {
    /// Energy fluence (keV/cm² per history).
    EnergyFluence,
    /// Photon fluence (1/cm² per history).
    PhotonFluence,
    /// Energy absorbed in a sensitive layer.
    Absorbed {
        /// Layer material.
        material: MaterialRef,
        /// Layer thickness (cm).
        thickness_cm: f64,
    },
}

/// A linear anti-scatter grid.
#[derive(Debug, Clone, PartialEq)]
pub struct AntiScatterGrid {
    /// Grid ratio (strip height / interspace width).
    pub ratio: f64,
    /// Strip frequency (strips per cm).
    pub strips_per_cm: f64,
    /// Strip width (cm).
    pub strip_width_cm: f64,
    /// Strip material.
    pub strip_material: MaterialRef,
    /// Interspace material.
    pub interspace_material: MaterialRef,
    /// Focus distance (cm); `None` is a parallel grid.
    pub focus_distance_cm: Option<f64>,
}
