//! `[sweep]`: parameters varied over lists of values, expanded to the Cartesian product.

use super::error::nearest;
use super::reader::Cx;
use super::tree::{Loc, Node, Val};

/// Most combinations one sweep may expand to.
pub const MAX_COMBINATIONS: usize = 10_000;

/// One swept parameter: a dotted key path and its values.
#[derive(Debug, Clone)]
pub struct SweepAxis {
    /// Dotted path as written, e.g. `source.tube.kvp` or `geometry.layer.0.thickness_cm`.
    pub key_path: String,
    /// Values in the order written.
    pub values: Vec<toml::Value>,
    pub(crate) nodes: Vec<Node>,
    pub(crate) key_loc: Loc,
}

pub(crate) fn to_toml_value(n: &Node) -> toml::Value {
    match &n.val {
        Val::Str(s) => toml::Value::String(s.clone()),
        Val::Int(i) => toml::Value::Integer(*i),
        Val::Float(f) => toml::Value::Float(*f),
        Val::Bool(b) => toml::Value::Boolean(*b),
        Val::Datetime(d) => toml::Value::String(d.clone()),
        Val::Array(a) => toml::Value::Array(a.iter().map(to_toml_value).collect()),
        Val::Table(t) => toml::Value::Table(
            t.iter()
                .map(|(k, v)| (k.clone(), to_toml_value(v)))
                .collect(),
        ),
    }
}

/// Read the `[sweep]` table (already removed from the tree) and check every path against `root`.
pub(crate) fn read_axes(cx: &mut Cx, sweep: &Node, root: &Node) -> Vec<SweepAxis> {
    let Val::Table(entries) = &sweep.val else {
        cx.err(
            sweep.key_or_value(),
            "sweep",
            format!(
                "expected a table of \"key.path\" = [values], found {}",
                sweep.val.type_name()
            ),
            None,
        );
        return Vec::new();
    };
    let mut out = Vec::new();
    for (k, v) in entries {
        let kp = format!("sweep.\"{k}\"");
        let loc: Loc = v.key_or_value();
        // A dotted key written without quotes arrives as nested tables.
        if matches!(v.val, Val::Table(_)) {
            cx.err(
                loc,
                &kp,
                "swept key paths are written in quotes",
                Some(format!(
                    "write `\"{k}.…\" = [...]` with the whole path quoted"
                )),
            );
            continue;
        }
        let Val::Array(items) = &v.val else {
            cx.err(
                v.loc,
                &kp,
                format!("expected an array of values, found {}", v.val.type_name()),
                Some(format!("write `\"{k}\" = [value1, value2]`")),
            );
            continue;
        };
        if items.is_empty() {
            cx.err(v.loc, &kp, "no values to sweep", None);
            continue;
        }
        if k.starts_with("sweep") || k == "include" || k == "run.output" {
            cx.err(
                loc,
                &kp,
                format!("`{k}` cannot be swept"),
                Some("each combination's output name is derived from the swept values".into()),
            );
            continue;
        }
        if let Err((msg, hint)) = check_path(root, k) {
            cx.err(loc, &kp, msg, hint);
            continue;
        }
        out.push(SweepAxis {
            key_path: k.clone(),
            values: items.iter().map(to_toml_value).collect(),
            nodes: items.clone(),
            key_loc: loc,
        });
    }
    out
}

fn table_keys(n: &Node) -> Vec<&str> {
    match &n.val {
        Val::Table(t) => t.iter().map(|(k, _)| k.as_str()).collect(),
        _ => Vec::new(),
    }
}

/// The path must lead through existing tables and array entries; the last key may be absent
/// (an optional key the deck does not set), as long as its table exists.
fn check_path(root: &Node, path: &str) -> Result<(), (String, Option<String>)> {
    let segs: Vec<&str> = path.split('.').collect();
    let mut cur = root;
    let mut walked = String::new();
    for (i, seg) in segs.iter().enumerate() {
        let last = i + 1 == segs.len();
        match &cur.val {
            Val::Array(items) => {
                let Ok(idx) = seg.parse::<usize>() else {
                    return Err((
                        format!("`{walked}` is a list; expected an index after it, found `{seg}`"),
                        Some(format!("write `{walked}.0.{seg}` for the first entry")),
                    ));
                };
                let Some(n) = items.get(idx) else {
                    return Err((
                        format!(
                            "`{walked}` has {} entries; index {idx} does not exist",
                            items.len()
                        ),
                        None,
                    ));
                };
                cur = n;
            }
            Val::Table(_) => match cur.get(seg) {
                Some(n) => cur = n,
                None if last => return Ok(()),
                None => {
                    let keys = table_keys(cur);
                    let hint = nearest(seg, &keys).map(|s| format!("did you mean `{s}`?"));
                    return Err((
                        format!(
                            "the deck has no `{}`",
                            if walked.is_empty() {
                                seg.to_string()
                            } else {
                                format!("{walked}.{seg}")
                            }
                        ),
                        hint,
                    ));
                }
            },
            _ => return Err((format!("`{walked}` is a value, not a table"), None)),
        }
        walked = if walked.is_empty() {
            seg.to_string()
        } else {
            format!("{walked}.{seg}")
        };
    }
    Ok(())
}

/// Set the value at a path checked against the base deck. When an earlier axis of the same
/// combination has replaced a table on the way by a plain value, nothing is set: validation
/// then reports the replaced value.
pub(crate) fn set_path(root: &mut Node, path: &str, value: Node, key_loc: Loc) {
    let segs: Vec<&str> = path.split('.').collect();
    let mut cur = root;
    for (i, seg) in segs.iter().enumerate() {
        let last = i + 1 == segs.len();
        // Errors about the key point at the sweep's key, about the value at the value.
        let next = match &mut cur.val {
            Val::Array(items) => {
                let Some(slot) = seg.parse::<usize>().ok().and_then(|idx| items.get_mut(idx))
                else {
                    return;
                };
                slot
            }
            Val::Table(entries) => match entries.iter().position(|(k, _)| k == seg) {
                Some(p) => &mut entries[p].1,
                None if last => {
                    let mut v = value;
                    v.key_loc = Some(key_loc);
                    entries.push((seg.to_string(), v));
                    return;
                }
                None => return,
            },
            _ => return,
        };
        if last {
            let mut v = value;
            v.key_loc = Some(key_loc);
            *next = v;
            return;
        }
        cur = next;
    }
}

/// The Cartesian product of the axes' value indices, last axis fastest.
pub(crate) fn combinations(axes: &[SweepAxis]) -> Vec<Vec<usize>> {
    let mut out = vec![Vec::new()];
    for a in axes {
        let mut next = Vec::with_capacity(out.len() * a.values.len());
        for c in &out {
            for i in 0..a.values.len() {
                let mut c2 = c.clone();
                c2.push(i);
                next.push(c2);
            }
        }
        out = next;
    }
    out
}

/// Label of an axis in file names: the last path segment, or the whole path when two axes
/// share their last segment.
pub(crate) fn labels(axes: &[SweepAxis]) -> Vec<String> {
    let lasts: Vec<&str> = axes
        .iter()
        .map(|a| a.key_path.rsplit('.').next().unwrap_or(&a.key_path))
        .collect();
    axes.iter()
        .zip(&lasts)
        .map(|(a, l)| {
            if lasts.iter().filter(|x| *x == l).count() > 1 {
                a.key_path.clone()
            } else {
                l.to_string()
            }
        })
        .collect()
}

/// A value as it appears in a file name: numbers as written (`80`, `2.5`, a minus sign as `m`),
/// strings with characters other than letters, digits, `.`, `_` replaced by `_`.
pub(crate) fn value_label(v: &toml::Value) -> String {
    let s = match v {
        toml::Value::Integer(i) => i.to_string(),
        toml::Value::Float(f) => format!("{f}"),
        toml::Value::Boolean(b) => b.to_string(),
        toml::Value::String(s) => s.clone(),
        other => other.to_string(),
    };
    let s = s.strip_prefix('-').map(|r| format!("m{r}")).unwrap_or(s);
    s.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '.' || c == '_' {
                c
            } else {
                '_'
            }
        })
        .collect()
}
