//! Scoring: what a run measures. Each scorer is a variant of the closed enum [`Scorer`], fed by
//! the transport loop through a few events (energy deposited, photon escaping, interaction) and
//! keeping its bins in a [`Tally`] (history-by-history sums with uncertainties).
//!
//! Every score is a mean per incident history with its standard error (1σ). Energy deposited is
//! kerma-approximation energy: what the photon gives to electrons is counted where it happens.

pub mod axial;
pub mod detector;
pub mod grid;
pub mod tally;
pub mod voxel_dose;

pub use tally::Tally;

use crate::physics::Interaction;
use dosemill_geometry::{Region, Vec3};

/// Floor on |cos θ| in the surface-crossing fluence estimator.
pub const MIN_COS: f64 = 0.01;

/// J per keV.
pub const JOULE_PER_KEV: f64 = 1.602_176_634e-16;

/// The state of a photon as scorers see it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PhotonView {
    /// Position (cm).
    pub pos: Vec3,
    /// Unit direction.
    pub dir: Vec3,
    /// Energy (keV).
    pub kev: f64,
    /// ln(kev), as the transport keeps it (the same bits as `kev.ln()`).
    pub ln_kev: f64,
    /// Statistical weight.
    pub weight: f64,
    /// Incoherent scatterings so far (of this photon; a fluorescence photon starts at zero).
    pub incoherent: u16,
    /// Coherent scatterings so far.
    pub coherent: u16,
    /// True for a fluorescence photon (or a descendant of one).
    pub fluorescence: bool,
}

impl PhotonView {
    /// True when the photon has not interacted since it left the source.
    #[inline]
    pub fn uncollided(&self) -> bool {
        self.incoherent == 0 && self.coherent == 0 && !self.fluorescence
    }
}

/// An interaction as scorers see it, just before it changes the photon.
#[derive(Debug, Clone, Copy)]
pub struct InteractionSite<'a> {
    /// The photon arriving at the site (position = the site).
    pub photon: PhotonView,
    /// Region of the site.
    pub region: Region,
    /// Index of the material at the site (into `Problem::materials`).
    pub material: u16,
    /// The element the photon interacts with.
    pub element: &'a dosemill_xsdata::Element,
    /// What happens.
    pub kind: Interaction,
}

/// Indices of the interaction-count bins.
pub mod counts {
    /// Photoelectric absorptions.
    pub const PHOTOELECTRIC: usize = 0;
    /// Incoherent scatterings.
    pub const INCOHERENT: usize = 1;
    /// Coherent scatterings.
    pub const COHERENT: usize = 2;
    /// Fluorescence photons emitted (above the cut-off).
    pub const FLUORESCENCE: usize = 3;
    /// Photons absorbed for falling below the energy cut-off.
    pub const CUTOFF: usize = 4;
    /// Labels, in bin order.
    pub const LABELS: [&str; 5] = ["photoelectric", "incoherent", "coherent", "fluorescence_emitted", "below_cutoff"];
}

/// A scorer and its bins.
#[derive(Debug, Clone, PartialEq)]
pub enum Scorer {
    /// Energy deposited per region: one bin per slab layer, the last bin for the world medium.
    RegionEnergy {
        /// The tally (layers + 1 bins, keV per history).
        tally: Tally,
    },
    /// Energy deposited in depth bins along z, over the whole lateral extent.
    DepthEnergy {
        /// Front of the first bin (cm).
        z0_cm: f64,
        /// Bin width (cm).
        dz_cm: f64,
        /// The tally (keV per history per bin).
        tally: Tally,
    },
    /// Energy and number of photons leaving the problem forward (+z) and backward (−z).
    Escape {
        /// Bins: forward energy, backward energy (keV), forward count, backward count.
        tally: Tally,
    },
    /// Number of interactions of each type per history (see [`counts`]).
    Interactions {
        /// The tally.
        tally: Tally,
    },
    /// Air kerma from the photon fluence crossing a disc (a small area) on a plane normal to an
    /// axis, in both directions: K = Σ E·(μen/ρ)_air(E) / (A·|cos θ|) over crossings (the
    /// surface-crossing fluence estimator; |cos θ| is floored at `MIN_COS` to keep the variance
    /// finite for grazing photons, a bias far below the statistical uncertainty for beams
    /// crossing near normal incidence).
    AirKerma {
        /// Axis normal to the plane: 0 = x, 1 = y, 2 = z.
        axis: usize,
        /// Centre of the disc (cm).
        center_cm: Vec3,
        /// Radius of the disc (cm).
        radius_cm: f64,
        /// Air, for μen/ρ.
        air: std::sync::Arc<dosemill_xsdata::material::Material>,
        /// Bins (per history): kerma total, towards +axis, towards −axis (keV/g); planar photon
        /// fluence total, towards +axis, towards −axis (1/cm²).
        tally: Tally,
    },
    /// Dose in the voxels of a grid (analog or track-length), with per-region sums.
    VoxelDose(Box<voxel_dose::VoxelDose>),
    /// Spectrum of photons leaving the problem forward (+z), or in every direction, split into
    /// uncollided source photons, scattered source photons and fluorescence photons.
    TransmittedSpectrum {
        /// Lowest energy (keV).
        e0_kev: f64,
        /// Bin width (keV).
        de_kev: f64,
        /// Number of energy bins.
        bins: usize,
        /// Count photons leaving in every direction, not only forward.
        all_directions: bool,
        /// The tally: bins `0..bins` uncollided source photons, `bins..2·bins` scattered photons
        /// (source or fluorescence), `2·bins..3·bins` unscattered fluorescence photons,
        /// `3·bins..4·bins` all of them (photons per history).
        tally: Tally,
    },
    /// Collision kerma of chosen media on on-axis discs of planes normal to z (keV/g per history).
    PlaneKerma(axial::PlaneKerma),
    /// An imaging detector: primary and scatter images, SPR, grid, forced detection.
    Detector(Box<detector::DetectorScorer>),
}

impl Scorer {
    /// Energy deposited per layer of a stack of `layers` layers (+1 bin for the world medium).
    pub fn region_energy(layers: usize) -> Self {
        Scorer::RegionEnergy { tally: Tally::new(layers + 1) }
    }

    /// Energy deposited in `bins` depth bins of width `dz_cm` from `z0_cm`.
    pub fn depth_energy(z0_cm: f64, dz_cm: f64, bins: usize) -> Self {
        Scorer::DepthEnergy { z0_cm, dz_cm, tally: Tally::new(bins) }
    }

    /// Energy and photons leaving forward and backward.
    pub fn escape_counter() -> Self {
        Scorer::Escape { tally: Tally::new(4) }
    }

    /// Interaction counts.
    pub fn interactions() -> Self {
        Scorer::Interactions { tally: Tally::new(counts::LABELS.len()) }
    }

    /// Spectrum of escaping photons in `bins` bins of `de_kev` from `e0_kev`.
    pub fn transmitted_spectrum(e0_kev: f64, de_kev: f64, bins: usize, all_directions: bool) -> Self {
        Scorer::TransmittedSpectrum { e0_kev, de_kev, bins, all_directions, tally: Tally::new(4 * bins) }
    }

    /// The tally of any scorer.
    pub fn tally(&self) -> &Tally {
        match self {
            Scorer::RegionEnergy { tally }
            | Scorer::DepthEnergy { tally, .. }
            | Scorer::Escape { tally }
            | Scorer::Interactions { tally }
            | Scorer::TransmittedSpectrum { tally, .. }
            | Scorer::AirKerma { tally, .. }
            | Scorer::PlaneKerma(axial::PlaneKerma { tally, .. }) => tally,
            Scorer::VoxelDose(v) => &v.tally,
            Scorer::Detector(d) => &d.tally,
        }
    }

    /// The tally of any scorer, mutably.
    pub fn tally_mut(&mut self) -> &mut Tally {
        match self {
            Scorer::RegionEnergy { tally }
            | Scorer::DepthEnergy { tally, .. }
            | Scorer::Escape { tally }
            | Scorer::Interactions { tally }
            | Scorer::TransmittedSpectrum { tally, .. }
            | Scorer::AirKerma { tally, .. }
            | Scorer::PlaneKerma(axial::PlaneKerma { tally, .. }) => tally,
            Scorer::VoxelDose(v) => &mut v.tally,
            Scorer::Detector(d) => &mut d.tally,
        }
    }

    /// True for scorers that need every interaction site ([`Scorer::interaction`]).
    pub fn wants_interactions(&self) -> bool {
        matches!(self, Scorer::Detector(d) if d.forced_detection())
    }

    /// An interaction about to happen (next-event estimators look from here).
    #[inline]
    pub fn interaction(&mut self, problem: &crate::transport::Problem, site: &InteractionSite, history: u64) {
        if let Scorer::Detector(d) = self {
            d.interaction(problem, site, history);
        }
    }

    /// The start of a straight flight of `photon` (next-event estimators along flights).
    #[inline]
    pub fn flight(&mut self, problem: &crate::transport::Problem, photon: &PhotonView, history: u64) {
        if let Scorer::Detector(d) = self {
            d.flight(problem, photon, history);
        }
    }

    /// True for scorers that need every flight segment ([`Scorer::segment`]).
    pub fn wants_segments(&self) -> bool {
        match self {
            Scorer::AirKerma { .. } | Scorer::PlaneKerma(_) | Scorer::Detector(_) => true,
            Scorer::VoxelDose(v) => v.estimator == voxel_dose::DoseEstimator::TrackLength,
            _ => false,
        }
    }

    /// A straight flight of `photon` from its position over `length_cm` (through any medium).
    #[inline]
    pub fn segment(&mut self, photon: &PhotonView, length_cm: f64, history: u64) {
        if let Scorer::VoxelDose(v) = self {
            v.segment(photon, length_cm, history);
            return;
        }
        if let Scorer::PlaneKerma(p) = self {
            return p.segment(photon, length_cm, history);
        }
        if let Scorer::Detector(d) = self {
            d.segment(photon, length_cm, history);
            return;
        }
        if let Scorer::AirKerma { axis, center_cm, radius_cm, air, tally } = self {
            let a = *axis;
            let plane = center_cm.axis(a);
            let d = photon.dir.axis(a);
            let za = photon.pos.axis(a);
            let zb = za + d * length_cm;
            // Half-open test: a crossing that ends exactly on the plane counts once.
            if za.min(zb) < plane && plane <= za.max(zb) && d != 0.0 {
                let t = (plane - za) / d;
                let hit = photon.pos + photon.dir * t;
                let r2 = (0..3).filter(|&k| k != a).map(|k| (hit.axis(k) - center_cm.axis(k)).powi(2)).sum::<f64>();
                if r2 <= *radius_cm * *radius_cm {
                    let area = std::f64::consts::PI * *radius_cm * *radius_cm;
                    let fluence = photon.weight / (area * d.abs().max(MIN_COS));
                    let muen = air.absorption_table().map(|t| t.muen_rho_cm2_g(photon.kev)).unwrap_or(0.0);
                    // keV/g here (per-history values of order 0.1): the tally's fixed point resolves
                    // them and their squares; the result writer converts to Gy.
                    let kerma = fluence * photon.kev * muen;
                    let dir_bin = if d > 0.0 { 1 } else { 2 };
                    tally.add(0, kerma, history);
                    tally.add(dir_bin, kerma, history);
                    tally.add(3, fluence, history);
                    tally.add(3 + dir_bin, fluence, history);
                }
            }
        }
    }

    /// A zeroed copy with the same configuration.
    pub fn zeroed(&self) -> Scorer {
        let mut s = self.clone();
        let t = s.tally().zeroed_like();
        *s.tally_mut() = t;
        s
    }

    /// The copy a worker thread scores into: zeroed, except that a shared tally (voxel dose
    /// grids) stays a view of this scorer's sums (see [`Tally::worker_view`]).
    pub fn worker_view(&self) -> Scorer {
        let mut s = self.clone();
        let t = s.tally().worker_view();
        *s.tally_mut() = t;
        s
    }

    /// Energy `kev` (× weight) deposited at `pos` in `region`.
    #[inline]
    pub fn deposit(&mut self, region: Region, pos: Vec3, kev: f64, history: u64) {
        match self {
            Scorer::RegionEnergy { tally } => {
                let bin = region.index().unwrap_or(tally.len() - 1).min(tally.len() - 1);
                tally.add(bin, kev, history);
            }
            Scorer::DepthEnergy { z0_cm, dz_cm, tally } => {
                let f = (pos.z - *z0_cm) / *dz_cm;
                if f >= 0.0 && f < tally.len() as f64 {
                    tally.add(f as usize, kev, history);
                }
            }
            Scorer::VoxelDose(v) => v.deposit(region, pos, kev, history),
            _ => {}
        }
    }

    /// A real collision about to happen in phantom voxel `v` (a hint: scorers that will read
    /// memory for its deposits may ask for it now).
    #[inline]
    pub fn collision_ahead(&self, v: usize) {
        if let Scorer::VoxelDose(d) = self {
            d.collision_ahead(v);
        }
    }

    /// A photon leaving the problem.
    #[inline]
    pub fn escape(&mut self, photon: &PhotonView, history: u64) {
        match self {
            Scorer::Escape { tally } => {
                let (e, c) = if photon.dir.z > 0.0 { (0, 2) } else { (1, 3) };
                tally.add(e, photon.kev * photon.weight, history);
                tally.add(c, photon.weight, history);
            }
            Scorer::TransmittedSpectrum { e0_kev, de_kev, bins, all_directions, tally } => {
                if *all_directions || photon.dir.z > 0.0 {
                    let f = (photon.kev - *e0_kev) / *de_kev;
                    if f >= 0.0 && f < *bins as f64 {
                        let unscattered = photon.incoherent == 0 && photon.coherent == 0;
                        let offset = match (photon.fluorescence, unscattered) {
                            (false, true) => 0,
                            (true, true) => 2 * *bins,
                            (_, false) => *bins,
                        };
                        tally.add(offset + f as usize, photon.weight, history);
                        tally.add(3 * *bins + f as usize, photon.weight, history);
                    }
                }
            }
            _ => {}
        }
    }

    /// An interaction or a transport event counted in the [`counts`] bins.
    #[inline]
    pub fn count(&mut self, bin: usize, weight: f64, history: u64) {
        if let Scorer::Interactions { tally } = self {
            tally.add(bin, weight, history);
        }
    }

    /// The count bin of an interaction.
    #[inline]
    pub fn interaction_bin(kind: Interaction) -> usize {
        match kind {
            Interaction::Photoelectric => counts::PHOTOELECTRIC,
            Interaction::Incoherent => counts::INCOHERENT,
            Interaction::Coherent => counts::COHERENT,
        }
    }
}
