//! X-ray tube spectra: a semi-empirical thick-target model, beam quality, and a binned
//! representation ready for sampling source energies.
//!
//! # Model
//!
//! We follow the approach of Birch & Marshall (R. Birch and M. Marshall, "Computation of
//! bremsstrahlung X-ray spectra and comparison with spectra measured with a Ge(Li) detector",
//! Phys. Med. Biol. 24 (1979) 505–517): a thin-target cross section integrated along the
//! electron's path in the anode, electron slowing by the Thomson–Whiddington law, and
//! attenuation of every photon on its way out of the anode. Our own choices within it:
//!
//! * **Electron slowing.** T(s)² = T0² − C·s, s the path length (g/cm²). C is set so that the
//!   Thomson–Whiddington range T0²/C equals the continuous-slowing-down range from the Bethe
//!   collision stopping power (ICRU Report 37, mean excitation energies W 727 eV, Mo 424 eV,
//!   Rh 449 eV, from memory).
//! * **Bremsstrahlung.** The energy radiated per unit energy lost, per keV of photon energy,
//!   is 2kZ·S(E/T) for photon energies E below the electron's energy T, with S the thin-target
//!   shape of `thin_target.rs` (∫₀¹ S = 1: non-relativistic Born with Elwert's factor by
//!   default, Kramers' flat S = 1 as an option). With Thomson–Whiddington slowing this gives,
//!   per incident electron into 4π,
//!   N(E) dE = (2 k Z / E) ∫_E^{T0} S(E/T) P(E, s(T)) dT dE, s(T) = (T0² − T²)/C, where P is
//!   the probability that the electron is still in the anode times the photon's transmission
//!   out of it. Kramers' ideal target (S = P = 1, the anode model switched off) gives exactly
//!   Kramers' thick-target law: energy fluence ∝ Z (T0 − E), a straight line ending at the
//!   Duane–Hunt limit E_max = e·kVp.
//! * **Depth of emission and self-absorption** (`depth.rs`). Archard's diffusion model
//!   (D. B. Archard, J. Appl. Phys. 32 (1961) 1505): straight in along the beam to the depth of
//!   complete diffusion x_d = 40R/(7Z), then on in a random direction; electrons reaching the
//!   surface are backscattered and emit no more. Electrons arrive perpendicular to the central
//!   ray, i.e. at the anode angle θ to the target normal; a photon made at depth z crosses
//!   z / sin θ of anode on its way out along the central ray. μ of the anode comes from the
//!   project's element tables.
//! * **Characteristic lines.** K lines for every anode, L lines for tungsten only, produced
//!   only when the electron energy exceeds the edge. Vacancies come from the Worthington &
//!   Tomlin (1956) empirical ionisation cross section integrated along the same path (with the
//!   same backscatter loss; direct excitation), plus photo-excitation by the anode's own
//!   continuum above the edge (indirect excitation; continuum treated as a surface source),
//!   with L1→L2/L3 Coster–Kronig transfer; each line is attenuated from its depth of
//!   production. Fluorescence yields, line energies and line shares come from the
//!   project's element tables.
//! * **Ripple.** V(φ) = kVp·(1 − r + r·|cos φ|) over a period, r = ripple/100, constant tube
//!   current; the spectrum is the average of constant-potential spectra over 64 instants.
//! * **Filtration.** Inherent (beryllium window plus aluminium equivalent), the added filters
//!   in beam order, and the air path, each as narrow-beam attenuation exp(−μ t).
//!
//! # Absolute output and its uncertainty
//!
//! The bremsstrahlung yield is fixed by Kramers' constant: an electron that slows fully in the
//! target radiates k·Z·T0² (keV) into 4π, k = 1.1e-9 per volt ([`model::KRAMERS_K_PER_KEV`]).
//! This is the efficiency commonly quoted for x-ray targets (common practice; quoted constants
//! span about 0.9–1.4e-9 per volt) and agrees with the radiative yield of a fully stopped
//! electron from the non-relativistic radiative stopping power. Electron backscatter then
//! lowers the yield per incident electron; emission is taken as isotropic; 1 mAs =
//! 6.2415e15 electrons. The output is photons per mm² per mAs at the chosen distance. We
//! deliberately do not scale the output to a measured tube output, so that the
//! common-practice output check (air kerma per mAs at 80 kV) tests the model rather than its
//! calibration. Expect the absolute output to be uncertain by about ±30–40 % (Kramers'
//! constant ±30 %, Archard's simple diffusion picture, no heel effect, real anodes roughen
//! and lose output with use); spectral shapes and HVLs are much better determined.
//! Characteristic intensities are uncertain by roughly ±50 % (non-relativistic ionisation cross
//! section, simplified indirect excitation).
//!
//! # Limits
//!
//! Research use only. Archard's diffusion picture of electron transport (no Monte Carlo
//! electron transport); isotropic emission (no heel effect along the anode–cathode axis, no
//! off-axis variation); M lines are ignored; K-shell vacancies do not feed L vacancies; radiative energy loss of the electrons is left out of their slowing (about
//! 1 % of the loss below 300 keV).
//!
//! # Sampling convention
//!
//! [`Spectrum::to_sampling_table`] returns one entry per continuum bin and one per line. An
//! entry is an energy interval [lo, hi] and a weight (photons/mm²/mAs); the energy of a sampled
//! photon is lo + u·(hi − lo) with u uniform in [0, 1). Continuum bins thus have a flat density
//! inside the bin; lines have lo = hi, so they come out at the exact line energy.

mod data;
mod depth;
mod electron;
pub mod export;
pub mod model;
pub mod plot;
mod quadrature;
mod thin_target;
pub use thin_target::ThinTarget;
pub mod quality;
mod tube;

pub use model::{compute_spectrum, SpectrumOptions};
pub use quality::{air_kerma_ugy_per_mas, hvls_mm, solve_added_filtration, solve_added_filtration_for, BeamQuality};
pub use tube::{Anode, Filter, InherentFiltration, Tube, ANODE_ANGLE_RANGE_DEG, FILTER_MAX_MM, KVP_MAX, KVP_MIN, RIPPLE_RANGE_PERCENT};

use serde::Serialize;

/// Errors of the spectrum model and its inputs.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SpectrumError {
    /// Tube voltage outside the model's range.
    #[error("tube voltage {0} kV is outside the valid range {min}–{max} kV", min = KVP_MIN, max = KVP_MAX)]
    KvpOutOfRange(f64),
    /// Unknown anode.
    #[error("unknown anode `{0}`; valid anodes are W, Mo, Rh")]
    UnknownAnode(String),
    /// Anode angle outside the accepted range.
    #[error("anode angle {0}° is outside the valid range 3–45°")]
    AnodeAngleOutOfRange(f64),
    /// Ripple outside the accepted range.
    #[error("voltage ripple {0} % is outside the valid range 0–50 %")]
    RippleOutOfRange(f64),
    /// A filter thickness that is negative, too large or not a number.
    #[error("filter thickness {thickness_mm} mm for `{material}` is outside the valid range 0–100 mm")]
    FilterThickness {
        /// The filter material.
        material: String,
        /// The thickness given (mm).
        thickness_mm: f64,
    },
    /// A filter given on the command line in the wrong form.
    #[error("malformed filter `{spec}`: {reason}")]
    BadFilterSpec {
        /// The text given.
        spec: String,
        /// What is wrong and how to write it.
        reason: String,
    },
    /// A model option given in the wrong form (the text says what is accepted).
    #[error("{0}")]
    Option(String),
    /// Bin width outside the accepted range.
    #[error("bin width {0} keV is outside the valid range 0.01–10 keV")]
    BinWidthOutOfRange(f64),
    /// Distance or air path outside the accepted range.
    #[error("distance {0} cm is outside the valid range 1–10000 cm")]
    DistanceOutOfRange(f64),
    /// Material not in the library (the text is the library's message, with suggestions).
    #[error("filter material: {0}")]
    UnknownMaterial(String),
    /// The data tables refused a request.
    #[error("interaction data: {0}")]
    Data(String),
    /// The filtration solver could not reach the target.
    #[error("no added thickness of `{material}` up to {max_mm} mm gives a first HVL of {target_mm_al} mm (without it the HVL is already {start_mm_al:.3} mm; a lower target needs less filtration on the tube)")]
    TargetUnreachable {
        /// Filter material.
        material: String,
        /// Target first HVL (mm Al).
        target_mm_al: f64,
        /// First HVL without the extra filter (mm Al).
        start_mm_al: f64,
        /// Largest thickness tried (mm).
        max_mm: f64,
    },
    /// The beam carries no air kerma (e.g. filtered to nothing).
    #[error("the spectrum carries no air kerma; the filtration absorbs the whole beam")]
    EmptyBeam,
}

/// One characteristic line after filtration.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SpectralLine {
    /// Line energy (keV).
    pub kev: f64,
    /// Photons per mm² per mAs at the spectrum's distance.
    pub fluence_per_mm2_per_mas: f64,
    /// Transition name from the element tables (e.g. "K-L3").
    pub label: String,
}

/// A binned tube spectrum at a distance, per mAs, with the characteristic lines kept apart.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Spectrum {
    /// Bin edges (keV), ascending; the last edge is kVp.
    pub bin_edges_kev: Vec<f64>,
    /// Continuum photons per mm² per mAs in each bin (integrated over the bin).
    pub continuum_per_mm2_per_mas: Vec<f64>,
    /// Characteristic lines.
    pub lines: Vec<SpectralLine>,
    /// Distance from the focal spot (cm).
    pub distance_cm: f64,
    /// Peak tube voltage (kV).
    pub kvp: f64,
    /// Anode element.
    pub anode: Anode,
    /// What made it: "anode model, <thin-target form> thin target" or "Kramers ideal target".
    pub model: String,
}

/// Energies and weights for building a sampling (alias) table. See the module overview for the
/// convention: energy = lo_kev + u·(hi_kev − lo_kev), u uniform in [0, 1).
#[derive(Debug, Clone, PartialEq)]
pub struct SamplingTable {
    /// Lower end of each entry (keV).
    pub lo_kev: Vec<f64>,
    /// Upper end of each entry (keV); equal to `lo_kev` for a line.
    pub hi_kev: Vec<f64>,
    /// Weight of each entry (photons per mm² per mAs at the spectrum's distance).
    pub weights: Vec<f64>,
}

impl Spectrum {
    /// Bin centres (keV).
    pub fn bin_centres_kev(&self) -> Vec<f64> {
        self.bin_edges_kev.windows(2).map(|w| 0.5 * (w[0] + w[1])).collect()
    }

    /// Index of the bin holding `kev` (lower edge inclusive), if any.
    pub fn bin_index(&self, kev: f64) -> Option<usize> {
        let e = &self.bin_edges_kev;
        if kev < e[0] || kev > *e.last()? {
            return None;
        }
        let i = e.partition_point(|x| *x <= kev);
        Some(i.saturating_sub(1).min(e.len() - 2))
    }

    /// Photons per mm² per mAs in each bin, lines included in the bin that holds them.
    pub fn binned_fluence_per_mm2_per_mas(&self) -> Vec<f64> {
        let mut out = self.continuum_per_mm2_per_mas.clone();
        for l in &self.lines {
            if let Some(i) = self.bin_index(l.kev) {
                out[i] += l.fluence_per_mm2_per_mas;
            }
        }
        out
    }

    /// Total photons per mm² per mAs.
    pub fn total_fluence_per_mm2_per_mas(&self) -> f64 {
        self.continuum_per_mm2_per_mas.iter().sum::<f64>()
            + self.lines.iter().map(|l| l.fluence_per_mm2_per_mas).sum::<f64>()
    }

    /// The same spectrum scaled by the inverse square law to another distance (air unchanged).
    pub fn at_distance_cm(&self, distance_cm: f64) -> Spectrum {
        let f = (self.distance_cm / distance_cm).powi(2);
        let mut s = self.clone();
        s.continuum_per_mm2_per_mas.iter_mut().for_each(|v| *v *= f);
        s.lines.iter_mut().for_each(|l| l.fluence_per_mm2_per_mas *= f);
        s.distance_cm = distance_cm;
        s
    }

    /// Entries for a sampling table: continuum bins with nonzero weight, then lines.
    pub fn to_sampling_table(&self) -> SamplingTable {
        let mut t = SamplingTable { lo_kev: Vec::new(), hi_kev: Vec::new(), weights: Vec::new() };
        for (i, w) in self.continuum_per_mm2_per_mas.iter().enumerate() {
            if *w > 0.0 {
                t.lo_kev.push(self.bin_edges_kev[i]);
                t.hi_kev.push(self.bin_edges_kev[i + 1]);
                t.weights.push(*w);
            }
        }
        for l in &self.lines {
            if l.fluence_per_mm2_per_mas > 0.0 {
                t.lo_kev.push(l.kev);
                t.hi_kev.push(l.kev);
                t.weights.push(l.fluence_per_mm2_per_mas);
            }
        }
        t
    }

    /// (energy keV, photons/mm²/mAs) pairs: bin centres for the continuum, exact energies for lines.
    pub fn components(&self) -> Vec<(f64, f64)> {
        let mut v: Vec<(f64, f64)> = self
            .bin_centres_kev()
            .into_iter()
            .zip(self.continuum_per_mm2_per_mas.iter().copied())
            .filter(|(_, f)| *f > 0.0)
            .collect();
        v.extend(self.lines.iter().map(|l| (l.kev, l.fluence_per_mm2_per_mas)));
        v
    }
}
