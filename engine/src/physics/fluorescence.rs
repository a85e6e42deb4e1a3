//! Vacancy cascade after photoabsorption: a simple model following one chain.
//!
//! A K vacancy decays radiatively with probability ω_K, emitting a K line chosen by its share;
//! the electron that fills it comes from the line's source shell, whose vacancy (L1, L2 or L3) is
//! then followed in turn. An L1 or L2 vacancy first moves by Coster–Kronig transitions (f12, f13,
//! f23), then decays radiatively with probability ω_L. Non-radiative (Auger) decays and outer-shell
//! vacancies end the chain; their energy is deposited locally. Lines are emitted isotropically.
//! At most two photons are emitted per absorption (K line, then L line).

use dosemill_xsdata::{Element, Shell};

/// Fluorescence photons emitted by one cascade: at most [`MAX_LINES`].
pub const MAX_LINES: usize = 2;

/// The photons a cascade emitted (energies in keV).
#[derive(Debug, Clone, Copy, Default)]
pub struct Emitted {
    /// Number of photons emitted.
    pub count: usize,
    /// Their energies (keV); only the first `count` are meaningful.
    pub kev: [f64; MAX_LINES],
}

impl Emitted {
    /// Total energy carried away by the emitted photons (keV).
    pub fn total_kev(&self) -> f64 {
        self.kev[..self.count].iter().sum()
    }
}

#[inline]
fn shell_index(shell: Shell) -> Option<usize> {
    match shell {
        Shell::K => Some(0),
        Shell::L1 => Some(1),
        Shell::L2 => Some(2),
        Shell::L3 => Some(3),
        Shell::Outer => None,
    }
}

/// Runs the cascade from a vacancy in `shell` of `element`.
#[inline]
pub fn cascade(element: &Element, shell: Shell, rng: &mut crate::rng::Stream) -> Emitted {
    let shells = element.shells();
    let mut out = Emitted::default();
    let mut vacancy = shell;
    while out.count < MAX_LINES {
        // Coster–Kronig transfers within the L shell: L1 → L2 (f12) or L3 (f13), then L2 → L3 (f23).
        if vacancy == Shell::L1 {
            let (f12, f13) = shells[1].coster_kronig;
            let u = rng.uniform();
            if u < f12 {
                vacancy = Shell::L2;
            } else if u < f12 + f13 {
                vacancy = Shell::L3;
            }
        }
        if vacancy == Shell::L2 {
            let (_, f23) = shells[2].coster_kronig;
            if rng.uniform() < f23 {
                vacancy = Shell::L3;
            }
        }
        let Some(i) = shell_index(vacancy) else { break };
        let data = &shells[i];
        if data.lines.is_empty() || rng.uniform() >= data.fluorescence_yield {
            break; // Auger / non-radiative: deposited locally.
        }
        let u = rng.uniform();
        let mut acc = 0.0;
        let mut chosen = data.lines.len() - 1;
        for (j, line) in data.lines.iter().enumerate() {
            acc += line.share;
            if u < acc {
                chosen = j;
                break;
            }
        }
        let line = &data.lines[chosen];
        out.kev[out.count] = line.kev;
        out.count += 1;
        vacancy = line.from;
    }
    out
}
