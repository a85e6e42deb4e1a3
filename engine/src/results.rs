//! A run's scores as a result file (layout: `output/LAYOUT.md`).
//!
//! Every value is a mean per source history with its 1σ standard error in `<name>_sigma`.
//! Energy deposited is kerma-approximation energy (secondary electrons deposit locally).

use crate::output::{DataBuf, Dataset, Group, Produced, ResultFile};
use std::sync::Arc;
use crate::score::{counts, Scorer, JOULE_PER_KEV};
use crate::setup::SetupInfo;
use crate::transport::RunResult;

/// Identification and bookkeeping of a run for the root attributes.
#[derive(Debug, Clone)]
pub struct RunMeta {
    /// The deck text exactly as read.
    pub deck_text: String,
    /// The resolved deck as TOML.
    pub resolved_deck: String,
    /// Seed used.
    pub seed: u64,
    /// Histories asked for.
    pub histories_requested: u64,
    /// Threads used.
    pub threads: usize,
    /// Start of the run, RFC 3339 UTC.
    pub start_time: String,
    /// "complete" or "partial".
    pub completion: String,
    /// Swept parameters of this combination (key path, value as text).
    pub sweep: Vec<(String, String)>,
}

/// The version control revision the binary was built from, or "unknown".
pub fn git_commit() -> &'static str {
    option_env!("DOSEMILL_GIT_COMMIT").unwrap_or("unknown")
}

/// Now, as RFC 3339 UTC (second resolution).
pub fn now_rfc3339() -> String {
    let secs = std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map(|d| d.as_secs()).unwrap_or(0);
    let days = (secs / 86_400) as i64;
    let rem = secs % 86_400;
    // Civil date from days since 1970-01-01 (H. Hinnant's algorithm).
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = if m <= 2 { y + 1 } else { y };
    format!("{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z", rem / 3600, (rem % 3600) / 60, rem % 60)
}

fn pair(g: &mut Group, name: &str, shape: &[usize], mean: Vec<f64>, sigma: Vec<f64>, units: &str) {
    g.add_dataset(Dataset::f64_nd(name, shape, mean, units));
    g.add_dataset(Dataset::f64_nd(&format!("{name}_sigma"), shape, sigma, units));
}

fn edges(n: usize, start: f64, width: f64) -> Vec<f64> {
    (0..=n).map(|i| start + i as f64 * width).collect()
}

/// Mean density (g/cm³) over [z0, z1] of a slab stack described by `info.layers`.
fn mean_density(info: &SetupInfo, z0: f64, z1: f64) -> f64 {
    let mut mass = 0.0;
    let mut covered = 0.0;
    for (_, _, rho, a, b) in &info.layers {
        let overlap = (b.min(z1) - a.max(z0)).max(0.0);
        mass += overlap * rho;
        covered += overlap;
    }
    mass += ((z1 - z0) - covered).max(0.0) * info.world_density_g_cm3;
    mass / (z1 - z0)
}

/// The result file of a run.
pub fn result_file(info: &SetupInfo, run: &RunResult, meta: &RunMeta) -> ResultFile {
    let mut f = ResultFile::new();
    let prov = dosemill_xsdata::elements().provenance();
    f.set_attr("dosemill_version", env!("CARGO_PKG_VERSION"));
    f.set_attr("git_commit", git_commit());
    f.set_attr("data_source", prov.source.as_str());
    f.set_attr("data_tables_sha256", prov.tables_sha256.as_str());
    f.set_attr("data_generator_sha256", prov.generator_sha256.as_str());
    f.set_attr("seed", meta.seed);
    f.set_attr("histories", run.histories);
    f.set_attr("histories_requested", meta.histories_requested);
    f.set_attr("threads", meta.threads as u64);
    f.set_attr("wall_time_s", run.wall_time_s);
    f.set_attr("start_time", meta.start_time.as_str());
    f.set_attr("completion", meta.completion.as_str());
    f.set_attr("deck_text", meta.deck_text.as_str());
    f.set_attr("resolved_deck", meta.resolved_deck.as_str());
    f.set_attr(
        "model_limits",
        "Secondary electrons are not transported: their energy is deposited where they are set in motion (kerma approximation), valid where regions are much larger than electron ranges (below about 300 kV). Compton Doppler broadening is not modelled. Research use; results need review by a qualified medical physicist.",
    );
    for (k, v) in &meta.sweep {
        f.set_attr(&format!("sweep.{k}"), v.as_str());
    }
    let n = run.histories;

    if let Some((lo, hi, w)) = &info.spectrum {
        let mut g = Group::with_kind("source_spectrum", "source_spectrum");
        g.add_dataset(Dataset::f64_1d("lo_kev", lo.clone(), "keV"));
        g.add_dataset(Dataset::f64_1d("hi_kev", hi.clone(), "keV"));
        g.add_dataset(Dataset::f64_1d("probability", w.clone(), "1"));
        for (name, value, units) in &info.beam_quality {
            g.set_attr(name, *value);
            g.set_attr(&format!("{name}_units"), units.as_str());
        }
        if let Some((spec, bias)) = &info.energy_bias {
            g.set_attr("energy_bias_toward", spec.toward.as_str());
            g.set_attr("energy_bias_floor", spec.floor);
            g.add_dataset(Dataset::f64_1d("drawn_probability", bias.probabilities(), "1"));
            g.add_dataset(Dataset::f64_1d("start_weight", bias.weights().to_vec(), "1"));
        }
        f.add_group(g);
    }
    if let Some((spec, bias)) = &info.field_bias {
        let mut g = Group::with_kind("source_field_bias", "field_bias");
        let [nu, nv] = bias.cells();
        g.set_attr("toward", spec.toward.as_str());
        g.set_attr("length_cm", spec.length_cm);
        g.set_attr("floor", spec.floor);
        g.set_attr("acceptance", bias.acceptance());
        g.set_attr("layout", "[v, u] cells of equal size over the field rectangle, u along its width");
        g.add_dataset(Dataset::f64_nd("keep_probability", &[nv, nu], bias.keep_probabilities().to_vec(), "1"));
        g.add_dataset(Dataset::f64_nd("start_weight", &[nv, nu], bias.weights().to_vec(), "1"));
        f.add_group(g);
    }
    if !info.layers.is_empty() {
        let mut g = Group::with_kind("geometry", "layers");
        g.set_attr("names", info.layers.iter().map(|l| l.0.clone()).collect::<Vec<_>>().join(","));
        g.set_attr("materials", info.layers.iter().map(|l| l.1.clone()).collect::<Vec<_>>().join(","));
        g.add_dataset(Dataset::f64_1d("density", info.layers.iter().map(|l| l.2).collect(), "g/cm3"));
        let mut z: Vec<f64> = info.layers.iter().map(|l| l.3).collect();
        z.push(info.layers.last().unwrap().4);
        g.add_dataset(Dataset::f64_1d("z_planes", z, "cm"));
        f.add_group(g);
    }

    for (s, si) in run.scorers.iter().zip(&info.scores) {
        // A voxel dose grid is read bin by bin from its tally as the file is written.
        let (mean, sigma) = if matches!(s, Scorer::VoxelDose(_)) { (Vec::new(), Vec::new()) } else { s.tally().mean_and_sigma(n) };
        let group = match (s, &si.kind) {
            (Scorer::RegionEnergy { .. }, _) => {
                let mut g = Group::with_kind(&si.name, "layer_energy");
                g.set_attr("labels", info.layers.iter().map(|l| l.0.clone()).chain(["world".to_string()]).collect::<Vec<_>>().join(","));
                pair(&mut g, "energy", &[mean.len()], mean, sigma, "keV");
                g
            }
            (Scorer::DepthEnergy { z0_cm, dz_cm, .. }, _) => {
                let mut g = Group::with_kind(&si.name, "depth_dose");
                let nb = mean.len();
                let z = edges(nb, *z0_cm, *dz_cm);
                let conv: Vec<f64> = (0..nb)
                    .map(|i| {
                        let rho = mean_density(info, z[i], z[i + 1]);
                        if rho > 0.0 { JOULE_PER_KEV * 1e3 / (rho * dz_cm) } else { 0.0 }
                    })
                    .collect();
                let dose: Vec<f64> = mean.iter().zip(&conv).map(|(m, c)| m * c).collect();
                let dose_s: Vec<f64> = sigma.iter().zip(&conv).map(|(m, c)| m * c).collect();
                pair(&mut g, "energy", &[nb], mean, sigma, "keV");
                pair(&mut g, "dose_per_fluence", &[nb], dose.clone(), dose_s.clone(), "Gy cm2");
                g.add_dataset(Dataset::f64_1d("depth_edges", z.clone(), "cm").with_attr("label", "depth"));
                for name in ["energy", "energy_sigma", "dose_per_fluence", "dose_per_fluence_sigma"] {
                    g.attach_axis(name, 0, "depth_edges", &z, "cm").expect("consistent axis layout");
                }
                g.set_attr(
                    "normalisation",
                    "energy: keV deposited per source history in each depth bin over the whole lateral extent; dose_per_fluence: that energy per unit mass per unit depth, i.e. the dose on the axis of a broad beam of unit fluence (Gy cm2), kerma approximation",
                );
                if let Some(a) = info.field_area_cm2 {
                    let per: Vec<f64> = dose.iter().map(|d| d / a).collect();
                    let per_s: Vec<f64> = dose_s.iter().map(|d| d / a).collect();
                    pair(&mut g, "dose", &[nb], per, per_s, "Gy");
                    g.attach_axis("dose", 0, "depth_edges", &z, "cm").expect("consistent axis layout");
                    g.attach_axis("dose_sigma", 0, "depth_edges", &z, "cm").expect("consistent axis layout");
                    g.set_attr("field_area_cm2", a);
                }
                g
            }
            (Scorer::Escape { .. }, _) => {
                let mut g = Group::with_kind(&si.name, "escape");
                g.set_attr("labels", "forward,backward");
                pair(&mut g, "energy", &[2], mean[..2].to_vec(), sigma[..2].to_vec(), "keV");
                pair(&mut g, "photons", &[2], mean[2..].to_vec(), sigma[2..].to_vec(), "1");
                g
            }
            (Scorer::Interactions { .. }, _) => {
                let mut g = Group::with_kind(&si.name, "interaction_counts");
                g.set_attr("labels", counts::LABELS.join(","));
                pair(&mut g, "counts", &[mean.len()], mean, sigma, "1");
                g
            }
            (Scorer::AirKerma { axis, center_cm, radius_cm, .. }, _) => {
                let mut g = Group::with_kind(&si.name, "air_kerma");
                g.set_attr("labels", "total,towards_plus_axis,towards_minus_axis");
                g.set_attr("normal_axis", ["x", "y", "z"][*axis]);
                g.add_dataset(Dataset::f64_1d("center", vec![center_cm.x, center_cm.y, center_cm.z], "cm"));
                g.set_attr("radius_cm", *radius_cm);
                let gy = JOULE_PER_KEV * 1e3; // keV/g → Gy
                pair(&mut g, "kerma", &[3], mean[..3].iter().map(|v| v * gy).collect(), sigma[..3].iter().map(|v| v * gy).collect(), "Gy");
                pair(&mut g, "fluence", &[3], mean[3..].to_vec(), sigma[3..].to_vec(), "1/cm2");
                g.set_attr("normalisation", "air kerma (Gy) and planar photon fluence (1/cm2) per source history from photons crossing the disc, by direction; mu_en/rho of dry air from the project's tables");
                g
            }
            (Scorer::VoxelDose(v), _) => voxel_dose_group(&si.name, v, n),
            (Scorer::PlaneKerma(_), _) => {
                let mut g = Group::with_kind(&si.name, "plane_kerma");
                pair(&mut g, "kerma", &[mean.len()], mean, sigma, "keV/g");
                g
            }
            (Scorer::Detector(d), _) => crate::score::detector::result_group(&si.name, d, n),
            (Scorer::TransmittedSpectrum { e0_kev, de_kev, bins, .. }, _) => {
                let mut g = Group::with_kind(&si.name, "spectrum");
                let b = *bins;
                for (k, name) in ["uncollided", "scattered", "fluorescence", "total"].iter().enumerate() {
                    pair(&mut g, name, &[b], mean[k * b..(k + 1) * b].to_vec(), sigma[k * b..(k + 1) * b].to_vec(), "1");
                }
                let e = edges(b, *e0_kev, *de_kev);
                g.add_dataset(Dataset::f64_1d("energy_edges", e.clone(), "keV").with_attr("label", "energy"));
                for name in ["uncollided", "scattered", "fluorescence", "total"] {
                    g.attach_axis(name, 0, "energy_edges", &e, "keV").expect("consistent axis layout");
                    g.attach_axis(&format!("{name}_sigma"), 0, "energy_edges", &e, "keV").expect("consistent axis layout");
                }
                g.set_attr("normalisation", "photons leaving the downstream side (+z) per source history in each energy bin");
                g
            }
        };
        f.add_group(group);
    }
    f
}

/// The group of a voxel-dose score: the dose grid (kind `dose_grid`, [z, y, x] order, x fastest
/// as the voxel index), its uncertainty, the central-axis depth dose, and per-region sums.
///
/// The per-voxel arrays are [`Produced`]: computed block by block from the tally and the phantom
/// while the file is written, so a large grid is never copied (see `output/h5.rs`).
fn voxel_dose_group(name: &str, v: &crate::score::voxel_dose::VoxelDose, histories: u64) -> Group {
    let grid = &v.grid;
    let l = grid.layout();
    let pd = grid.dims();
    let n = v.voxels();
    let stats = v.tally.bin_stats_source(histories);
    // Masses of the scoring voxels and of the regions (g).
    let voxel_volume = l.voxel_size_cm.x * l.voxel_size_cm.y * l.voxel_size_cm.z;
    let regions = v.labels.as_ref().map(|x| x.1.len()).unwrap_or(0);
    let mut region_mass = vec![0.0; regions];
    if let Some(lab) = &v.labels {
        for i in 0..grid.num_voxels() {
            region_mass[lab.0[i] as usize] += grid.voxel_medium(i).1 * voxel_volume;
        }
    }
    // Mass of scoring voxel `b`: its block of phantom voxels, summed in phantom-index order.
    let mass_of = {
        let (grid, block, dims) = (Arc::clone(grid), v.block, v.dims);
        move |b: usize| -> f64 {
            let (bx, by, bz) = (b % dims[0], (b / dims[0]) % dims[1], b / (dims[0] * dims[1]));
            let mut m = 0.0;
            for iz in bz * block[2]..((bz + 1) * block[2]).min(pd[2]) {
                for iy in by * block[1]..((by + 1) * block[1]).min(pd[1]) {
                    for ix in bx * block[0]..((bx + 1) * block[0]).min(pd[0]) {
                        m += grid.voxel_medium(ix + pd[0] * (iy + pd[1] * iz)).1 * voxel_volume;
                    }
                }
            }
            m
        }
    };
    let to_gy = |e: f64, m: f64| if m > 0.0 { e * JOULE_PER_KEV / (m * 1e-3) } else { 0.0 };
    let shape = [v.dims[2], v.dims[1], v.dims[0]];
    // Element i of a per-voxel array, as a dataset produced while the file is written.
    fn produced(n: usize, f: impl Fn(usize) -> f64 + Send + Sync + 'static) -> DataBuf {
        DataBuf::Produced(Produced::new(n, move |start, out| {
            for (k, o) in out.iter_mut().enumerate() {
                *o = f(start + k);
            }
        }))
    }
    let mass_of = Arc::new(mass_of);
    let dose_of = { let (s, m) = (stats.clone(), Arc::clone(&mass_of)); move |i: usize| to_gy(s.get(i).0, m(i)) };
    let dose_sigma_of = { let (s, m) = (stats.clone(), Arc::clone(&mass_of)); move |i: usize| to_gy(s.get(i).1, m(i)) };
    let mut g = Group::with_kind(name, "dose_grid");
    g.set_attr("estimator", match v.estimator {
        crate::score::voxel_dose::DoseEstimator::Analog => "analog",
        crate::score::voxel_dose::DoseEstimator::TrackLength => "track_length",
    });
    g.set_attr("normalisation", "dose (Gy) per source history in each scoring voxel, kerma approximation; array order [z, y, x]");
    g.add_dataset(Dataset::new("dose", &shape, produced(n, dose_of.clone()), "Gy"));
    g.add_dataset(Dataset::new("dose_sigma", &shape, produced(n, dose_sigma_of.clone()), "Gy"));
    g.add_dataset(Dataset::new("energy", &shape, produced(n, { let s = stats.clone(); move |i| s.get(i).0 }), "keV"));
    g.add_dataset(Dataset::new("energy_sigma", &shape, produced(n, { let s = stats.clone(); move |i| s.get(i).1 }), "keV"));
    g.add_dataset(Dataset::new("mass", &shape, produced(n, { let m = Arc::clone(&mass_of); move |i| m(i) }), "g"));
    let edges_along = |a: usize| -> Vec<f64> {
        let w = l.voxel_size_cm.axis(a) * v.block[a] as f64;
        (0..=v.dims[a]).map(|k| (l.origin_cm.axis(a) + k as f64 * w).min(l.origin_cm.axis(a) + pd[a] as f64 * l.voxel_size_cm.axis(a))).collect()
    };
    let (ez, ey, ex) = (edges_along(2), edges_along(1), edges_along(0));
    for ds in ["dose", "dose_sigma", "energy", "energy_sigma", "mass"] {
        g.attach_axis(ds, 0, "z_edges", &ez, "cm").expect("consistent axis layout");
        g.attach_axis(ds, 1, "y_edges", &ey, "cm").expect("consistent axis layout");
        g.attach_axis(ds, 2, "x_edges", &ex, "cm").expect("consistent axis layout");
    }
    // Central-axis depth dose: the column of scoring voxels through the grid's centre along z.
    let (cx, cy) = (v.dims[0] / 2, v.dims[1] / 2);
    let col: Vec<usize> = (0..v.dims[2]).map(|k| cx + v.dims[0] * (cy + v.dims[1] * k)).collect();
    let mut axis = Group::with_kind("central_axis", "depth_dose");
    axis.set_attr("normalisation", "dose (Gy) per source history in the column of scoring voxels through the grid centre along z");
    pair(&mut axis, "dose", &[col.len()], col.iter().map(|&i| dose_of(i)).collect(), col.iter().map(|&i| dose_sigma_of(i)).collect(), "Gy");
    axis.add_dataset(Dataset::f64_1d("depth_edges", ez.clone(), "cm").with_attr("label", "z"));
    axis.attach_axis("dose", 0, "depth_edges", &ez, "cm").expect("consistent axis layout");
    axis.attach_axis("dose_sigma", 0, "depth_edges", &ez, "cm").expect("consistent axis layout");
    g.add_group(axis);
    if let Some(lab) = &v.labels {
        let mut r = Group::with_kind("regions", "region_dose");
        r.set_attr("labels", lab.1.join(","));
        let rd: Vec<f64> = (0..regions).map(|k| to_gy(stats.get(n + k).0, region_mass[k])).collect();
        let rs: Vec<f64> = (0..regions).map(|k| to_gy(stats.get(n + k).1, region_mass[k])).collect();
        pair(&mut r, "mean_dose", &[regions], rd, rs, "Gy");
        r.add_dataset(Dataset::f64_1d("mass", region_mass, "g"));
        g.add_group(r);
    }
    g
}
