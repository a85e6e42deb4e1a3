//! The thick-target model: continuum and characteristic emission, self-absorption, ripple,
//! filtration and the absolute normalisation. The physics is described in the module overview
//! (`spectrum/mod.rs`); each step below names the relation it uses.

use dosemill_xsdata::Material;

use super::data::{self, ShellInfo};
use super::electron::{ionisation_cm2, StoppingMedium};
use super::depth::EmissionDepth;
use super::quadrature::GaussLegendre;
use super::thin_target::ThinTarget;
use super::tube::{Anode, Tube};
use super::{Spectrum, SpectralLine, SpectrumError};

/// Kramers' constant k: the energy radiated as bremsstrahlung into 4π per incident electron is
/// k · Z · T0² (T0 in keV, k in 1/keV), i.e. an efficiency k·Z·V. Common practice: 1.1e-9 per
/// volt (quoted values span about 0.9–1.4e-9 per volt, so this is uncertain by about ±30 %).
pub const KRAMERS_K_PER_KEV: f64 = 1.1e-6;
/// Electrons per milliampere-second: 1e-3 C / e (e = 1.602 176 634e-19 C, exact SI).
pub const ELECTRONS_PER_MAS: f64 = 1e-3 / 1.602_176_634e-19;
/// Number of instants sampled over one ripple period.
const RIPPLE_SAMPLES: usize = 64;
/// Gauss–Legendre points per energy sub-interval of a bin.
const ENERGY_POINTS: usize = 4;
/// Gauss–Legendre points per panel of the depth (electron-energy) integral.
const DEPTH_POINTS: usize = 8;
/// Beryllium and aluminium names as the materials library knows them.
const BERYLLIUM: &str = "Be";
const ALUMINIUM: &str = "Al";

/// Choices that switch parts of the model off (all on by default) and set the output grid.
#[derive(Debug, Clone, PartialEq)]
pub struct SpectrumOptions {
    /// Bin width (keV). Bin edges are multiples of it, starting at the first multiple ≥ 1 keV;
    /// the last bin ends at kVp.
    pub bin_kev: f64,
    /// Distance from the focal spot at which fluence is given (cm).
    pub distance_cm: f64,
    /// Air between focal spot and the point of interest (cm); `None` = `distance_cm`.
    pub air_path_cm: Option<f64>,
    /// The anode model: attenuation of photons on their way out of the anode, electron
    /// diffusion and backscatter, photo-excitation of lines by the continuum, and the
    /// thin-target form `thin_target`. `false` gives Kramers' ideal thick target (Kramers'
    /// flat thin-target form, every electron slows fully, nothing is absorbed).
    pub self_absorption: bool,
    /// Thin-target spectral shape used by the anode model (ignored when `self_absorption` is
    /// off).
    pub thin_target: ThinTarget,
    /// Inherent filtration, added filters and the air path.
    pub filtration: bool,
    /// Characteristic (K and L) lines.
    pub characteristic_lines: bool,
}

impl Default for SpectrumOptions {
    fn default() -> Self {
        SpectrumOptions {
            bin_kev: 0.5,
            distance_cm: 100.0,
            air_path_cm: None,
            self_absorption: true,
            thin_target: ThinTarget::default(),
            filtration: true,
            characteristic_lines: true,
        }
    }
}

impl SpectrumOptions {
    /// Checks bin width (0.01–10 keV), distance (1–10 000 cm) and air path (0–10 000 cm).
    pub fn validate(&self) -> Result<(), SpectrumError> {
        if !(self.bin_kev.is_finite() && (0.01..=10.0).contains(&self.bin_kev)) {
            return Err(SpectrumError::BinWidthOutOfRange(self.bin_kev));
        }
        if !(self.distance_cm.is_finite() && (1.0..=10_000.0).contains(&self.distance_cm)) {
            return Err(SpectrumError::DistanceOutOfRange(self.distance_cm));
        }
        if let Some(a) = self.air_path_cm {
            if !(a.is_finite() && (0.0..=10_000.0).contains(&a)) {
                return Err(SpectrumError::DistanceOutOfRange(a));
            }
        }
        Ok(())
    }
}

/// One attenuating layer resolved against the materials library.
#[derive(Debug, Clone)]
struct Layer {
    material: Material,
    /// Areal density ρ·t (g/cm²).
    areal_g_cm2: f64,
}

impl Layer {
    fn new(name: &str, thickness_mm: f64) -> Result<Layer, SpectrumError> {
        let material = data::material(name)?;
        let areal_g_cm2 = 0.1 * thickness_mm * material.density_g_cm3();
        Ok(Layer { material, areal_g_cm2 })
    }
}

/// Tube voltages (kV) sampled over one ripple period, each carrying equal weight.
///
/// Waveform model: V(φ) = kVp · (1 − r + r·|cos φ|), φ uniform over a period, r = ripple/100,
/// i.e. a rectified-sine ripple of peak-to-peak depth r·kVp riding below the peak. The tube
/// current is taken as constant over the period, so every instant weighs the same.
pub fn ripple_voltages_kv(kvp: f64, ripple_percent: f64) -> Vec<f64> {
    if ripple_percent <= 0.0 {
        return vec![kvp];
    }
    let r = ripple_percent / 100.0;
    (0..RIPPLE_SAMPLES)
        .map(|j| {
            let phi = std::f64::consts::PI * (j as f64 + 0.5) / RIPPLE_SAMPLES as f64;
            kvp * (1.0 - r + r * phi.cos().abs())
        })
        .collect()
}

/// Bin edges (keV): multiples of `bin_kev` from the first one ≥ 1 keV, closed by `kvp`.
pub fn bin_edges_kev(kvp: f64, bin_kev: f64) -> Vec<f64> {
    let first = (dosemill_xsdata::E_MIN_KEV / bin_kev - 1e-9).ceil() as i64;
    let mut edges = Vec::new();
    let mut k = first;
    loop {
        let e = k as f64 * bin_kev;
        if e >= kvp - 1e-9 * bin_kev {
            break;
        }
        edges.push(e);
        k += 1;
    }
    edges.push(kvp);
    edges
}

/// The shells followed for characteristic emission: K always, L1–L3 for tungsten only.
fn emitting_shells(anode: Anode, shells: Vec<ShellInfo>) -> Vec<ShellInfo> {
    shells
        .into_iter()
        .filter(|s| s.name == "K" || anode == Anode::W)
        .filter(|s| s.edge_kev > 0.0 && s.fluorescence_yield > 0.0)
        .map(|mut s| {
            // Lines below the tables' lowest energy never leave a tube and cannot be attenuated.
            s.lines.retain(|l| l.kev >= dosemill_xsdata::E_MIN_KEV);
            s
        })
        .collect()
}

/// Computes the spectrum of `tube` at `options.distance_cm`, per mAs.
pub fn compute_spectrum(tube: &Tube, options: &SpectrumOptions) -> Result<Spectrum, SpectrumError> {
    tube.validate()?;
    options.validate()?;
    let element = data::anode_element(tube.anode)?;
    let medium = StoppingMedium {
        z: element.z as f64,
        atomic_weight: element.atomic_weight,
        mean_excitation_kev: tube.anode.mean_excitation_kev(),
    };
    let theta = tube.anode_angle_deg.to_radians();
    // Anode attenuation used for self-absorption (0 when switched off).
    let absorbing = options.self_absorption;
    let shape = options.thin_target;

    // Attenuating layers in beam order.
    let mut layers: Vec<Layer> = Vec::new();
    if options.filtration {
        let inh = tube.inherent_filtration();
        if inh.be_window_mm > 0.0 {
            layers.push(Layer::new(BERYLLIUM, inh.be_window_mm)?);
        }
        if inh.al_equivalent_mm > 0.0 {
            layers.push(Layer::new(ALUMINIUM, inh.al_equivalent_mm)?);
        }
        for f in &tube.filters {
            layers.push(Layer::new(&f.material, f.thickness_mm)?);
        }
        let air_cm = options.air_path_cm.unwrap_or(options.distance_cm);
        if air_cm > 0.0 {
            let air = data::air()?.clone();
            let areal_g_cm2 = air_cm * air.density_g_cm3();
            layers.push(Layer { material: air, areal_g_cm2 });
        }
    }
    let transmission = |kev: f64| -> Result<f64, SpectrumError> {
        let mut mu_t = 0.0;
        for l in &layers {
            mu_t += data::mu_rho(&l.material, kev)? * l.areal_g_cm2;
        }
        Ok((-mu_t).exp())
    };
    let anode_mu_rho = |kev: f64| if absorbing { element.total_cm2_g(kev) } else { 0.0 };

    // Energies inside a bin where μ jumps: the integrand is split there.
    let mut edges_kev = element.edges_kev().to_vec();
    for l in &layers {
        edges_kev.extend(data::material_edges_kev(&l.material)?);
    }
    edges_kev.retain(|e| e.is_finite() && *e > 0.0);
    edges_kev.sort_by(f64::total_cmp);
    edges_kev.dedup();

    let edges = bin_edges_kev(tube.kvp, options.bin_kev);
    let nbins = edges.len() - 1;
    let mut continuum = vec![0.0; nbins];
    let gl_e = GaussLegendre::new(ENERGY_POINTS);
    let gl_t = GaussLegendre::new(DEPTH_POINTS);
    let gl_ideal = GaussLegendre::new(32);
    let voltages = ripple_voltages_kv(tube.kvp, tube.ripple_percent);
    let weight_per_instant = 1.0 / voltages.len() as f64;
    let d_mm = options.distance_cm * 10.0;
    let per_electron_to_fluence = ELECTRONS_PER_MAS / (4.0 * std::f64::consts::PI * d_mm * d_mm);

    // Characteristic shells, with L1 → L2/L3 Coster–Kronig transfer applied below.
    let shells = if options.characteristic_lines { emitting_shells(tube.anode, data::anode_shells(tube.anode)?) } else { Vec::new() };
    let mut line_acc: Vec<(f64, f64, String)> = Vec::new(); // (kev, photons per electron per 4π, label)
    for s in &shells {
        for l in &s.lines {
            line_acc.push((l.kev, 0.0, l.label.clone()));
        }
    }

    for &t0 in &voltages {
        let c_tw = medium.thomson_whiddington_kev2_cm2_g(t0);
        let depth = EmissionDepth::new(medium.z, t0, c_tw, theta);
        // Continuum: photons per keV per incident electron into 4π at energy e,
        // N(e) = (2 k Z / e) ∫_e^{T0} S(e/T) P(e, s(T)) dT, s(T) = (T0² − T²)/C, S the
        // thin-target shape and P the escape probability (`depth.rs`); S = P = 1 for Kramers'
        // ideal target.
        for b in 0..nbins {
            let lo = edges[b];
            let hi = edges[b + 1].min(t0);
            if hi <= lo {
                continue;
            }
            let mut cuts = vec![lo];
            cuts.extend(edges_kev.iter().copied().filter(|e| *e > lo && *e < hi));
            cuts.push(hi);
            let mut sum = 0.0;
            for w in cuts.windows(2) {
                let mut err = None;
                let part = gl_e.integrate(w[0], w[1], |e| {
                    let inner = || -> Result<f64, SpectrumError> {
                        let mu = anode_mu_rho(e);
                        let j = if !absorbing { t0 - e } else { depth.integral(&gl_t, e, mu, |t| shape.shape(e / t)) };
                        Ok(2.0 * KRAMERS_K_PER_KEV * medium.z / e * j * transmission(e)?)
                    };
                    inner().unwrap_or_else(|x| {
                        err = Some(x);
                        0.0
                    })
                });
                if let Some(x) = err {
                    return Err(x);
                }
                sum += part;
            }
            continuum[b] += sum * weight_per_instant;
        }
        // Characteristic lines: vacancies per electron from the Worthington–Tomlin cross
        // section along the Thomson–Whiddington path, ds = 2T dT / C, each line attenuated from
        // the depth at which its vacancy was made (direct excitation) ...
        let n_atoms = medium.atoms_per_g();
        // ... plus photo-excitation by the anode's own continuum (indirect excitation): the
        // continuum is made much closer to the surface than its absorption length above an
        // edge, so it is treated as a surface source; the half emitted inwards is absorbed at
        // depth z with density (μ/2)·E1(μz), and a line photon made there leaves along the
        // central ray with exp(−λz), λ = μ_line/sin θ. ∫ (μ/2) E1(μz) e^{−λz} dz =
        // (μ/2λ) ln(1 + λ/μ). Precomputed on an energy grid: (weight × photons per keV ×
        // photoabsorption shares per shell, μ/ρ).
        let mut indirect_grid: Vec<([f64; 4], f64)> = Vec::new();
        if absorbing {
            if let Some(lowest_edge) = shells.iter().map(|s| s.edge_kev).filter(|e| *e < t0).reduce(f64::min) {
                let mut cuts = vec![lowest_edge];
                cuts.extend(edges_kev.iter().copied().filter(|e| *e > lowest_edge && *e < t0));
                cuts.push(t0);
                for w in cuts.windows(2) {
                    let pieces = ((w[1] - w[0]) / 2.0).ceil().max(1.0) as usize;
                    let step = (w[1] - w[0]) / pieces as f64;
                    for p in 0..pieces {
                        let (a, b) = (w[0] + p as f64 * step, w[0] + (p + 1) as f64 * step);
                        for (x, wt) in gl_e.nodes.iter().zip(&gl_e.weights) {
                            let e = 0.5 * (a + b) + 0.5 * (b - a) * x;
                            let n_e = 2.0 * KRAMERS_K_PER_KEV * medium.z / e * depth.integral(&gl_t, e, 0.0, |t| shape.shape(e / t));
                            let total = element.total_cm2_g(e);
                            let photo_share = element.photo_cm2_g(e) / total;
                            let shares = element.photo_shell_shares(e).map(|x| x * photo_share * n_e * wt * 0.5 * (b - a));
                            indirect_grid.push((shares, total));
                        }
                    }
                }
            }
        }
        let l1 = shells.iter().find(|x| x.name == "L1");
        let l2 = shells.iter().find(|x| x.name == "L2");
        let mut idx = 0;
        for s in &shells {
            for l in &s.lines {
                let mu = anode_mu_rho(l.kev);
                let lambda = mu / theta.sin();
                let vac = |sh: Option<&ShellInfo>| match sh {
                    Some(sh) => {
                        let per_kev = |t: f64| n_atoms * ionisation_cm2(t, sh.edge_kev, sh.electrons) * 2.0 * t / c_tw;
                        if absorbing {
                            let direct = depth.integral(&gl_t, sh.edge_kev.min(t0), mu, per_kev);
                            let indirect: f64 = indirect_grid
                                .iter()
                                .map(|(shares, mu_e)| {
                                    let r = lambda / mu_e;
                                    let escape = if r < 1e-8 { 0.5 } else { 0.5 * r.ln_1p() / r };
                                    shares[sh.index] * escape
                                })
                                .sum();
                            direct + indirect
                        } else {
                            gl_ideal.integrate(sh.edge_kev.min(t0), t0, per_kev)
                        }
                    }
                    None => 0.0,
                };
                // Coster–Kronig: L1 vacancies move to L2 (f12) and L3 (f13); L2 ones to L3 (f23).
                let (f12, f13) = l1.map_or((0.0, 0.0), |x| x.coster_kronig);
                let f23 = l2.map_or(0.0, |x| x.coster_kronig.1);
                let vacancies = match s.name {
                    "L2" => vac(Some(s)) + f12 * vac(l1),
                    "L3" => vac(Some(s)) + f13 * vac(l1) + f23 * (vac(l2) + f12 * vac(l1)),
                    _ => vac(Some(s)),
                };
                line_acc[idx].1 += vacancies * s.fluorescence_yield * l.share * transmission(l.kev)? * weight_per_instant;
                idx += 1;
            }
        }
    }

    for v in continuum.iter_mut() {
        *v *= per_electron_to_fluence;
    }
    let lines: Vec<SpectralLine> = line_acc
        .into_iter()
        .filter(|(kev, n, _)| *n > 0.0 && *kev < tube.kvp)
        .map(|(kev, n, label)| SpectralLine { kev, fluence_per_mm2_per_mas: n * per_electron_to_fluence, label })
        .collect();
    Ok(Spectrum {
        bin_edges_kev: edges,
        continuum_per_mm2_per_mas: continuum,
        lines,
        distance_cm: options.distance_cm,
        kvp: tube.kvp,
        anode: tube.anode,
        model: if absorbing { format!("anode model, {} thin target", shape.name()) } else { "Kramers ideal target".to_string() },
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bin_edges_start_at_one_kev_and_end_at_kvp() {
        let e = bin_edges_kev(80.0, 0.5);
        assert_eq!(e[0], 1.0);
        assert_eq!(*e.last().unwrap(), 80.0);
        assert_eq!(e.len(), 159);
        let e = bin_edges_kev(80.3, 0.5);
        assert_eq!(*e.last().unwrap(), 80.3);
        assert!((e[e.len() - 2] - 80.0).abs() < 1e-12);
    }

    #[test]
    fn ripple_voltages_stay_within_the_stated_band() {
        let v = ripple_voltages_kv(100.0, 10.0);
        assert_eq!(v.len(), RIPPLE_SAMPLES);
        assert!(v.iter().all(|x| *x <= 100.0 && *x >= 90.0));
        assert_eq!(ripple_voltages_kv(100.0, 0.0), vec![100.0]);
    }
}
