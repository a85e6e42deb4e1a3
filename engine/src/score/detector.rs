//! Imaging detector: primary and scatter images, scatter-to-primary ratio, optional anti-scatter
//! grid, analog and forced-detection (next-event) estimates, and a noiseless primary image by
//! ray tracing. See `DETECTOR.md` beside this file for the user-level description.
//!
//! # Frame
//!
//! The sensitive face is a rectangle in the plane normal to axis `n` through `center_cm`; its
//! in-plane axes (u, v) are the two other axes in x, y, z order. Pixel (iv, iu) covers
//! `u ∈ [−S_u/2 + iu·p_u, …+p_u)`, `v` likewise, relative to the centre; images are stored
//! `[row = iv, column = iu]`. Photons are counted when they cross the plane travelling away from
//! the side the source is on (the face looks at the source); the plane does not disturb them.
//!
//! # Signals (per source history, per unit detector area)
//!
//! For a photon of weight w and energy E crossing at incidence |cos θ| = |Ω·n|:
//! * energy fluence: w·E / A_pixel (planar: energy crossing unit area of the face, keV/cm²);
//! * photon fluence: w / A_pixel (planar, 1/cm²);
//! * absorbed: w·E·(μen/μ)(E)·(1 − exp(−μ(E)·t/|cos θ|)) / A_pixel (keV/cm²): the energy the
//!   layer of thickness t absorbs from the photon, counting the first interaction's energy
//!   transfer as absorbed on the spot (scatter inside the layer and fluorescence escape are
//!   folded into μen as the usual energy-absorption approximation).
//!
//! An anti-scatter grid multiplies each contribution by its transmission T(E, direction, u)
//! ([`super::grid`]).
//!
//! # Categories
//!
//! By the photon's history when it crosses: primary (uncollided source photon), single Compton,
//! single Rayleigh, multiple (two or more scatterings of a source photon), fluorescence (a
//! fluorescence photon, scattered or not); `scatter` is everything but primary; `total` all.
//!
//! # Forced detection
//!
//! At every interaction site (the photon of weight w and energy E about to interact in material
//! M) the expected contribution of the photon leaving that site towards a point x of the face is
//! scored, a next-event estimator. Let μ = Σ_c n_c(σ_c^pe + σ_c^inc + σ_c^coh) be the total and
//! P_c^k = n_c σ_c^k / μ the probability that the interaction is of kind k on element c (the
//! channel shares of the transport's own tables). Given kind k on c, the direction is drawn from
//! p_c^k(Ω) = (dσ_c^k/dΩ) / σ_c^k. The expected number of photons scattered into dΩ around the
//! direction Ω̂ and reaching the face point x(Ω̂) uncollided is then
//!
//! ```text
//! w · Σ_c [P_c^inc p_c^inc(Ω̂) e^{−τ(E')} R(E') + P_c^coh p_c^coh(Ω̂) e^{−τ(E)} R(E)] dΩ,
//! ```
//!
//! with E' the Compton energy at the scattering angle, τ the optical depth from the site to x
//! and R the response (and grid transmission) of the pixel. σ_c^k in p_c^k is the integral of the
//! same dσ/dΩ the sampler draws from (KN × S, or Z × KN for free electrons; Thomson × F²),
//! tabulated at set-up by quadrature, so the density integrates to one exactly as sampled;
//! P_c^k are the probabilities the transport's channel sampler uses
//! ([`MaterialXs::channel_probabilities_at`]). Scattered photons below the energy cut-off are not
//! counted (the transport absorbs them). At a photoelectric site a cascade is drawn with the
//! scorer's own random stream (an independent sample of the same distribution as the
//! transport's) and each emitted line scores its isotropic density 1/(4π).
//!
//! The direction Ω̂ is sampled uniformly in solid angle over a rectangle of the face as seen from
//! the site (the area-preserving map of [`sphrect`], Ureña, Fajardo & King 2013). With density
//! 1/Ω_rect the estimate of every pixel's expected signal is
//!
//! ```text
//! w · Ω_rect · Σ_c[…](Ω̂) / A_pixel   into the pixel holding x(Ω̂),
//! ```
//!
//! bounded for sites arbitrarily close to the face (no 1/r² factor). Per site: one point
//! uniform in solid angle over the ROI rectangle (density 1/Ω_ROI) and `fd_face_points` points
//! (default 1) uniform in solid angle over the whole face (n/Ω_face); every point is weighted by
//! the balance heuristic (Veach & Guibas, "Optimally combining sampling techniques for Monte
//! Carlo rendering", SIGGRAPH 1995) with d(Ω) = [in the ROI]/Ω_ROI + n/Ω_face, so every pixel's
//! estimate is unbiased. With `fd_coherent_sampling` (default) a coherent direction is also drawn
//! from the coherent distribution itself, and the coherent part of every sample is weighted by
//! f / (d(Ω) + p_coh(Ω)), p_coh the mixture density sampled: unbiased, and the forward-peak
//! contributions are bounded.
//!
//! # Sites: expected collisions along flights
//!
//! With `fd_along_flights` (default) the sites are not the transport's collisions: at the start
//! of every straight flight (source, fluorescence emission, after a scattering) one point of
//! the flight's whole ray is taken at optical depth t ∈ [0, T] (T to the edge of the world) with
//! density g(t) = β e^{−βt}/(1 − e^{−βT}), β = 1 − Ω·n, and scored as a site of weight
//! w e^{−t}/g(t): the collision density along the ray is e^{−t} dt, so this has the expectation
//! of scoring the collision the transport samples on the ray. Otherwise the transport's
//! collisions are the sites.
//!
//! # Russian roulette
//!
//! A site whose uncollided transmission T_f at its energy to the nearest face point is below
//! `fd_roulette_below` is kept with probability T_f / level and then scores with weight ×
//! level / T_f (unbiased).
//!
//! The analog photon continues unchanged; in forced-detection mode the analog
//! crossings of scattered photons are not added to the images (they would count the same photons
//! twice) but are kept in the `analog_scatter_*` summary bins for comparison.
//!
//! The scorer's stream at a site or flight is a pure function of (history, position, direction
//! and energy), so a
//! history still replays alone and the result does not depend on the thread count.
//!
//! # Deterministic primary
//!
//! `primary_deterministic[pixel] = Σ_E p(E) · Φ(x) · e^{−τ(x, E)} · R(E, cos θ) · T_grid`, averaged
//! over n × n sub-pixel points x, with Φ the uncollided planar photon density per history at x:
//! for a point source collimated to a field of solid angle Ω_f, Φ = |cos θ| / (Ω_f r²) inside
//! the field; for a parallel beam of field area A, Φ = |Ω·n| / A inside the field's projection.
//! A pencil beam has no deterministic image. Continuous spectrum entries (a tube's bins) are
//! split into sub-bins of at most 0.5 keV (midpoints) so absorption edges inside a bin are
//! followed.

pub mod p2;
mod scatter_table;
pub mod sphrect;
mod steer;

use super::grid::GridModel;
use super::{InteractionSite, PhotonView, Tally};
use sphrect::SphericalRect;
use crate::physics::{fluorescence, klein_nishina, photoelectric, xs::MaterialXs, Interaction, PhysicsOptions};
use crate::raytrace::MuAt;
use crate::rng::{history_stream, Stream};
use crate::source::{Emission, EnergySpectrum, Field, Source};
use crate::transport::{Geometry, Problem};
use dosemill_geometry::Vec3;
use dosemill_xsdata::{material::Material, Element, CLASSICAL_ELECTRON_RADIUS_CM, ELECTRON_REST_KEV, E_MIN_KEV, HC_KEV_ANGSTROM};
use std::sync::Arc;

/// Image categories, in bin order.
pub const CATEGORIES: [&str; 7] = ["primary", "single_compton", "single_rayleigh", "multiple", "fluorescence", "scatter", "total"];
const CAT_PRIMARY: usize = 0;
const CAT_COMPTON: usize = 1;
const CAT_RAYLEIGH: usize = 2;
const CAT_MULTIPLE: usize = 3;
const CAT_FLUORESCENCE: usize = 4;
const CAT_SCATTER: usize = 5;
const CAT_TOTAL: usize = 6;
const N_CAT: usize = 7;

/// Summary bins after the images (means over the pixels of the region).
pub mod summary {
    /// ROI primary with the grid (or without when there is none).
    pub const ROI_PRIMARY: usize = 0;
    /// ROI scatter with the grid.
    pub const ROI_SCATTER: usize = 1;
    /// ROI primary without the grid.
    pub const ROI_PRIMARY_NO_GRID: usize = 2;
    /// ROI scatter without the grid.
    pub const ROI_SCATTER_NO_GRID: usize = 3;
    /// Whole-face primary with the grid.
    pub const ALL_PRIMARY: usize = 4;
    /// Whole-face scatter with the grid.
    pub const ALL_SCATTER: usize = 5;
    /// Whole-face primary without the grid.
    pub const ALL_PRIMARY_NO_GRID: usize = 6;
    /// Whole-face scatter without the grid.
    pub const ALL_SCATTER_NO_GRID: usize = 7;
    /// ROI scatter from analog crossings (with the grid), in either mode.
    pub const ROI_SCATTER_ANALOG: usize = 8;
    /// Whole-face scatter from analog crossings (with the grid), in either mode.
    pub const ALL_SCATTER_ANALOG: usize = 9;
    /// Number of summary bins.
    pub const COUNT: usize = 10;
    /// Labels in bin order.
    pub const LABELS: [&str; COUNT] = [
        "roi_primary",
        "roi_scatter",
        "roi_primary_no_grid",
        "roi_scatter_no_grid",
        "all_primary",
        "all_scatter",
        "all_primary_no_grid",
        "all_scatter_no_grid",
        "roi_scatter_analog",
        "all_scatter_analog",
    ];
}

/// Most elements in a material for forced detection.
pub const MAX_COMPONENTS: usize = 16;
/// Most materials in a problem for the fast per-material path tracer (more: per-energy tracing).
const MAX_MATERIALS: usize = MuAt::TABLED;
/// Longest energy sub-bin of the deterministic primary (keV).
const PRIMARY_SUB_BIN_KEV: f64 = 0.5;
/// Sub-pixel points per axis of the deterministic primary in pixels the field edge crosses.
const EDGE_SUBPIXELS: usize = 24;
/// The same with a focal spot (each sub-pixel point is also spread over the spot's points).
const EDGE_SUBPIXELS_WITH_SPOT: usize = 8;

/// Errors setting up a detector.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum DetectorError {
    /// A bad parameter; the message says which and how to fix it.
    #[error("{0}")]
    Invalid(String),
}

fn invalid(m: impl Into<String>) -> DetectorError {
    DetectorError::Invalid(m.into())
}

/// A table on a log-uniform energy grid, linear interpolation in ln E.
#[derive(Debug, Clone)]
struct LnTable {
    ln_e0: f64,
    inv_step: f64,
    values: Vec<f64>,
}

impl LnTable {
    fn build(e0_kev: f64, e1_kev: f64, n: usize, f: impl Fn(f64) -> f64) -> Self {
        let (l0, l1) = (e0_kev.ln(), e1_kev.ln());
        let step = (l1 - l0) / (n - 1) as f64;
        let values = (0..n).map(|i| f((l0 + step * i as f64).exp())).collect();
        Self { ln_e0: l0, inv_step: 1.0 / step, values }
    }
    #[inline(always)]
    fn at_ln(&self, ln_kev: f64) -> f64 {
        let x = ((ln_kev - self.ln_e0) * self.inv_step).max(0.0);
        let i = (x as usize).min(self.values.len() - 2);
        let t = (x - i as f64).min(1.0);
        self.values[i] + t * (self.values[i + 1] - self.values[i])
    }
}

/// Energy absorbed in a sensitive layer: μ(E) and μen/μ of its material, tabulated at set-up
/// on 4096 log-uniform energies (0.13 % apart; an absorption edge is smeared over one interval).
#[derive(Debug, Clone)]
pub struct LayerResponse {
    /// Material name.
    pub material: String,
    /// Thickness (cm).
    pub thickness_cm: f64,
    mu_cm: LnTable,
    muen_over_mu: LnTable,
}

impl LayerResponse {
    /// The layer of `material` (nominal density) and `thickness_cm`, tabulated up to `max_kev`.
    pub fn new(material: &Material, thickness_cm: f64, options: &PhysicsOptions, max_kev: f64) -> Result<Self, DetectorError> {
        if !(thickness_cm > 0.0 && thickness_cm.is_finite()) {
            return Err(invalid(format!("layer thickness must be positive, got {thickness_cm} cm")));
        }
        let xs = MaterialXs::new(material.name(), material.density_g_cm3(), material.composition(), options).map_err(|e| invalid(e.to_string()))?;
        let absorption = material.absorption_table().map_err(|e| invalid(e.to_string()))?;
        let rho = material.density_g_cm3();
        let hi = (max_kev * 1.01).min(dosemill_xsdata::E_MAX_KEV);
        let mu_cm = LnTable::build(E_MIN_KEV, hi, 4096, |e| xs.mu_rho_cm2_g(e) * rho);
        let muen_over_mu = LnTable::build(E_MIN_KEV, hi, 4096, |e| (absorption.muen_rho_cm2_g(e) / xs.mu_rho_cm2_g(e)).min(1.0));
        Ok(Self { material: material.name().to_string(), thickness_cm, mu_cm, muen_over_mu })
    }

    /// Fraction of a `kev` photon's energy absorbed at incidence `cos_theta` (|cos|):
    /// (μen/μ)(1 − e^{−μ t/|cos θ|}).
    #[inline]
    pub fn absorbed_fraction(&self, kev: f64, cos_theta: f64) -> f64 {
        let ln = kev.ln();
        let mu = self.mu_cm.at_ln(ln);
        let c = cos_theta.abs().max(1e-6);
        self.muen_over_mu.at_ln(ln) * -(-(mu * self.thickness_cm / c)).exp_m1()
    }
}

/// What a pixel measures.
#[derive(Debug, Clone)]
pub enum Response {
    /// Planar energy fluence (keV/cm²).
    EnergyFluence,
    /// Planar photon fluence (1/cm²).
    PhotonFluence,
    /// Energy absorbed per unit area in a layer (keV/cm²).
    Absorbed(LayerResponse),
}

impl Response {
    /// Signal of one photon of `kev` at incidence |cos θ| = `cos_theta` (before ÷ area).
    #[inline]
    pub fn value(&self, kev: f64, cos_theta: f64) -> f64 {
        match self {
            Response::EnergyFluence => kev,
            Response::PhotonFluence => 1.0,
            Response::Absorbed(l) => kev * l.absorbed_fraction(kev, cos_theta),
        }
    }

    /// Units of the images.
    pub fn units(&self) -> &'static str {
        match self {
            Response::PhotonFluence => "1/cm2",
            _ => "keV/cm2",
        }
    }

    /// Short name.
    pub fn name(&self) -> String {
        match self {
            Response::EnergyFluence => "energy_fluence".into(),
            Response::PhotonFluence => "photon_fluence".into(),
            Response::Absorbed(l) => format!("absorbed in {} cm of {}", l.thickness_cm, l.material),
        }
    }
}

/// A detector as configured (the deck's `kind = "detector"` plus the engine's choices).
#[derive(Debug, Clone)]
pub struct DetectorSpec {
    /// Centre of the face (cm).
    pub center_cm: Vec3,
    /// Axis normal to the face: 0 = x, 1 = y, 2 = z.
    pub normal_axis: usize,
    /// Full size [u, v] (cm).
    pub size_cm: [f64; 2],
    /// Pixels [nu, nv].
    pub pixels: [usize; 2],
    /// Signal.
    pub response: Response,
    /// Anti-scatter grid (strips along v), if any.
    pub grid: Option<GridModel>,
    /// Score scatter by forced detection instead of analog crossings.
    pub forced_detection: bool,
    /// Size [u, v] of the central region of interest (cm); rounded to whole pixels.
    pub roi_size_cm: [f64; 2],
    /// Forced-detection points per interaction site over the face outside the ROI (the ROI
    /// always gets one); 0 scores the ROI alone.
    pub fd_face_points: usize,
    /// Also draw one coherent direction per site from the form-factor distribution, combined
    /// with the solid-angle points by the balance heuristic (bounds the Rayleigh forward-peak
    /// contributions; lowers the variance of the Rayleigh images, costs ≈ 20 % more per site).
    pub fd_coherent_sampling: bool,
    /// Russian roulette of forced-detection sites: a site whose uncollided transmission T to
    /// the nearest face point is below this level is scored with probability T / level and
    /// weight × level / T; 0 scores every site.
    pub fd_roulette_below: f64,
    /// Next-event points from one point of every flight's whole ray (expected collisions)
    /// instead of from the collisions the transport samples.
    pub fd_along_flights: bool,
    /// Fraction s of Compton scatterings whose direction is drawn uniformly in solid angle over
    /// the face instead of from the physical density, the weight corrected by p/q (`steer.rs`);
    /// 0 turns steering off.
    pub fd_steer: f64,
    /// Sub-pixel points per axis of the deterministic primary (≥ 1).
    pub primary_subpixels: usize,
    /// Focal-spot points per axis of the deterministic primary when the source has a focal
    /// spot (≥ 1; an axis of zero extent takes one).
    pub primary_focal_points: usize,
}

impl DetectorSpec {
    /// Default ROI side (cm): 5 cm, or the face if smaller.
    pub const DEFAULT_ROI_CM: f64 = 5.0;
    /// Default transmission level below which forced-detection sites are played by Russian
    /// roulette (chosen on P2, README).
    pub const DEFAULT_FD_ROULETTE_BELOW: f64 = crate::deck::DEFAULT_FD_ROULETTE_BELOW;

    /// A spec with the engine's defaults for the ROI (5 × 5 cm), forced-detection points (one in
    /// the ROI and one over the rest of the face per site) and sub-pixels (2 × 2).
    pub fn new(center_cm: Vec3, normal_axis: usize, size_cm: [f64; 2], pixels: [usize; 2], response: Response) -> Self {
        Self {
            center_cm,
            normal_axis,
            size_cm,
            pixels,
            response,
            grid: None,
            forced_detection: false,
            roi_size_cm: [Self::DEFAULT_ROI_CM.min(size_cm[0]), Self::DEFAULT_ROI_CM.min(size_cm[1])],
            fd_face_points: 1,
            fd_coherent_sampling: true,
            fd_roulette_below: Self::DEFAULT_FD_ROULETTE_BELOW,
            fd_along_flights: true,
            fd_steer: 0.0,
            primary_subpixels: crate::deck::DEFAULT_PRIMARY_SUBPIXELS,
            primary_focal_points: crate::deck::DEFAULT_PRIMARY_FOCAL_POINTS,
        }
    }
}

/// Angular-density normalisation of one element: 1/σ^inc(E), 1/σ^coh(E) (1/cm²) of the same
/// dσ/dΩ the samplers draw from, integrated by quadrature.
#[derive(Debug, Clone)]
struct ElementNorm {
    element: &'static Element,
    inv_inc: LnTable,
    inv_coh: Option<LnTable>,
    /// S and F² for the points (interpolated in √x).
    table: scatter_table::ScatterTable,
}

/// dσ^inc/dΩ per atom (cm²/sr) as sampled.
#[inline(always)]
fn incoherent_dsigma(kn: f64, kev: f64, cos: f64, element: &Element, bound: bool) -> f64 {
    if bound {
        kn * element.incoherent_function(crate::physics::compton::momentum_transfer(kev, cos))
    } else {
        kn * element.z as f64
    }
}

/// dσ^coh/dΩ per atom (cm²/sr): (r_e²/2)(1 + cos²θ) F².
#[inline(always)]
fn coherent_dsigma(kev: f64, cos: f64, element: &Element) -> f64 {
    let x = kev / HC_KEV_ANGSTROM * (0.5 * (1.0 - cos)).max(0.0).sqrt();
    0.5 * CLASSICAL_ELECTRON_RADIUS_CM * CLASSICAL_ELECTRON_RADIUS_CM * (1.0 + cos * cos) * element.form_factor(x).powi(2)
}

/// 2π ∫ f(cos) dcos over [−1, 1], in x = sin(θ/2) with a log-spaced grid towards x = 0
/// (forward peaks of F² and the rise of S) and Simpson's rule on each interval.
fn integrate_sphere(f: impl Fn(f64) -> f64) -> f64 {
    // cos = 1 − 2x², dcos = −4x dx, x ∈ [0, 1].
    let n = 1200;
    let x0: f64 = 1e-5;
    let g = |x: f64| f(1.0 - 2.0 * x * x) * 4.0 * x;
    let mut sum = g(x0) * x0 * 0.5; // [0, x0]: g is ≈ linear in x there
    let step = (1.0 / x0).ln() / n as f64;
    for i in 0..n {
        let a = x0 * (step * i as f64).exp();
        let b = x0 * (step * (i + 1) as f64).exp();
        let m = 0.5 * (a + b);
        sum += (b - a) / 6.0 * (g(a) + 4.0 * g(m) + g(b));
    }
    std::f64::consts::TAU * sum
}

impl ElementNorm {
    fn new(element: &'static Element, options: &PhysicsOptions, e0: f64, e1: f64) -> Self {
        // 1/σ (1/cm²) on 1024 log-spaced energies, linear in ln E: σ is smooth (no edges in the
        // scattering cross sections), interpolation error ≲ 1e-6 relative.
        let n = 1024;
        let bound = options.bound_compton;
        let inv_inc = LnTable::build(e0, e1, n, |e| 1.0 / integrate_sphere(|c| incoherent_dsigma(klein_nishina::dsigma_domega_cm2(e, c), e, c, element, bound)));
        let inv_coh = options.rayleigh.then(|| LnTable::build(e0, e1, n, |e| 1.0 / integrate_sphere(|c| coherent_dsigma(e, c, element))));
        let table = scatter_table::ScatterTable::new(element, e1 / HC_KEV_ANGSTROM);
        Self { element, inv_inc, inv_coh, table }
    }
}

/// Set-up data of a detector (shared, read-only).
#[derive(Debug)]
pub struct DetectorSetup {
    /// The configuration.
    pub spec: DetectorSpec,
    n_axis: usize,
    u_axis: usize,
    v_axis: usize,
    /// +1 when counted photons move towards +n, else −1.
    facing: f64,
    plane_cm: f64,
    center_u: f64,
    center_v: f64,
    pitch: [f64; 2],
    pixel_area_cm2: f64,
    /// ROI pixel ranges [iu0, iu1), [iv0, iv1).
    roi: [usize; 4],
    roi_pixels: usize,
    /// ROI edges (cm from the centre): u0, u1, v0, v1.
    roi_edges_cm: [f64; 4],
    /// Per problem material: indices into `norms` of its components.
    material_elements: Vec<Vec<usize>>,
    norms: Vec<ElementNorm>,
    options: PhysicsOptions,
    /// Noiseless primary image with the grid, per pixel (None for a pencil beam).
    pub primary_deterministic: Option<Vec<f64>>,
    /// ROI means of the deterministic primary: (with grid, without grid).
    pub primary_deterministic_roi: Option<(f64, f64)>,
}

/// The detector scorer: set-up data and the tally.
#[derive(Debug, Clone)]
pub struct DetectorScorer {
    /// Shared set-up data.
    pub setup: Arc<DetectorSetup>,
    /// Bins: 7 images of nu·nv pixels (see [`CATEGORIES`]), then the [`summary`] bins.
    pub tally: Tally,
}

impl PartialEq for DetectorScorer {
    fn eq(&self, other: &Self) -> bool {
        Arc::ptr_eq(&self.setup, &other.setup) && self.tally == other.tally
    }
}

/// Linear attenuation (1/cm) of each problem material at one energy.
#[inline]
fn mu_all(materials: &[MaterialXs], ln_kev: f64, out: &mut [f64; MAX_MATERIALS]) {
    *out = *MuAt::new_ln(materials, ln_kev).tabled();
}

/// Mass thickness (g/cm²) per material along a segment (one walk serves every energy); returns
/// false when there are more materials than it holds (then the caller traces per energy).
#[inline]
fn mass_thickness(geometry: &Geometry, n_materials: usize, from: Vec3, dir: Vec3, length_cm: f64, out: &mut [f64; MAX_MATERIALS]) -> bool {
    if n_materials > MAX_MATERIALS {
        return false;
    }
    out[..n_materials].iter_mut().for_each(|v| *v = 0.0);
    match geometry {
        Geometry::Slabs(slabs) => {
            // Closed form where the segment stays inside the layers' lateral prism (every
            // segment of a laterally infinite stack inside the world's width).
            if slabs.prism_mass_thickness(from, dir, length_cm, |m, t| out[m as usize] += t) {
                return true;
            }
            let mut p = from;
            let mut r = slabs.locate(p);
            if r.is_escaped() {
                // Start outside the world: enter it along the ray.
                match slabs.world().bounds.chord(p, dir) {
                    Some(c) if c.enter_cm >= 0.0 && c.exit_cm > c.enter_cm && c.enter_cm < length_cm => {
                        let t = c.enter_cm + 1e-9;
                        p = p + dir * t;
                        r = slabs.locate(p);
                        return trace_slabs(slabs, p, r, dir, length_cm - t, out);
                    }
                    _ => return true,
                }
            }
            trace_slabs(slabs, p, r, dir, length_cm, out)
        }
        Geometry::Voxels(world) => {
            // As `raytrace::optical_depth`: the world medium outside the grid, then the voxels.
            let grid = &*world.grid;
            if let Some(medium) = grid.world().medium {
                let clip = |c: Option<dosemill_geometry::Chord>| c.map_or(0.0, |c| (c.exit_cm.min(length_cm) - c.enter_cm.max(0.0)).max(0.0));
                let outside = (clip(grid.world().bounds.chord(from, dir)) - clip(grid.bounds().chord(from, dir))).max(0.0);
                out[medium.material as usize] += medium.density_g_cm3 * outside;
            }
            for seg in grid.walk(from, dir, length_cm) {
                let (m, rho) = grid.voxel_medium(seg.index);
                out[m as usize] += rho * seg.length_cm;
            }
            true
        }
    }
}

#[inline]
fn trace_slabs(slabs: &dosemill_geometry::SlabStack, mut p: Vec3, mut r: dosemill_geometry::Region, dir: Vec3, length_cm: f64, out: &mut [f64; MAX_MATERIALS]) -> bool {
    let mut left = length_cm;
    let mut guard = 4 * (slabs.num_layers() + 4);
    let mut been_in_stack = false;
    while left > 0.0 && !r.is_escaped() && guard > 0 {
        guard -= 1;
        // The stack is convex: a ray that has left it into a vacuum world crosses nothing more.
        if r.is_world() {
            if been_in_stack && slabs.material_of(r).is_none() {
                break;
            }
        } else {
            been_in_stack = true;
        }
        let b = slabs.step(p, dir, r);
        let s = b.distance_cm.min(left);
        if let Some((m, rho)) = slabs.material_of(r) {
            out[m as usize] += rho * s;
        }
        if b.distance_cm >= left {
            break;
        }
        left -= s;
        p = b.landing(p, dir);
        r = b.next;
    }
    true
}

/// The in-plane axes (u, v) of a face normal to axis `n`.
pub fn face_axes(n: usize) -> (usize, usize) {
    match n {
        0 => (1, 2),
        1 => (0, 2),
        _ => (0, 1),
    }
}

/// Solid angle (sr) of a field as seen from a point source at `d` on its axis.
fn field_solid_angle(field: &Field, d: f64) -> f64 {
    match *field {
        Field::Rectangle { width_cm: a, height_cm: b } => 4.0 * ((a * b) / ((a * a + 4.0 * d * d) * (b * b + 4.0 * d * d)).sqrt()).asin(),
        Field::Circle { radius_cm: r } => std::f64::consts::TAU * (1.0 - d / (d * d + r * r).sqrt()),
    }
}

fn field_contains(field: &Field, u: f64, v: f64) -> bool {
    match *field {
        Field::Rectangle { width_cm, height_cm } => u.abs() <= 0.5 * width_cm && v.abs() <= 0.5 * height_cm,
        Field::Circle { radius_cm } => u * u + v * v <= radius_cm * radius_cm,
    }
}

/// (energy keV, probability) points of a spectrum for deterministic integration.
fn spectrum_points(spectrum: &EnergySpectrum) -> Vec<(f64, f64)> {
    let mut out = Vec::new();
    let mut bins = |lo: f64, hi: f64, p: f64| {
        if p <= 0.0 {
            return;
        }
        let n = (((hi - lo) / PRIMARY_SUB_BIN_KEV).ceil() as usize).max(1);
        for k in 0..n {
            out.push((lo + (hi - lo) * (k as f64 + 0.5) / n as f64, p / n as f64));
        }
    };
    for (p, lo, hi) in spectrum.entries() {
        bins(lo, hi, p);
    }
    out
}

impl DetectorScorer {
    /// Builds a detector for a problem's geometry, materials, source and physics switches, and
    /// computes its deterministic primary image.
    pub fn new(spec: DetectorSpec, geometry: &Geometry, materials: &[MaterialXs], source: &Source, options: &PhysicsOptions) -> Result<Self, DetectorError> {
        let n = spec.normal_axis;
        if n > 2 {
            return Err(invalid(format!("normal axis {n} is not 0 (x), 1 (y) or 2 (z)")));
        }
        let (u_axis, v_axis) = face_axes(n);
        let [nu, nv] = spec.pixels;
        if nu == 0 || nv == 0 || nu > 8192 || nv > 8192 {
            return Err(invalid(format!("pixels {nu} × {nv}: each count must be 1 to 8192")));
        }
        if !(spec.size_cm[0] > 0.0 && spec.size_cm[1] > 0.0) {
            return Err(invalid("detector size must be positive"));
        }
        let plane_cm = spec.center_cm.axis(n);
        let src = source.origin();
        let side = src.axis(n) - plane_cm;
        if side == 0.0 {
            return Err(invalid("the source lies in the detector plane; move the detector along its normal axis"));
        }
        let facing = if side < 0.0 { 1.0 } else { -1.0 };
        #[allow(irrefutable_let_patterns)]
        if let Geometry::Slabs(s) = geometry {
            let b = s.world().bounds;
            if !(b.min_cm.axis(n) < plane_cm && plane_cm < b.max_cm.axis(n)) {
                return Err(invalid(format!(
                    "the detector plane at {plane_cm} cm lies outside the problem's world ({} to {} cm along its normal); move it closer to the object",
                    b.min_cm.axis(n),
                    b.max_cm.axis(n)
                )));
            }
        }
        let pitch = [spec.size_cm[0] / nu as f64, spec.size_cm[1] / nv as f64];
        let pixel_area_cm2 = pitch[0] * pitch[1];
        // ROI: the pixels whose centres lie in the centred rectangle (at least one pixel).
        let roi_range = |np: usize, p: f64, size: f64, roi: f64| -> (usize, usize) {
            let half = 0.5 * roi.min(size);
            let mut i0 = np;
            let mut i1 = 0;
            for i in 0..np {
                let c = -0.5 * size + (i as f64 + 0.5) * p;
                if c.abs() <= half + 1e-9 * p {
                    i0 = i0.min(i);
                    i1 = i1.max(i + 1);
                }
            }
            if i0 >= i1 {
                (np / 2, np / 2 + 1)
            } else {
                (i0, i1)
            }
        };
        let (iu0, iu1) = roi_range(nu, pitch[0], spec.size_cm[0], spec.roi_size_cm[0]);
        let (iv0, iv1) = roi_range(nv, pitch[1], spec.size_cm[1], spec.roi_size_cm[1]);
        let roi_pixels = (iu1 - iu0) * (iv1 - iv0);
        let (hu, hv) = (0.5 * spec.size_cm[0], 0.5 * spec.size_cm[1]);
        let roi_edges_cm = [-hu + iu0 as f64 * pitch[0], -hu + iu1 as f64 * pitch[0], -hv + iv0 as f64 * pitch[1], -hv + iv1 as f64 * pitch[1]];

        // Forced-detection normalisation tables for every element of every material.
        let mut norms: Vec<ElementNorm> = Vec::new();
        let mut material_elements = Vec::new();
        if spec.forced_detection {
            let e0 = options.cutoff_kev.max(E_MIN_KEV);
            let e1 = (source.spectrum.max_kev() * 1.02).min(dosemill_xsdata::E_MAX_KEV).max(e0 * 1.5);
            for m in materials {
                if m.components.len() > MAX_COMPONENTS {
                    return Err(invalid(format!("forced detection handles materials of at most {MAX_COMPONENTS} elements; `{}` has {}", m.name, m.components.len())));
                }
                let mut idx = Vec::new();
                for c in &m.components {
                    let i = match norms.iter().position(|e| e.element.z == c.element.z) {
                        Some(i) => i,
                        None => {
                            norms.push(ElementNorm::new(c.element, options, e0, e1));
                            norms.len() - 1
                        }
                    };
                    idx.push(i);
                }
                material_elements.push(idx);
            }
        }

        let mut setup = DetectorSetup {
            n_axis: n,
            u_axis,
            v_axis,
            facing,
            plane_cm,
            center_u: spec.center_cm.axis(u_axis),
            center_v: spec.center_cm.axis(v_axis),
            pitch,
            pixel_area_cm2,
            roi: [iu0, iu1, iv0, iv1],
            roi_pixels,
            roi_edges_cm,
            material_elements,
            norms,
            options: *options,
            primary_deterministic: None,
            primary_deterministic_roi: None,
            spec,
        };
        setup.compute_deterministic_primary(geometry, materials, source);
        let bins = N_CAT * nu * nv + summary::COUNT;
        Ok(Self { setup: Arc::new(setup), tally: Tally::new(bins) })
    }

    /// True when scatter is scored by forced detection (the scorer wants interaction sites).
    #[inline]
    pub fn forced_detection(&self) -> bool {
        self.setup.spec.forced_detection
    }

    /// Where the straight ray from `from` along `dir` meets the plane of the face, the distance
    /// (cm, in the plane) from that point to the central ROI rectangle: 0 inside it; `None` when
    /// the ray does not reach the plane moving the way counted photons move.
    pub fn roi_miss_cm(&self, from: Vec3, dir: Vec3) -> Option<f64> {
        let s = &*self.setup;
        let dn = dir.axis(s.n_axis) * s.facing;
        let h = (s.plane_cm - from.axis(s.n_axis)) * s.facing;
        if !(dn > 0.0) || h < 0.0 {
            return None;
        }
        let t = h / dn;
        let du = from.axis(s.u_axis) + dir.axis(s.u_axis) * t - s.center_u;
        let dv = from.axis(s.v_axis) + dir.axis(s.v_axis) * t - s.center_v;
        let [u0, u1, v0, v1] = s.roi_edges_cm;
        let x = (u0 - du).max(du - u1).max(0.0);
        let y = (v0 - dv).max(dv - v1).max(0.0);
        Some((x * x + y * y).sqrt())
    }

    /// Pixels per image.
    pub fn pixel_count(&self) -> usize {
        self.setup.spec.pixels[0] * self.setup.spec.pixels[1]
    }

    /// Adds a contribution `value_no_grid` (and `value` with the grid) at pixel (iu, iv) in
    /// category `cat`; the values are per unit area already.
    #[inline]
    fn score(s: &DetectorSetup, t: &mut Tally, cat: usize, iu: usize, iv: usize, value: f64, value_no_grid: f64, history: u64) {
        let np = s.spec.pixels[0] * s.spec.pixels[1];
        t.add(cat * np + iv * s.spec.pixels[0] + iu, value, history);
        Self::score_sums(s, t, cat == CAT_PRIMARY, iu, iv, value, value_no_grid, history);
    }

    /// Adds the scatter contributions of one next-event point at pixel (iu, iv): `value[c]`
    /// with the grid and `value_no_grid[c]` without it for every scatter category c with
    /// `value_no_grid[c] > 0`; their sums go once into the scatter and total images and the
    /// summary bins (as [`Self::score`] per category would, with one table update each).
    #[inline]
    fn score_scatter(s: &DetectorSetup, t: &mut Tally, iu: usize, iv: usize, value: &[f64; N_CAT], value_no_grid: &[f64; N_CAT], history: u64) {
        let np = s.spec.pixels[0] * s.spec.pixels[1];
        let pix = iv * s.spec.pixels[0] + iu;
        let (mut sum, mut sum_no_grid) = (0.0, 0.0);
        for cat in [CAT_COMPTON, CAT_RAYLEIGH, CAT_MULTIPLE, CAT_FLUORESCENCE] {
            if value_no_grid[cat] > 0.0 {
                t.add(cat * np + pix, value[cat], history);
                sum += value[cat];
                sum_no_grid += value_no_grid[cat];
            }
        }
        // Positive exactly when some category was added.
        if sum_no_grid > 0.0 {
            Self::score_sums(s, t, false, iu, iv, sum, sum_no_grid, history);
        }
    }

    /// What every contribution at pixel (iu, iv) adds beside its category image: the total
    /// image, the scatter image (scatter only) and the ROI and whole-face summary bins.
    #[inline]
    #[allow(clippy::too_many_arguments)]
    fn score_sums(s: &DetectorSetup, t: &mut Tally, primary: bool, iu: usize, iv: usize, value: f64, value_no_grid: f64, history: u64) {
        let np = s.spec.pixels[0] * s.spec.pixels[1];
        let pix = iv * s.spec.pixels[0] + iu;
        let base = N_CAT * np;
        t.add(CAT_TOTAL * np + pix, value, history);
        let (p, pn) = if primary {
            (summary::ROI_PRIMARY, summary::ROI_PRIMARY_NO_GRID)
        } else {
            t.add(CAT_SCATTER * np + pix, value, history);
            (summary::ROI_SCATTER, summary::ROI_SCATTER_NO_GRID)
        };
        if iu >= s.roi[0] && iu < s.roi[1] && iv >= s.roi[2] && iv < s.roi[3] {
            let roi_n = s.roi_pixels as f64;
            t.add(base + p, value / roi_n, history);
            t.add(base + pn, value_no_grid / roi_n, history);
        }
        let all_n = np as f64;
        t.add(base + p + 4, value / all_n, history);
        t.add(base + pn + 4, value_no_grid / all_n, history);
    }

    /// Category of a photon by its history.
    #[inline]
    fn category(p: &PhotonView) -> usize {
        if p.fluorescence {
            CAT_FLUORESCENCE
        } else {
            match (p.incoherent, p.coherent) {
                (0, 0) => CAT_PRIMARY,
                (1, 0) => CAT_COMPTON,
                (0, 1) => CAT_RAYLEIGH,
                _ => CAT_MULTIPLE,
            }
        }
    }

    /// Pixel of in-plane offsets (u, v) from the centre, if on the face.
    #[inline]
    fn pixel_of(s: &DetectorSetup, du: f64, dv: f64) -> Option<(usize, usize)> {
        let fu = (du + 0.5 * s.spec.size_cm[0]) / s.pitch[0];
        let fv = (dv + 0.5 * s.spec.size_cm[1]) / s.pitch[1];
        if fu >= 0.0 && fv >= 0.0 && fu < s.spec.pixels[0] as f64 && fv < s.spec.pixels[1] as f64 {
            Some((fu as usize, fv as usize))
        } else {
            None
        }
    }

    /// Grid transmission at offset `du` for direction `dir` (1 without a grid).
    #[inline]
    fn grid_at(s: &DetectorSetup, kev: f64, du: f64, dir: Vec3) -> f64 {
        match &s.spec.grid {
            None => 1.0,
            Some(g) => g.transmission(kev, du, dir.axis(s.u_axis), dir.axis(s.n_axis) * s.facing),
        }
    }

    /// A flight segment: an analog crossing of the face.
    #[inline]
    pub fn segment(&mut self, photon: &PhotonView, length_cm: f64, history: u64) {
        let (n, facing, plane) = (self.setup.n_axis, self.setup.facing, self.setup.plane_cm);
        let d = photon.dir.axis(n);
        if d * facing <= 0.0 {
            return;
        }
        let za = photon.pos.axis(n);
        let zb = za + d * length_cm;
        if !((plane - za) * facing > 0.0 && (zb - plane) * facing >= 0.0) {
            return;
        }
        let t = (plane - za) / d;
        let hit = photon.pos + photon.dir * t;
        let du = hit.axis(self.setup.u_axis) - self.setup.center_u;
        let dv = hit.axis(self.setup.v_axis) - self.setup.center_v;
        let Some((iu, iv)) = Self::pixel_of(&self.setup, du, dv) else { return };
        let cos = d.abs();
        let cat = Self::category(photon);
        let raw = photon.weight * self.setup.spec.response.value(photon.kev, cos) / self.setup.pixel_area_cm2;
        let value = raw * Self::grid_at(&self.setup, photon.kev, du, photon.dir);
        if cat != CAT_PRIMARY {
            let s = &*self.setup;
            let base = N_CAT * s.spec.pixels[0] * s.spec.pixels[1];
            if iu >= s.roi[0] && iu < s.roi[1] && iv >= s.roi[2] && iv < s.roi[3] {
                let r = s.roi_pixels as f64;
                self.tally.add(base + summary::ROI_SCATTER_ANALOG, value / r, history);
            }
            let all = (s.spec.pixels[0] * s.spec.pixels[1]) as f64;
            self.tally.add(base + summary::ALL_SCATTER_ANALOG, value / all, history);
            if self.setup.spec.forced_detection {
                return;
            }
        }
        Self::score(&self.setup, &mut self.tally, cat, iu, iv, value, raw, history);
    }

    /// The start of a straight flight (a photon leaving the source, a fluorescence photon
    /// emitted, a photon leaving a scattering): in forced-detection mode with expected
    /// collisions along flights, the next-event contribution of one point of the flight's
    /// whole ray, which stands for the collision the transport will sample on it (module docs).
    #[inline]
    pub fn flight(&mut self, problem: &Problem, ph: &PhotonView, history: u64) {
        let s = &*self.setup;
        if !s.spec.forced_detection || !s.spec.fd_along_flights {
            return;
        }
        let mu = MuAt::new_ln(&problem.materials, ph.ln_kev);
        let ray = crate::raytrace::RayPieces::trace(&problem.geometry, &mu, ph.pos, ph.dir);
        let total = ray.total;
        if !(total > 0.0) {
            return;
        }
        let mut rng = flight_stream(ph, history);
        let mu_e = *mu.tabled();
        // Optical depth t along the ray with density g(t) = β e^{−βt} / (1 − e^{−βT}) on [0, T],
        // β = 1 − Ω·n (0 heading straight for the face, 2 straight away from it); the
        // collision density there is e^{−t}, so the point stands for e^{−t} / g(t) collisions.
        let beta = (1.0 - ph.dir.axis(s.n_axis) * s.facing).clamp(0.0, 2.0);
        let u = rng.uniform();
        let (t, collisions) = if beta * total < 1e-9 {
            let t = u * total;
            (t, total * (-t).exp())
        } else {
            let norm = -(-beta * total).exp_m1();
            let t = (-(-u * norm).ln_1p() / beta).min(total);
            (t, (-(1.0 - beta) * t).exp() * norm / beta)
        };
        let Some((pos, m)) = ray.point_at_depth(&problem.geometry, &mu, ph.pos, ph.dir, t) else { return };
        let at = PhotonView { pos, weight: ph.weight * collisions, ..*ph };
        let Some(weight) = self.roulette(problem, &at, &mu_e, &mut rng) else { return };
        // A photoelectric collision there emits fluorescence: drawn in `next_event` from its
        // channel shares.
        self.next_event(problem, &at, m as usize, weight, &mu_e, None, &mut rng, history);
    }

    /// Russian roulette of a forced-detection site (module docs): `None` when it is dropped,
    /// else the weight it scores with.
    #[inline]
    fn roulette(&self, problem: &Problem, ph: &PhotonView, mu_e: &[f64; MAX_MATERIALS], rng: &mut Stream) -> Option<f64> {
        let level = self.setup.spec.fd_roulette_below;
        if level <= 0.0 {
            return Some(ph.weight);
        }
        let q = (Self::transmission_to_face(&self.setup, problem, ph, mu_e) / level).min(1.0);
        if q <= 0.0 || rng.uniform() >= q {
            return None;
        }
        Some(ph.weight / q)
    }

    /// An interaction site: forced-detection contributions (only in forced-detection mode
    /// with collision sites).
    #[inline]
    pub fn interaction(&mut self, problem: &Problem, site: &InteractionSite, history: u64) {
        if !self.setup.spec.forced_detection || self.setup.spec.fd_along_flights {
            return;
        }
        let ph = &site.photon;
        let mut rng = site_stream(ph, history);
        let mut mu_e = [0.0; MAX_MATERIALS];
        mu_all(&problem.materials, ph.ln_kev, &mut mu_e);
        let Some(weight) = self.roulette(problem, ph, &mu_e, &mut rng) else { return };
        // Fluorescence lines of a photoelectric site, sampled with the scorer's own stream.
        let mut lines = fluorescence::Emitted::default();
        if site.kind == Interaction::Photoelectric && self.setup.options.fluorescence {
            let shell = photoelectric::sample_shell(ph.kev, site.element, &mut rng);
            lines = fluorescence::cascade(site.element, shell, &mut rng);
        }
        self.next_event(problem, ph, site.material as usize, weight, &mu_e, Some(&lines), &mut rng, history);
    }

    /// Uncollided transmission e^{−τ} at the photon's energy (`mu_e`: μ/ρ of every material
    /// there) from the photon to the point of the face nearest to it (its foot point on the
    /// plane, clamped to the face); 0 behind the face.
    #[inline]
    fn transmission_to_face(s: &DetectorSetup, problem: &Problem, ph: &PhotonView, mu_e: &[f64; MAX_MATERIALS]) -> f64 {
        let h = (s.plane_cm - ph.pos.axis(s.n_axis)) * s.facing;
        if h <= 0.0 {
            return 0.0;
        }
        let (hu, hv) = (0.5 * s.spec.size_cm[0], 0.5 * s.spec.size_cm[1]);
        let su = ph.pos.axis(s.u_axis) - s.center_u;
        let sv = ph.pos.axis(s.v_axis) - s.center_v;
        // Offsets of the nearest face point from the foot point (0 when the foot is on the face).
        let x = su.clamp(-hu, hu) - su;
        let y = sv.clamp(-hv, hv) - sv;
        let r = (x * x + y * y + h * h).sqrt();
        let dir = Vec3::new(0.0, 0.0, 0.0).with_axis(s.u_axis, x / r).with_axis(s.v_axis, y / r).with_axis(s.n_axis, s.facing * h / r);
        let nmat = problem.materials.len();
        let mut mt = [0.0; MAX_MATERIALS];
        let tau = if mass_thickness(&problem.geometry, nmat, ph.pos, dir, r, &mut mt) {
            (0..nmat).map(|k| mu_e[k] * mt[k]).sum()
        } else {
            crate::raytrace::optical_depth(&problem.geometry, &problem.materials, ph.pos, dir, r, ph.kev)
        };
        (-tau).exp()
    }

    /// Next-event contributions of an interaction of `ph` (weight `weight`) at its position in
    /// material `m`: one point uniform in solid angle over the ROI and `fd_outer_points` points
    /// uniform in solid angle over the rest of the face (module docs).
    #[inline]
    #[allow(clippy::too_many_arguments)]
    fn next_event(&mut self, problem: &Problem, ph: &PhotonView, m: usize, weight: f64, mu_e: &[f64; MAX_MATERIALS], lines: Option<&fluorescence::Emitted>, rng: &mut Stream, history: u64) {
        let s = &*self.setup;
        let tally = &mut self.tally;
        // Distance to the plane, on the side the face looks at.
        let h = (s.plane_cm - ph.pos.axis(s.n_axis)) * s.facing;
        if h <= 0.0 {
            return;
        }
        let cats = if ph.fluorescence {
            (CAT_FLUORESCENCE, CAT_FLUORESCENCE)
        } else if ph.incoherent == 0 && ph.coherent == 0 {
            (CAT_COMPTON, CAT_RAYLEIGH)
        } else {
            (CAT_MULTIPLE, CAT_MULTIPLE)
        };
        let material = &problem.materials[m];
        let kev = ph.kev;
        // Per component: P_c^k / σ_c^k (1/cm²) for incoherent and coherent, P_c^k the transport's
        // own channel probabilities.
        let mut a_inc = [0.0; MAX_COMPONENTS];
        let mut a_coh = [0.0; MAX_COMPONENTS];
        let ln_kev = ph.ln_kev;
        let elems = &s.material_elements[m];
        let mut shares = [0.0; 3 * MAX_COMPONENTS];
        material.channel_probabilities_at(material.lookup_ln(ln_kev), &mut shares[..3 * elems.len()]);
        for (c, &ei) in elems.iter().enumerate() {
            let norm = &s.norms[ei];
            a_inc[c] = shares[3 * c + 1] * norm.inv_inc.at_ln(ln_kev);
            if let Some(coh) = &norm.inv_coh {
                a_coh[c] = shares[3 * c + 2] * coh.at_ln(ln_kev);
            }
        }
        // Lines given (a photoelectric site), or, for a point standing for a collision of any
        // kind, a photoelectric one (probability P^pe) drawn with the scorer's own stream.
        let mut drawn = fluorescence::Emitted::default();
        let lines = match lines {
            Some(l) => l,
            None => {
                if s.options.fluorescence {
                    let mut pick = rng.uniform();
                    for c in 0..elems.len() {
                        pick -= shares[3 * c];
                        if pick < 0.0 {
                            let element = material.components[c].element;
                            let shell = photoelectric::sample_shell(kev, element, rng);
                            drawn = fluorescence::cascade(element, shell, rng);
                            break;
                        }
                    }
                }
                &drawn
            }
        };
        let su = ph.pos.axis(s.u_axis) - s.center_u;
        let sv = ph.pos.axis(s.v_axis) - s.center_v;
        let p_coh: f64 = if s.options.rayleigh && s.spec.fd_coherent_sampling { (0..elems.len()).map(|c| shares[3 * c + 2]).sum() } else { 0.0 };
        let nd = NextEvent { s, problem, ph, h, su, sv, cats, elems, a_inc: &a_inc, a_coh: &a_coh, mu_e, lines, weight, p_coh };
        // Two solid-angle techniques, combined by the balance heuristic (module docs): one
        // point uniform in solid angle over the ROI (density 1/Ω_ROI there) and `n_face`
        // uniform over the whole face (n_face/Ω_face); a point x of either scores
        // f(x) / d(x), d(x) = [x in the ROI]/Ω_ROI + n_face/Ω_face.
        let [r_u0, r_u1, r_v0, r_v1] = s.roi_edges_cm;
        let roi = SphericalRect::new(r_u0 - su, r_u1 - su, r_v0 - sv, r_v1 - sv, h);
        let n_face = s.spec.fd_face_points;
        let (hu, hv) = (0.5 * s.spec.size_cm[0], 0.5 * s.spec.size_cm[1]);
        let face = SphericalRect::new(-hu - su, hu - su, -hv - sv, hv - sv, h);
        let d_roi = if roi.solid_angle > 0.0 { 1.0 / roi.solid_angle } else { 0.0 };
        let d_face = if face.solid_angle > 0.0 { n_face as f64 / face.solid_angle } else { 0.0 };
        let density = |x: f64, y: f64| {
            let (du, dv) = (su + x, sv + y);
            let in_roi = du >= r_u0 && du < r_u1 && dv >= r_v0 && dv < r_v1;
            if in_roi { d_roi + d_face } else { d_face }
        };
        if d_roi > 0.0 {
            let (x, y) = roi.sample(rng.uniform(), rng.uniform());
            nd.point(tally, x, y, d_roi + d_face, true, history);
        }
        if d_face > 0.0 {
            for _ in 0..n_face {
                let (x, y) = face.sample(rng.uniform(), rng.uniform());
                nd.point(tally, x, y, density(x, y), true, history);
            }
        }
        // Coherent scattering, second technique: a direction drawn from the coherent angular
        // distribution itself (element ∝ P_c^coh, cos θ from its form-factor sampler), scoring
        // the coherent part only. Both techniques are combined by the balance heuristic
        // (module docs), which bounds the forward-peak contributions.
        if nd.p_coh > 0.0 {
            let pick = rng.uniform() * nd.p_coh;
            let mut c = 0;
            let mut cum = shares[2];
            while c + 1 < elems.len() && (pick >= cum || shares[3 * c + 2] == 0.0) {
                c += 1;
                cum += shares[3 * c + 2];
            }
            let Some(table) = material.components[c].rayleigh.as_ref() else { return };
            let cos_theta = table.sample(kev, rng);
            let dir = crate::physics::rotate(ph.dir, cos_theta, rng.azimuth());
            let dn = dir.axis(s.n_axis) * s.facing;
            if dn <= 0.0 {
                return;
            }
            let t = h / dn;
            let (x, y) = (dir.axis(s.u_axis) * t, dir.axis(s.v_axis) * t);
            let (du, dv) = (su + x, sv + y);
            let d_sa = if du.abs() <= hu && dv.abs() <= hv { density(x, y) } else { 0.0 };
            nd.point(tally, x, y, d_sa, false, history);
        }
    }
}

/// What the next-event contributions of one site share.
struct NextEvent<'a> {
    s: &'a DetectorSetup,
    problem: &'a Problem,
    ph: &'a PhotonView,
    /// Distance from the site to the plane (cm).
    h: f64,
    /// Site offsets in the plane's frame, from the face centre (cm).
    su: f64,
    sv: f64,
    /// Categories of incoherent and coherent contributions.
    cats: (usize, usize),
    elems: &'a [usize],
    a_inc: &'a [f64; MAX_COMPONENTS],
    a_coh: &'a [f64; MAX_COMPONENTS],
    mu_e: &'a [f64; MAX_MATERIALS],
    lines: &'a fluorescence::Emitted,
    /// Weight of the photon at the site.
    weight: f64,
    /// Total coherent probability P^coh = Σ_c P_c^coh when coherent directions are also
    /// sampled from their own distribution, else 0 (then the solid-angle points alone).
    p_coh: f64,
}

impl NextEvent<'_> {
    /// Scores the contributions towards the face point at offset (x, y) from the site's foot
    /// point. `d_sa` is the density in solid angle (times its number of points) of the
    /// solid-angle technique covering that point; `all` scores every part (a solid-angle
    /// sample), otherwise the coherent part only (a sample of the coherent distribution).
    #[inline]
    fn point(&self, tally: &mut Tally, x: f64, y: f64, d_sa: f64, all: bool, history: u64) {
        let s = self.s;
        let ph = self.ph;
        let (du, dv) = (self.su + x, self.sv + y);
        let Some((iu, iv)) = DetectorScorer::pixel_of(s, du, dv) else { return };
        let r = (x * x + y * y + self.h * self.h).sqrt();
        let inv_r = 1.0 / r;
        let dir = Vec3::new(0.0, 0.0, 0.0).with_axis(s.u_axis, x * inv_r).with_axis(s.v_axis, y * inv_r).with_axis(s.n_axis, s.facing * self.h * inv_r);
        let cos_det = self.h * inv_r;
        let problem = self.problem;
        let nmat = problem.materials.len();
        let mut mt = [0.0; MAX_MATERIALS];
        let fast = mass_thickness(&problem.geometry, nmat, ph.pos, dir, r, &mut mt);
        let tau_at = |e: f64, mu: Option<&[f64; MAX_MATERIALS]>| -> f64 {
            if fast {
                match mu {
                    Some(mu) => (0..nmat).map(|k| mu[k] * mt[k]).sum(),
                    None => {
                        let ln = e.ln();
                        (0..nmat).filter(|&k| mt[k] > 0.0).map(|k| problem.materials[k].mu_rho_at(problem.materials[k].lookup_ln(ln)) * mt[k]).sum()
                    }
                }
            } else {
                crate::raytrace::optical_depth(&problem.geometry, &problem.materials, ph.pos, dir, r, e)
            }
        };
        // Per category: with grid, without grid.
        let mut val = [0.0; N_CAT];
        let mut raw = [0.0; N_CAT];
        let cos_s = ph.dir.dot(dir).clamp(-1.0, 1.0);
        let kev = ph.kev;
        let w_area = self.weight / s.pixel_area_cm2;
        let geo = if all { w_area / d_sa } else { 0.0 };
        // S(x) and F(x)² of every element at this angle (the same x = sin(θ/2)/λ for both).
        let x = crate::physics::compton::momentum_transfer(kev, cos_s);
        let mut sf = [(0.0, 0.0); MAX_COMPONENTS];
        for (c, &ei) in self.elems.iter().enumerate() {
            sf[c] = s.norms[ei].table.at(x);
        }
        // Incoherent: dσ/dΩ = KN × S (bound) or KN × Z (free electrons).
        let e_inc = kev / (1.0 + kev / ELECTRON_REST_KEV * (1.0 - cos_s));
        if all && e_inc >= s.options.cutoff_kev {
            let kn = klein_nishina::dsigma_domega_cm2(kev, cos_s);
            let mut p = 0.0;
            for (c, &ei) in self.elems.iter().enumerate() {
                let per_electron = if s.options.bound_compton { sf[c].0 } else { s.norms[ei].element.z as f64 };
                p += self.a_inc[c] * kn * per_electron;
            }
            if p > 0.0 {
                let v = geo * p * (-tau_at(e_inc, None)).exp() * s.spec.response.value(e_inc, cos_det);
                raw[self.cats.0] += v;
                val[self.cats.0] += v * DetectorScorer::grid_at(s, e_inc, du, dir);
            }
        }
        // Coherent: dσ/dΩ = (r_e²/2)(1 + cos²θ) F².
        if s.options.rayleigh {
            let thomson = 0.5 * CLASSICAL_ELECTRON_RADIUS_CM * CLASSICAL_ELECTRON_RADIUS_CM * (1.0 + cos_s * cos_s);
            let mut p = 0.0;
            for c in 0..self.elems.len() {
                p += self.a_coh[c] * thomson * sf[c].1;
            }
            if p > 0.0 {
                // Balance heuristic: f / (d_sa + p_coh(Ω)), p_coh(Ω) = p / P^coh the sampled
                // coherent density, the same for both techniques' samples (f / d_sa when the
                // coherent technique is off).
                let d_coh = if self.p_coh > 0.0 { p / self.p_coh } else { 0.0 };
                let v = w_area * p / (d_sa + d_coh) * (-tau_at(kev, Some(self.mu_e))).exp() * s.spec.response.value(kev, cos_det);
                raw[self.cats.1] += v;
                val[self.cats.1] += v * DetectorScorer::grid_at(s, kev, du, dir);
            }
        }
        // Fluorescence emission (isotropic).
        let inv4pi = 1.0 / (4.0 * std::f64::consts::PI);
        let lines = if all { &self.lines.kev[..self.lines.count] } else { &[][..] };
        for &line in lines {
            if line >= s.options.cutoff_kev {
                let v = geo * inv4pi * (-tau_at(line, None)).exp() * s.spec.response.value(line, cos_det);
                raw[CAT_FLUORESCENCE] += v;
                val[CAT_FLUORESCENCE] += v * DetectorScorer::grid_at(s, line, du, dir);
            }
        }
        DetectorScorer::score_scatter(s, tally, iu, iv, &val, &raw, history);
    }
}

/// The scorer's random stream at the start of a flight: a pure function of the history and the
/// flight (position, direction and energy bits), independent of the transport's stream.
#[inline]
fn flight_stream(p: &PhotonView, history: u64) -> Stream {
    stream_of(0xBB67_AE85_84CA_A73B, &[p.pos.x.to_bits(), p.pos.y.to_bits(), p.pos.z.to_bits(), p.dir.x.to_bits(), p.dir.y.to_bits(), p.kev.to_bits()], history)
}

/// The scorer's random stream at an interaction site: a pure function of the history and the
/// site (position and energy bits), independent of the transport's stream.
#[inline]
fn site_stream(p: &PhotonView, history: u64) -> Stream {
    stream_of(0x6A09_E667_F3BC_C908, &[p.pos.x.to_bits(), p.pos.y.to_bits(), p.pos.z.to_bits(), p.kev.to_bits()], history)
}

/// A history's stream keyed by a hash of `words` started from `seed`.
#[inline]
fn stream_of(seed: u64, words: &[u64], history: u64) -> Stream {
    let mut h = seed;
    for &w in words {
        h = (h ^ w).wrapping_mul(0x9E37_79B9_7F4A_7C15).rotate_left(29);
    }
    history_stream(h, history)
}

impl DetectorSetup {
    fn compute_deterministic_primary(&mut self, geometry: &Geometry, materials: &[MaterialXs], source: &Source) {
        let energies = spectrum_points(&source.spectrum);
        let nmat = materials.len();
        // μ/ρ of every material at every energy, and grid attenuation coefficients.
        let mu: Vec<[f64; MAX_MATERIALS]> = energies
            .iter()
            .map(|&(e, _)| {
                let mut m = [0.0; MAX_MATERIALS];
                mu_all(materials, e.ln(), &mut m);
                m
            })
            .collect();
        let grid_mu: Vec<(f64, f64)> = match &self.spec.grid {
            Some(g) => energies.iter().map(|&(e, _)| g.mu_cm(e)).collect(),
            None => Vec::new(),
        };
        let origin = source.origin();
        let (emission_dir, field) = match source.emission {
            Emission::Pencil { .. } => return,
            Emission::Parallel { direction, field, .. } | Emission::Point { direction, field, .. } => (direction, field),
        };
        let (fu, fv) = crate::source::frame(emission_dir);
        // Focal-spot points (offsets along u, v, and the point) for a point source with a spot:
        // a midpoint grid of nf × nf over the spot (one point along an axis of zero extent);
        // the photon density is then the spot average of |cos θ|/r² over the mean solid angle
        // of the aperture from the spot points (see the source's sampling).
        let spot = match source.emission {
            Emission::Point { focal_spot_cm, .. } if focal_spot_cm.iter().any(|&x| x > 0.0) => Some(focal_spot_cm),
            _ => None,
        };
        let mut foci: Vec<(f64, f64, Vec3)> = vec![(0.0, 0.0, origin)];
        if let Some([w, h]) = spot {
            let nf = self.spec.primary_focal_points.max(1);
            let (n_u, n_v) = (if w > 0.0 { nf } else { 1 }, if h > 0.0 { nf } else { 1 });
            foci.clear();
            for j in 0..n_v {
                for i in 0..n_u {
                    let a = w * ((i as f64 + 0.5) / n_u as f64 - 0.5);
                    let b = h * ((j as f64 + 0.5) / n_v as f64 - 0.5);
                    foci.push((a, b, origin + fu * a + fv * b));
                }
            }
        }
        let density = match source.emission {
            Emission::Point { field_distance_cm, .. } if spot.is_some() => {
                1.0 / (foci.iter().map(|&(a, b, _)| field.solid_angle_from(field_distance_cm, a, b)).sum::<f64>() / foci.len() as f64)
            }
            Emission::Point { field_distance_cm, .. } => 1.0 / field_solid_angle(&field, field_distance_cm),
            _ => 1.0 / field.area_cm2(),
        };
        let nfoci = foci.len();
        // Pixels the field edge crosses are refined to this many points per axis (fewer with a
        // focal spot, whose points already spread each pixel's rays).
        let edge_subpixels = if nfoci > 1 { EDGE_SUBPIXELS_WITH_SPOT } else { EDGE_SUBPIXELS };
        let [nu, nv] = self.spec.pixels;
        let ns = self.spec.primary_subpixels.max(1);
        let mut image = vec![0.0; nu * nv];
        let mut image_ng = vec![0.0; nu * nv];
        let mut mt = [0.0; MAX_MATERIALS];
        for iv in 0..nv {
            for iu in 0..nu {
                // A pixel the field edge crosses (some sub-pixel points in, some out) is
                // resampled with EDGE_SUBPIXELS² points.
                let mut ns = ns;
                let (acc, acc_ng) = loop {
                let mut acc = 0.0;
                let mut acc_ng = 0.0;
                let mut inside = 0usize;
                for sv in 0..ns {
                    for su in 0..ns {
                        let du = -0.5 * self.spec.size_cm[0] + (iu as f64 + (su as f64 + 0.5) / ns as f64) * self.pitch[0];
                        let dv = -0.5 * self.spec.size_cm[1] + (iv as f64 + (sv as f64 + 0.5) / ns as f64) * self.pitch[1];
                        let x = Vec3::new(0.0, 0.0, 0.0).with_axis(self.n_axis, self.plane_cm).with_axis(self.u_axis, self.center_u + du).with_axis(self.v_axis, self.center_v + dv);
                        for &(fa, fb, focus) in &foci {
                            // Ray and uncollided photon density per unit face area.
                            let (from, dir, length, phi) = match source.emission {
                                Emission::Point { field_distance_cm, .. } => {
                                    let d = x - focus;
                                    let r2 = d.norm_squared();
                                    let r = r2.sqrt();
                                    let dir = d * (1.0 / r);
                                    let c = dir.dot(emission_dir);
                                    if c <= 0.0 {
                                        continue;
                                    }
                                    let t = field_distance_cm / c;
                                    if !field_contains(&field, fa + dir.dot(fu) * t, fb + dir.dot(fv) * t) {
                                        continue;
                                    }
                                    (focus, dir, r, density * dir.axis(self.n_axis).abs() / r2)
                                }
                                Emission::Parallel { .. } => {
                                    // Back along the beam to the emission plane.
                                    let dn = emission_dir.axis(self.n_axis);
                                    if dn * self.facing <= 0.0 {
                                        continue;
                                    }
                                    let back = (x - origin).dot(emission_dir);
                                    let start = x - emission_dir * back;
                                    let rel = start - origin;
                                    if back <= 0.0 || !field_contains(&field, rel.dot(fu), rel.dot(fv)) {
                                        continue;
                                    }
                                    (start, emission_dir, back, density * dn.abs())
                                }
                                Emission::Pencil { .. } => unreachable!(),
                            };
                            inside += 1;
                            let cos_det = dir.axis(self.n_axis).abs();
                            let fast = mass_thickness(geometry, nmat, from, dir, length, &mut mt);
                            for (k, &(e, p)) in energies.iter().enumerate() {
                                let tau = if fast {
                                    (0..nmat).map(|m| mu[k][m] * mt[m]).sum::<f64>()
                                } else {
                                    crate::raytrace::optical_depth(geometry, materials, from, dir, length, e)
                                };
                                let v = p * phi * (-tau).exp() * self.spec.response.value(e, cos_det);
                                acc_ng += v;
                                acc += match &self.spec.grid {
                                    None => v,
                                    Some(g) => {
                                        let (a_x, a_l) = match g.focus_distance_cm {
                                            None => (dir.axis(self.u_axis), dir.axis(self.n_axis) * self.facing),
                                            Some(f) => {
                                                let h = (du * du + f * f).sqrt();
                                                let (sa, ca) = (du / h, f / h);
                                                let (au, an) = (dir.axis(self.u_axis), dir.axis(self.n_axis) * self.facing);
                                                (au * ca - an * sa, au * sa + an * ca)
                                            }
                                        };
                                        let (ms, mi) = grid_mu[k];
                                        v * super::grid::transmission_local(ms, mi, g.height_cm, g.period_cm, g.strip_width_cm, a_x, a_l)
                                    }
                                };
                            }
                        }
                    }
                }
                if inside > 0 && inside < ns * ns * nfoci && ns < edge_subpixels {
                    ns = edge_subpixels;
                    continue;
                }
                let norm = 1.0 / (ns * ns * nfoci) as f64;
                break (acc * norm, acc_ng * norm);
                };
                image[iv * nu + iu] = acc;
                image_ng[iv * nu + iu] = acc_ng;

            }
        }
        let [iu0, iu1, iv0, iv1] = self.roi;
        let mut roi = (0.0, 0.0);
        for iv in iv0..iv1 {
            for iu in iu0..iu1 {
                roi.0 += image[iv * nu + iu];
                roi.1 += image_ng[iv * nu + iu];
            }
        }
        let k = self.roi_pixels as f64;
        self.primary_deterministic_roi = Some((roi.0 / k, roi.1 / k));
        self.primary_deterministic = Some(image);
    }
}

/// Summary numbers of a run of a detector (means per history, 1σ).
#[derive(Debug, Clone, PartialEq)]
pub struct DetectorSummary {
    /// Means of the summary bins ([`summary::LABELS`] order).
    pub mean: Vec<f64>,
    /// Their standard errors.
    pub sigma: Vec<f64>,
    /// ROI scatter-to-primary ratio and its 1σ (first order, neglecting the P–S covariance).
    pub spr_roi: (f64, f64),
    /// ROI scatter over the noiseless primary, and its 1σ (from the scatter alone).
    pub spr_roi_deterministic: Option<(f64, f64)>,
    /// ROI scatter fraction S/(S+P) and its 1σ (same approximation).
    pub scatter_fraction_roi: (f64, f64),
    /// Grid primary transmission, scatter transmission and contrast improvement factor (ROI;
    /// primary from the deterministic image when there is one). K = T_p / T_t with
    /// T_t = (T_p P + T_s S)/(P + S) the total transmission.
    pub grid: Option<(f64, f64, f64)>,
}

fn ratio_sigma(a: f64, sa: f64, b: f64, sb: f64) -> (f64, f64) {
    if b == 0.0 {
        return (f64::NAN, f64::NAN);
    }
    let q = a / b;
    let rel = ((sa / a.max(f64::MIN_POSITIVE)).powi(2) + (sb / b).powi(2)).sqrt();
    (q, q.abs() * rel)
}

impl DetectorScorer {
    /// Means and standard errors of one image (category index into [`CATEGORIES`]).
    pub fn image(&self, category: usize, histories: u64) -> (Vec<f64>, Vec<f64>) {
        let np = self.pixel_count();
        let (m, s) = self.tally.mean_and_sigma(histories);
        (m[category * np..(category + 1) * np].to_vec(), s[category * np..(category + 1) * np].to_vec())
    }

    /// The summary of a (flushed) run over `histories` histories.
    pub fn summary(&self, histories: u64) -> DetectorSummary {
        let np = self.pixel_count();
        let (m, s) = self.tally.mean_and_sigma(histories);
        let mean = m[N_CAT * np..].to_vec();
        let sigma = s[N_CAT * np..].to_vec();
        use summary::*;
        let (p, sp) = (mean[ROI_PRIMARY], sigma[ROI_PRIMARY]);
        let (sc, ss) = (mean[ROI_SCATTER], sigma[ROI_SCATTER]);
        let spr_roi = ratio_sigma(sc, ss, p, sp);
        let t = p + sc;
        let sf = if t > 0.0 { sc / t } else { f64::NAN };
        // d(S/(S+P)) = (P dS − S dP)/(S+P)².
        let sf_sigma = ((p * ss).powi(2) + (sc * sp).powi(2)).sqrt() / (t * t);
        // Grid figures use the noiseless primary where there is one (the MC primary behind a
        // thick object is a few photons per ROI), the MC primary otherwise.
        let (pg, png) = self.setup.primary_deterministic_roi.unwrap_or((mean[ROI_PRIMARY], mean[ROI_PRIMARY_NO_GRID]));
        let grid = self.setup.spec.grid.as_ref().map(|_| {
            let tp = pg / png;
            let ts = mean[ROI_SCATTER] / mean[ROI_SCATTER_NO_GRID];
            let tt = (pg + mean[ROI_SCATTER]) / (png + mean[ROI_SCATTER_NO_GRID]);
            (tp, ts, tp / tt)
        });
        let spr_roi_deterministic = self.setup.primary_deterministic_roi.map(|(p, _)| (mean[ROI_SCATTER] / p, sigma[ROI_SCATTER] / p));
        DetectorSummary { mean, sigma, spr_roi, spr_roi_deterministic, scatter_fraction_roi: (sf, sf_sigma), grid }
    }
}

/// The result-file group of a detector (kind "image").
pub fn result_group(name: &str, d: &DetectorScorer, histories: u64) -> crate::output::Group {
    use crate::output::{Dataset, Group};
    let s = &*d.setup;
    let [nu, nv] = s.spec.pixels;
    let np = nu * nv;
    let units = s.spec.response.units();
    let (mean, sigma) = d.tally.mean_and_sigma(histories);
    let mut g = Group::with_kind(name, crate::output::kind::IMAGE);
    let row_edges: Vec<f64> = (0..=nv).map(|i| s.center_v - 0.5 * s.spec.size_cm[1] + i as f64 * s.pitch[1]).collect();
    let col_edges: Vec<f64> = (0..=nu).map(|i| s.center_u - 0.5 * s.spec.size_cm[0] + i as f64 * s.pitch[0]).collect();
    let axis_names = ["x", "y", "z"];
    let attach = |g: &mut Group, ds: &str| {
        g.attach_axis(ds, 0, "row_edges", &row_edges, "cm").expect("consistent axis layout");
        g.attach_axis(ds, 1, "column_edges", &col_edges, "cm").expect("consistent axis layout");
    };
    for (c, cname) in CATEGORIES.iter().enumerate() {
        g.add_dataset(Dataset::f64_nd(cname, &[nv, nu], mean[c * np..(c + 1) * np].to_vec(), units));
        g.add_dataset(Dataset::f64_nd(&format!("{cname}_sigma"), &[nv, nu], sigma[c * np..(c + 1) * np].to_vec(), units));
        attach(&mut g, cname);
        attach(&mut g, &format!("{cname}_sigma"));
    }
    // Per-pixel SPR (first-order uncertainty, neglecting the P–S covariance).
    let mut spr = vec![0.0; np];
    let mut spr_s = vec![0.0; np];
    for i in 0..np {
        let (p, sp) = (mean[i], sigma[i]);
        let (sc, ss) = (mean[CAT_SCATTER * np + i], sigma[CAT_SCATTER * np + i]);
        if p > 0.0 {
            let (q, qs) = ratio_sigma(sc, ss, p, sp);
            spr[i] = q;
            spr_s[i] = if qs.is_finite() { qs } else { 0.0 };
        }
    }
    g.add_dataset(Dataset::f64_nd("spr", &[nv, nu], spr, "1"));
    g.add_dataset(Dataset::f64_nd("spr_sigma", &[nv, nu], spr_s, "1"));
    attach(&mut g, "spr");
    attach(&mut g, "spr_sigma");
    if let Some(img) = &s.primary_deterministic {
        g.add_dataset(Dataset::f64_nd("primary_deterministic", &[nv, nu], img.clone(), units));
        attach(&mut g, "primary_deterministic");
    }
    let sm = d.summary(histories);
    g.add_dataset(Dataset::f64_1d("roi_summary", sm.mean.clone(), units).with_attr("labels", summary::LABELS.join(",")));
    g.add_dataset(Dataset::f64_1d("roi_summary_sigma", sm.sigma.clone(), units));
    g.set_attr("spr_roi", sm.spr_roi.0);
    g.set_attr("spr_roi_sigma", sm.spr_roi.1);
    g.set_attr("scatter_fraction_roi", sm.scatter_fraction_roi.0);
    g.set_attr("scatter_fraction_roi_sigma", sm.scatter_fraction_roi.1);
    if let Some((pd, pd_ng)) = s.primary_deterministic_roi {
        g.set_attr("primary_deterministic_roi", pd);
        g.set_attr("primary_deterministic_roi_no_grid", pd_ng);
        let mc = sm.mean[summary::ROI_PRIMARY];
        let mcs = sm.sigma[summary::ROI_PRIMARY];
        if pd > 0.0 {
            g.set_attr("spr_roi_deterministic_primary", sm.mean[summary::ROI_SCATTER] / pd);
            g.set_attr("spr_roi_deterministic_primary_sigma", sm.sigma[summary::ROI_SCATTER] / pd);
            g.set_attr("primary_roi_mc_over_deterministic", mc / pd);
            g.set_attr("primary_roi_mc_over_deterministic_sigma", mcs / pd);
        }
    }
    if let Some((tp, ts, k)) = sm.grid {
        g.set_attr("grid_primary_transmission", tp);
        g.set_attr("grid_scatter_transmission", ts);
        g.set_attr("grid_contrast_improvement_factor", k);
    }
    let [iu0, iu1, iv0, iv1] = s.roi;
    g.set_attr("roi_size_cm", format!("{} x {}", (iu1 - iu0) as f64 * s.pitch[0], (iv1 - iv0) as f64 * s.pitch[1]));
    g.set_attr("roi_pixels", format!("columns {iu0}..{iu1}, rows {iv0}..{iv1}"));
    g.set_attr("normal_axis", axis_names[s.n_axis]);
    g.set_attr("row_axis", axis_names[s.v_axis]);
    g.set_attr("column_axis", axis_names[s.u_axis]);
    g.add_dataset(Dataset::f64_1d("center", vec![s.spec.center_cm.x, s.spec.center_cm.y, s.spec.center_cm.z], "cm"));
    g.set_attr("response", s.spec.response.name().as_str());
    g.set_attr("estimator", if s.spec.forced_detection { "scatter: forced detection (next-event) at every interaction site; primary: analog crossings" } else { "analog crossings of the face" });
    g.set_attr(
        "normalisation",
        "per source history and per unit detector area, by the photon's history at the face: primary (uncollided), single_compton, single_rayleigh, multiple, fluorescence; scatter = all but primary; spr = scatter / primary per pixel; primary_deterministic = ray-traced uncollided signal without noise; roi_summary = means over the ROI pixels and over the whole face",
    );
    g
}

/// A detector scorer from a deck's `kind = "detector"` entry. `resolve` turns a material name
/// (and the deck key it came from) into a material, or an error message.
pub fn from_deck(
    det: &crate::deck::Detector,
    geometry: &Geometry,
    materials: &[MaterialXs],
    source: &Source,
    options: &PhysicsOptions,
    resolve: impl Fn(&str, &str) -> Result<Material, String>,
) -> Result<DetectorScorer, String> {
    use crate::deck;
    let axis = det.normal_axis.index();
    let response = match &det.response {
        deck::Response::EnergyFluence => Response::EnergyFluence,
        deck::Response::PhotonFluence => Response::PhotonFluence,
        deck::Response::Absorbed { material, thickness_cm } => {
            let m = resolve(&material.name, "layer.material")?;
            Response::Absorbed(LayerResponse::new(&m, *thickness_cm, options, source.spectrum.max_kev()).map_err(|e| format!("layer: {e}"))?)
        }
    };
    let c = det.position_cm;
    let mut spec = DetectorSpec::new(Vec3::new(c[0], c[1], c[2]), axis, det.size_cm, [det.pixels[0] as usize, det.pixels[1] as usize], response);
    spec.forced_detection = det.forced_detection;
    if let Some(r) = det.roi_size_cm {
        spec.roi_size_cm = r;
    }
    spec.fd_face_points = det.forced_detection_face_points;
    spec.fd_coherent_sampling = det.forced_detection_coherent_directions;
    spec.fd_steer = det.forced_detection_steer;
    spec.fd_roulette_below = det.forced_detection_roulette_below;
    spec.fd_along_flights = det.forced_detection_from == deck::ForcedDetectionFrom::Flights;
    spec.primary_subpixels = det.primary_subpixels;
    spec.primary_focal_points = det.primary_focal_points;
    if let Some(g) = &det.anti_scatter_grid {
        let table = |name: &str, key: &str| -> Result<MaterialXs, String> {
            let m = resolve(name, key)?;
            MaterialXs::new(m.name(), m.density_g_cm3(), m.composition(), options).map_err(|e| format!("{key}: {e}"))
        };
        let strip = table(&g.strip_material.name, "anti_scatter_grid.strip_material")?;
        let inter = table(&g.interspace_material.name, "anti_scatter_grid.interspace_material")?;
        spec.grid = Some(GridModel::new(g.ratio, g.strips_per_cm, g.strip_width_cm, g.focus_distance_cm, strip, inter).map_err(|e| format!("anti_scatter_grid: {e}"))?);
    }
    DetectorScorer::new(spec, geometry, materials, source, options).map_err(|e| e.to_string())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The forced-detection angular densities are the distributions the transport samples:
    /// χ² of 2·10⁶ sampled cos θ in 40 bins against 2π ∫ p(Ω) dcos over each bin, below the
    /// 99.9th percentile of χ²(39) ≈ 72.1 (standard tables); bound Compton and Rayleigh on
    /// oxygen and hydrogen at 30 and 70 keV.
    #[test]
    fn angular_densities_match_the_samplers() {
        let options = PhysicsOptions::default();
        for z in [1u32, 8] {
            let el = dosemill_xsdata::elements().get(z).unwrap();
            let norm = ElementNorm::new(el, &options, 1.0, 100.0);
            let table = crate::physics::rayleigh::RayleighTable::new(el);
            for kev in [30.0, 70.0] {
                for coherent in [false, true] {
                    let sigma = 1.0 / if coherent { norm.inv_coh.as_ref().unwrap().at_ln(f64::ln(kev)) } else { norm.inv_inc.at_ln(f64::ln(kev)) };
                    let density = |c: f64| {
                        let d = if coherent { coherent_dsigma(kev, c, el) } else { incoherent_dsigma(klein_nishina::dsigma_domega_cm2(kev, c), kev, c, el, true) };
                        std::f64::consts::TAU * d / sigma
                    };
                    let bins = 40;
                    let mut count = vec![0f64; bins];
                    let mut rng = history_stream(17, z as u64 * 1000 + kev as u64);
                    let n = 2_000_000;
                    for _ in 0..n {
                        let c = if coherent { table.sample(kev, &mut rng) } else { crate::physics::compton::sample(kev, el, true, &mut rng).1 };
                        let b = (((c + 1.0) * 0.5 * bins as f64) as usize).min(bins - 1);
                        count[b] += 1.0;
                    }
                    let mut chi2 = 0.0;
                    let mut total_p = 0.0;
                    for (b, &c) in count.iter().enumerate() {
                        let (lo, hi) = (-1.0 + 2.0 * b as f64 / bins as f64, -1.0 + 2.0 * (b + 1) as f64 / bins as f64);
                        let m = 200;
                        let p: f64 = (0..m).map(|k| density(lo + (hi - lo) * (k as f64 + 0.5) / m as f64)).sum::<f64>() * (hi - lo) / m as f64;
                        total_p += p;
                        let e = p * n as f64;
                        chi2 += (c - e).powi(2) / e;
                    }
                    assert!((total_p - 1.0).abs() < 2e-3, "Z {z} {kev} keV coherent {coherent}: density integrates to {total_p}");
                    assert!(chi2 < 72.1, "Z {z} {kev} keV coherent {coherent}: chi2 {chi2}");
                }
            }
        }
    }
}
