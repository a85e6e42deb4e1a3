//! The spectrum as a result-file tree (group kind `spectrum`, see `crate::output`).

use crate::output::{Dataset, Group, ResultFile, TreeError};

use super::quality::BeamQuality;
use super::tube::Tube;
use super::Spectrum;

/// Builds a result file holding `spectrum` (group `tube_spectrum`) with the tube setting and
/// beam quality as attributes.
///
/// Datasets: `fluence` (lines in their bins) and `continuum`, both photons per mm² per mAs at
/// the group's `distance_cm`, on `energy_edges` (keV); sub-group `lines` with `energy` (keV) and
/// `fluence` of the characteristic lines (also counted in `fluence`).
pub fn to_result_file(tube: &Tube, spectrum: &Spectrum, quality: &BeamQuality) -> Result<ResultFile, TreeError> {
    let mut f = ResultFile::new();
    f.set_attr("dosemill_version", env!("CARGO_PKG_VERSION"));
    f.set_attr("data_source", dosemill_xsdata::elements().provenance().source.as_str());
    f.set_attr("data_tables_sha256", dosemill_xsdata::elements().provenance().tables_sha256.as_str());
    let mut g = Group::with_kind("tube_spectrum", crate::output::kind::SPECTRUM);
    g.set_attr("kvp", tube.kvp);
    g.set_attr("anode", tube.anode.symbol());
    g.set_attr("anode_angle_deg", tube.anode_angle_deg);
    g.set_attr("ripple_percent", tube.ripple_percent);
    let inh = tube.inherent_filtration();
    g.set_attr("inherent_be_window_mm", inh.be_window_mm);
    g.set_attr("inherent_al_equivalent_mm", inh.al_equivalent_mm);
    g.set_attr(
        "filters",
        tube.filters.iter().map(|x| format!("{}:{}", x.material, x.thickness_mm)).collect::<Vec<_>>().join(","),
    );
    g.set_attr("distance_cm", spectrum.distance_cm);
    g.set_attr("model", spectrum.model.as_str());
    g.set_attr("normalisation", "photons per mm2 per mAs at distance_cm; Kramers constant 1.1e-9 per volt, about ±30-40 % absolute");
    g.set_attr("hvl1_mm_al", quality.hvl1_mm_al);
    g.set_attr("hvl2_mm_al", quality.hvl2_mm_al);
    g.set_attr("homogeneity", quality.homogeneity);
    g.set_attr("hvl1_mm_cu", quality.hvl1_mm_cu);
    g.set_attr("mean_kev_fluence", quality.mean_kev_fluence);
    g.set_attr("mean_kev_air_kerma", quality.mean_kev_air_kerma);
    g.set_attr("air_kerma_ugy_per_mas_1m", quality.air_kerma_ugy_per_mas_1m);
    g.add_dataset(
        Dataset::f64_1d("fluence", spectrum.binned_fluence_per_mm2_per_mas(), "1/mm2")
            .with_attr("normalisation", "per mAs at distance_cm"),
    );
    g.add_dataset(
        Dataset::f64_1d("continuum", spectrum.continuum_per_mm2_per_mas.clone(), "1/mm2")
            .with_attr("normalisation", "per mAs at distance_cm"),
    );
    g.attach_axis("fluence", 0, "energy_edges", &spectrum.bin_edges_kev, "keV")?;
    g.attach_axis("continuum", 0, "energy_edges", &spectrum.bin_edges_kev, "keV")?;
    let mut lines = Group::new("lines");
    lines.add_dataset(Dataset::f64_1d("energy", spectrum.lines.iter().map(|l| l.kev).collect(), "keV"));
    lines.add_dataset(
        Dataset::f64_1d("fluence", spectrum.lines.iter().map(|l| l.fluence_per_mm2_per_mas).collect(), "1/mm2")
            .with_attr("normalisation", "per mAs at distance_cm"),
    );
    g.add_group(lines);
    f.add_group(g);
    Ok(f)
}
