//! The text summary of a result file.

use std::fmt::Write as _;

use crate::output::{AttrValue, DataBuf, Dataset, Group, ResultFile, RUN_ATTRIBUTES, SIGMA_SUFFIX};

/// Root attributes every run writes, except the deck texts.
const RUN_ATTRS: &[&str] = RUN_ATTRIBUTES.split_at(10).0;

/// Root attributes holding deck texts (summarised by size, not printed).
const TEXT_ATTRS: &[&str] = RUN_ATTRIBUTES.split_at(10).1;

/// Total, peak and uncertainty figures of one numeric dataset.
#[derive(Debug, Clone, PartialEq)]
pub struct DatasetStats {
    /// Sum of all elements.
    pub total: f64,
    /// Largest element (NaN ignored); `None` for an empty dataset.
    pub peak: Option<f64>,
    /// Multi-index of the (first) peak element.
    pub peak_index: Vec<usize>,
    /// Relative 1σ uncertainty at the peak, from `X_sigma`, when present and the peak ≠ 0.
    pub rel_sigma_at_peak: Option<f64>,
    /// Mean relative 1σ over elements ≥ 50 % of a positive peak, and how many there are.
    pub mean_rel_sigma_high: Option<(f64, usize)>,
}

impl DatasetStats {
    /// Figures of `values` (row-major, `shape`) with optional 1σ absolute uncertainties.
    pub fn compute(values: &[f64], shape: &[usize], sigma: Option<&[f64]>) -> Self {
        fn from(v: &[f64]) -> impl Fn(usize, &mut [f64]) -> bool + '_ {
            move |start, out| {
                out.copy_from_slice(&v[start..start + out.len()]);
                true
            }
        }
        let sigma = sigma.filter(|s| s.len() == values.len());
        Self::from_blocks(values.len(), shape, from(values), sigma.map(from)).expect("slices always fill")
    }

    /// [`DatasetStats::compute`] over data read block by block (a lazily read dataset), with
    /// the same results bit for bit; `None` for data that is not numeric.
    pub fn compute_data(values: &DataBuf, shape: &[usize], sigma: Option<&DataBuf>) -> Option<Self> {
        fn from(d: &DataBuf) -> impl Fn(usize, &mut [f64]) -> bool + '_ {
            move |start, out| match d {
                DataBuf::Produced(p) => {
                    p.fill(start, out);
                    true
                }
                DataBuf::F64(v) => {
                    out.copy_from_slice(&v[start..start + out.len()]);
                    true
                }
                _ => false,
            }
        }
        let sigma = sigma.filter(|s| s.len() == values.len());
        Self::from_blocks(values.len(), shape, from(values), sigma.map(from))
    }

    /// The figures of `n` values read by `values(start, block)` (and their σ by `sigma`) in two
    /// passes of [`crate::output::Produced::BLOCK`] elements; sums run in element order.
    fn from_blocks(n: usize, shape: &[usize], values: impl Fn(usize, &mut [f64]) -> bool, sigma: Option<impl Fn(usize, &mut [f64]) -> bool>) -> Option<Self> {
        let block = crate::output::Produced::BLOCK;
        let (mut vb, mut sb) = (vec![0.0; block.min(n)], vec![0.0; block.min(n)]);
        // -0.0 as `Iterator::sum` starts.
        let mut total = -0.0;
        let mut best: Option<(usize, f64)> = None;
        let mut start = 0;
        while start < n {
            let k = block.min(n - start);
            if !values(start, &mut vb[..k]) {
                return None;
            }
            for (j, &v) in vb[..k].iter().enumerate() {
                total += v;
                if !v.is_nan() && best.is_none_or(|(_, b)| v > b) {
                    best = Some((start + j, v));
                }
            }
            start += k;
        }
        let peak = best.map(|(_, v)| v);
        let peak_index = best.map(|(i, _)| unravel(i, shape)).unwrap_or_default();
        let rel_sigma_at_peak = match (best, &sigma) {
            (Some((i, v)), Some(s)) if v != 0.0 => {
                let mut one = [0.0];
                s(i, &mut one).then(|| one[0] / v.abs())
            }
            _ => None,
        };
        let mean_rel_sigma_high = match (peak, &sigma) {
            (Some(p), Some(s)) if p > 0.0 => {
                let (mut sum, mut count) = (0.0, 0usize);
                let mut start = 0;
                while start < n {
                    let k = block.min(n - start);
                    if !(values(start, &mut vb[..k]) && s(start, &mut sb[..k])) {
                        return None;
                    }
                    for (&v, &e) in vb[..k].iter().zip(&sb[..k]) {
                        if v >= 0.5 * p {
                            sum += e / v;
                            count += 1;
                        }
                    }
                    start += k;
                }
                Some((sum / count as f64, count))
            }
            _ => None,
        };
        Some(DatasetStats { total, peak, peak_index, rel_sigma_at_peak, mean_rel_sigma_high })
    }
}

/// Row-major flat index → multi-index.
fn unravel(mut flat: usize, shape: &[usize]) -> Vec<usize> {
    let mut idx = vec![0; shape.len()];
    for (d, &n) in shape.iter().enumerate().rev() {
        if n > 0 {
            idx[d] = flat % n;
            flat /= n;
        }
    }
    idx
}

/// The text summary of `file`; `source` names it in the heading (usually its path).
pub fn summarize(file: &ResultFile, source: &str) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "result file: {source}");
    let mut missing = Vec::new();
    for &key in RUN_ATTRS {
        match file.attr(key) {
            Some(v) => {
                let note = match (key, v.as_str()) {
                    ("completion", Some("partial")) => {
                        "  (run stopped early: scores hold the histories completed)"
                    }
                    _ => "",
                };
                let _ = writeln!(out, "  {key}: {}{note}", attr_text(v));
            }
            None => missing.push(key),
        }
    }
    for &key in TEXT_ATTRS {
        match file.attr(key) {
            Some(v) => {
                let _ = writeln!(out, "  {key}: {}", attr_text(v));
            }
            None => missing.push(key),
        }
    }
    for (key, v) in &file.attrs {
        if !RUN_ATTRS.contains(&key.as_str()) && !TEXT_ATTRS.contains(&key.as_str()) {
            let _ = writeln!(out, "  {key}: {}", attr_text(v));
        }
    }
    if !missing.is_empty() {
        let _ = writeln!(out, "  missing root attributes: {}", missing.join(", "));
    }
    for g in &file.groups {
        group_summary(&mut out, g, "");
    }
    out
}

/// An attribute value on one line: long or multi-line strings by size only.
fn attr_text(v: &AttrValue) -> String {
    match v {
        AttrValue::Str(s) if s.len() > 100 || s.contains('\n') => {
            format!("text, {} bytes, {} lines", s.len(), s.lines().count())
        }
        AttrValue::F64s(x) if x.len() > 8 => {
            format!("{} values, {} … {}", x.len(), x[0], x[x.len() - 1])
        }
        AttrValue::I64s(x) if x.len() > 8 => {
            format!("{} values, {} … {}", x.len(), x[0], x[x.len() - 1])
        }
        other => other.to_string(),
    }
}

/// A number with 4 significant digits in scientific notation.
pub(crate) fn num(x: f64) -> String {
    format!("{x:.4e}")
}

fn group_summary(out: &mut String, g: &Group, parent: &str) {
    let path = format!("{parent}/{}", g.name);
    match g.kind() {
        Some(k) => {
            let _ = writeln!(out, "group {path} (kind: {k})");
        }
        None => {
            let _ = writeln!(out, "group {path}");
        }
    }
    for (key, v) in &g.attrs {
        if key != "kind" {
            let _ = writeln!(out, "  {key}: {}", attr_text(v));
        }
    }
    let axis_names: Vec<&str> = g
        .datasets
        .iter()
        .flat_map(|d| d.attrs.iter())
        .filter(|(k, _)| is_axis_attr(k))
        .filter_map(|(_, v)| v.as_str())
        .collect();
    // Results first, then their uncertainties, then axis edges; by name within each.
    let mut order: Vec<(u8, &Dataset)> = g
        .datasets
        .iter()
        .map(|d| {
            let rank = if axis_names.contains(&d.name.as_str()) {
                2
            } else if sigma_base(g, d).is_some() {
                1
            } else {
                0
            };
            (rank, d)
        })
        .collect();
    order.sort_by(|a, b| a.0.cmp(&b.0).then_with(|| a.1.name.cmp(&b.1.name)));
    for (rank, d) in order {
        dataset_summary(out, g, d, rank == 2);
    }
    for sub in &g.groups {
        group_summary(out, sub, &path);
    }
}

pub(crate) fn is_axis_attr(key: &str) -> bool {
    key.strip_prefix("axis")
        .is_some_and(|n| !n.is_empty() && n.bytes().all(|b| b.is_ascii_digit()))
}

/// The base dataset `X` when `d` is `X_sigma` and `X` exists beside it.
pub(crate) fn sigma_base<'a>(g: &'a Group, d: &Dataset) -> Option<&'a Dataset> {
    d.name
        .strip_suffix("_sigma")
        .and_then(|base| g.dataset(base))
}

/// The `X_sigma` values of `d` when present with the same shape.
pub(crate) fn sigma_of(g: &Group, d: &Dataset) -> Option<Vec<f64>> {
    let s = g.dataset(&format!("{}{SIGMA_SUFFIX}", d.name))?;
    if s.shape != d.shape {
        return None;
    }
    s.data.to_f64()
}

/// Plot label of an edges dataset: its `label` attribute, else its name.
pub(crate) fn axis_label(edges: &Dataset) -> String {
    let label = edges
        .attr("label")
        .and_then(AttrValue::as_str)
        .unwrap_or(&edges.name);
    format!("{label} ({})", edges.units)
}

fn dataset_summary(out: &mut String, g: &Group, d: &Dataset, is_axis: bool) {
    let shape = format!("{:?}", d.shape);
    if let DataBuf::Str(v) = &d.data {
        if d.shape.is_empty() {
            let s = &v[0];
            let _ = writeln!(
                out,
                "  {}: text, {} bytes, {} lines",
                d.name,
                s.len(),
                s.lines().count()
            );
        } else {
            let _ = writeln!(out, "  {}: {} strings, shape {shape}", d.name, v.len());
        }
        return;
    }
    if let (DataBuf::Produced(_), false) = (&d.data, is_axis) {
        // A lazily read large dataset: figures block by block, never the whole array.
        if sigma_base(g, d).is_none() {
            let _ = writeln!(out, "  {}: shape {shape}, units {}, {}", d.name, d.units, d.data.type_name());
            let sigma = g.dataset(&format!("{}{SIGMA_SUFFIX}", d.name)).filter(|s| s.shape == d.shape).map(|s| &s.data);
            if let Some(st) = DatasetStats::compute_data(&d.data, &d.shape, sigma) {
                write_stats(out, g, d, &st, sigma.is_some());
            }
        } else if let Some(base) = sigma_base(g, d) {
            let _ = writeln!(out, "  {}: 1σ uncertainty of {}, shape {shape}, units {}", d.name, base.name, d.units);
        }
        return;
    }
    let values = d.data.to_f64().unwrap_or_default();
    if is_axis {
        let (lo, hi) = (
            values.first().copied().unwrap_or(0.0),
            values.last().copied().unwrap_or(0.0),
        );
        let _ = writeln!(
            out,
            "  {}: axis edges, {} values, {} … {} {}",
            d.name,
            values.len(),
            lo,
            hi,
            d.units
        );
        return;
    }
    if let Some(base) = sigma_base(g, d) {
        let _ = writeln!(
            out,
            "  {}: 1σ uncertainty of {}, shape {shape}, units {}",
            d.name, base.name, d.units
        );
        return;
    }
    let _ = writeln!(
        out,
        "  {}: shape {shape}, units {}, {}",
        d.name,
        d.units,
        d.data.type_name()
    );
    let sigma = sigma_of(g, d);
    let st = DatasetStats::compute(&values, &d.shape, sigma.as_deref());
    write_stats(out, g, d, &st, sigma.is_some());
}

/// The total, peak and uncertainty lines of a dataset's summary.
fn write_stats(out: &mut String, g: &Group, d: &Dataset, st: &DatasetStats, has_sigma: bool) {
    let Some(peak) = st.peak else {
        let _ = writeln!(out, "      empty");
        return;
    };
    let mut coords = Vec::new();
    for (axis, &i) in st.peak_index.iter().enumerate() {
        if let Some(edges) = g.axis_of(d, axis) {
            if let Some(e) = edges.data.to_f64() {
                if i + 1 < e.len() {
                    let label = edges
                        .attr("label")
                        .and_then(AttrValue::as_str)
                        .unwrap_or(&edges.name);
                    coords.push(format!(
                        "{label} = {} {}",
                        0.5 * (e[i] + e[i + 1]),
                        edges.units
                    ));
                }
            }
        }
    }
    let at = if coords.is_empty() {
        String::new()
    } else {
        format!(" ({})", coords.join(", "))
    };
    let _ = writeln!(
        out,
        "      total {} {u}; peak {} {u} at {:?}{at}",
        num(st.total),
        num(peak),
        st.peak_index,
        u = d.units
    );
    if has_sigma {
        let at_peak = st
            .rel_sigma_at_peak
            .map_or("n/a".to_string(), |r| format!("{:.2} %", 100.0 * r));
        let mut line = format!("      relative uncertainty (1σ): {at_peak} at peak");
        if let Some((m, n)) = st.mean_rel_sigma_high {
            let _ = write!(
                line,
                "; mean {:.2} % over {n} bins ≥ 50 % of peak",
                100.0 * m
            );
        }
        let _ = writeln!(out, "{line}");
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // The block-by-block figures of a lazily read dataset equal the in-memory ones bit for
    // bit (sums in the same order), over several blocks, with NaNs, zeros and a σ array.
    #[test]
    fn block_stats_equal_in_memory_stats() {
        let n = 3 * crate::output::Produced::BLOCK + 123;
        let values: Vec<f64> = (0..n).map(|i| if i % 977 == 0 { f64::NAN } else { ((i * 7919) % 10007) as f64 * 1e-3 - 0.5 }).collect();
        let sigma: Vec<f64> = (0..n).map(|i| ((i * 31) % 101) as f64 * 1e-4).collect();
        let shape = [3, n / 3 + 1];
        let shape = if shape[0] * shape[1] == n { shape.to_vec() } else { vec![n] };
        let want = DatasetStats::compute(&values, &shape, Some(&sigma));
        let (v, s) = (values.clone(), sigma.clone());
        let pv = DataBuf::Produced(crate::output::Produced::new(n, move |st, out: &mut [f64]| out.copy_from_slice(&v[st..st + out.len()])));
        let ps = DataBuf::Produced(crate::output::Produced::new(n, move |st, out: &mut [f64]| out.copy_from_slice(&s[st..st + out.len()])));
        let got = DatasetStats::compute_data(&pv, &shape, Some(&ps)).expect("f64 data");
        assert_eq!(got.total.to_bits(), want.total.to_bits());
        assert_eq!(got.peak.map(f64::to_bits), want.peak.map(f64::to_bits));
        assert_eq!(got.peak_index, want.peak_index);
        assert_eq!(got.rel_sigma_at_peak.map(f64::to_bits), want.rel_sigma_at_peak.map(f64::to_bits));
        assert_eq!(got.mean_rel_sigma_high.map(|(m, k)| (m.to_bits(), k)), want.mean_rel_sigma_high.map(|(m, k)| (m.to_bits(), k)));
        assert!(want.mean_rel_sigma_high.is_some() && want.rel_sigma_at_peak.is_some());
    }

    #[test]
    fn unravel_is_row_major() {
        assert_eq!(unravel(0, &[2, 3, 4]), vec![0, 0, 0]);
        assert_eq!(unravel(23, &[2, 3, 4]), vec![1, 2, 3]);
        assert_eq!(unravel(5, &[2, 3, 4]), vec![0, 1, 1]);
        assert_eq!(unravel(0, &[]), Vec::<usize>::new());
    }

    #[test]
    fn stats_of_a_small_profile() {
        let v = [1.0, 4.0, 3.0, f64::NAN, 2.0];
        let s = [0.1, 0.2, 0.3, 0.0, 0.4];
        let st = DatasetStats::compute(&v, &[5], Some(&s));
        assert!(
            st.total.is_nan(),
            "a NaN element makes the total NaN, visibly"
        );
        assert_eq!(st.peak, Some(4.0));
        assert_eq!(st.peak_index, vec![1]);
        assert_eq!(st.rel_sigma_at_peak, Some(0.05));
        // Elements ≥ 2.0: 4.0 (5 %), 3.0 (10 %), 2.0 (20 %) → mean 11.67 %.
        let (m, n) = st.mean_rel_sigma_high.unwrap();
        assert_eq!(n, 3);
        assert!((m - (0.05 + 0.1 + 0.2) / 3.0).abs() < 1e-15);
    }
}
