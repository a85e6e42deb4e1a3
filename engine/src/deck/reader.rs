//! Typed reading of located tables: each getter checks the type and range of one key and records
//! an error (with position, key path and fix) instead of stopping, so one pass reports many errors.

use super::error::{fmt_num, nearest, unit_hint, DeckError};
use super::tree::{Files, Loc, Node, Val};

/// Collects errors while the deck is walked.
pub(crate) struct Cx<'f> {
    pub files: &'f Files,
    pub errors: Vec<DeckError>,
}

impl<'f> Cx<'f> {
    pub fn err(
        &mut self,
        loc: Loc,
        key_path: &str,
        message: impl Into<String>,
        hint: Option<String>,
    ) {
        self.errors
            .push(self.files.error(loc, key_path, message.into(), hint));
    }
}

/// A closed or open interval with its unit, for range checks and their messages.
#[derive(Clone, Copy)]
pub(crate) struct Range {
    pub lo: f64,
    pub hi: f64,
    /// `true` when `lo` itself is not allowed.
    pub lo_open: bool,
    /// `true` when `hi` itself is not allowed.
    pub hi_open: bool,
    pub unit: &'static str,
}

impl Range {
    /// Strictly positive, up to `hi` inclusive.
    pub const fn pos(hi: f64, unit: &'static str) -> Range {
        Range {
            lo: 0.0,
            hi,
            lo_open: true,
            hi_open: false,
            unit,
        }
    }
    /// Closed interval.
    pub const fn closed(lo: f64, hi: f64, unit: &'static str) -> Range {
        Range {
            lo,
            hi,
            lo_open: false,
            hi_open: false,
            unit,
        }
    }
    /// Any finite number.
    pub const fn any(unit: &'static str) -> Range {
        Range {
            lo: f64::NEG_INFINITY,
            hi: f64::INFINITY,
            lo_open: true,
            hi_open: true,
            unit,
        }
    }
    pub fn contains(&self, v: f64) -> bool {
        v.is_finite()
            && (if self.lo_open {
                v > self.lo
            } else {
                v >= self.lo
            })
            && (if self.hi_open {
                v < self.hi
            } else {
                v <= self.hi
            })
    }
    pub fn describe(&self) -> String {
        let u = if self.unit.is_empty() {
            String::new()
        } else {
            format!(" {}", self.unit)
        };
        match (self.lo.is_finite(), self.hi.is_finite()) {
            (false, false) => "a finite number".into(),
            (true, false) => format!(
                "{} {}{u}",
                if self.lo_open {
                    "greater than"
                } else {
                    "at least"
                },
                fmt_num(self.lo)
            ),
            (false, true) => format!(
                "{} {}{u}",
                if self.hi_open { "less than" } else { "at most" },
                fmt_num(self.hi)
            ),
            (true, true) if !self.lo_open && !self.hi_open => {
                format!("{}–{}{u}", fmt_num(self.lo), fmt_num(self.hi))
            }
            (true, true) => format!(
                "{} {} and {} {}{u}",
                if self.lo_open {
                    "greater than"
                } else {
                    "at least"
                },
                fmt_num(self.lo),
                if self.hi_open { "less than" } else { "at most" },
                fmt_num(self.hi)
            ),
        }
    }
}

/// Join a key path: `geometry` + `layer[0]` → `geometry.layer[0]`.
pub(crate) fn join(path: &str, key: &str) -> String {
    if path.is_empty() {
        key.to_string()
    } else {
        format!("{path}.{key}")
    }
}

/// Value of a numeric node (integer or float), or an error naming the type found.
pub(crate) fn num(cx: &mut Cx, n: &Node, path: &str, unit: &str) -> Option<f64> {
    match &n.val {
        Val::Int(i) => Some(*i as f64),
        Val::Float(f) if f.is_finite() => Some(*f),
        Val::Float(f) => {
            cx.err(
                n.loc,
                path,
                format!("expected a finite number, found {f}"),
                None,
            );
            None
        }
        Val::Str(s) => {
            let hint = s.trim().parse::<f64>().ok().map(|v| {
                format!(
                    "write the number without quotes: `{} = {}`",
                    last(path),
                    fmt_num(v)
                )
            });
            let hint = hint.or_else(|| number_with_unit(s, path));
            cx.err(
                n.loc,
                path,
                format!("expected a number{}, found a string", unit_words(unit)),
                hint,
            );
            None
        }
        other => {
            cx.err(
                n.loc,
                path,
                format!(
                    "expected a number{}, found {}",
                    unit_words(unit),
                    other.type_name()
                ),
                None,
            );
            None
        }
    }
}

fn number_with_unit(s: &str, path: &str) -> Option<String> {
    let t = s.trim();
    let idx = t.find(|c: char| c.is_alphabetic())?;
    let (v, u) = t.split_at(idx);
    let v: f64 = v.trim().parse().ok()?;
    Some(format!(
        "the unit is in the key's name; write `{} = {}` (unit given: {})",
        last(path),
        fmt_num(v),
        u.trim()
    ))
}

fn unit_words(unit: &str) -> String {
    if unit.is_empty() {
        String::new()
    } else {
        format!(" (in {unit})")
    }
}

fn last(path: &str) -> &str {
    path.rsplit('.').next().unwrap_or(path)
}

/// A number within `r`.
pub(crate) fn num_in(cx: &mut Cx, n: &Node, path: &str, r: Range) -> Option<f64> {
    let v = num(cx, n, path, r.unit)?;
    if r.contains(v) {
        Some(v)
    } else {
        cx.err(
            n.loc,
            path,
            format!("out of range: {} (valid: {})", fmt_num(v), r.describe()),
            None,
        );
        None
    }
}

/// A whole number within `lo..=hi`; integral floats such as `1e6` are accepted.
pub(crate) fn uint_in(cx: &mut Cx, n: &Node, path: &str, lo: u64, hi: u64) -> Option<u64> {
    let v =
        match &n.val {
            Val::Int(i) if *i < 0 => {
                cx.err(
                    n.loc,
                    path,
                    format!("out of range: {i} (valid: {}–{})", lo, fmt_big(hi)),
                    None,
                );
                return None;
            }
            Val::Int(i) => *i as u64,
            Val::Float(f) if f.is_finite() && f.fract() == 0.0 && *f >= 0.0 && *f <= 9.0e15 => {
                *f as u64
            }
            Val::Float(f) => {
                let msg = if f.is_finite() && f.fract() != 0.0 {
                    format!("expected a whole number, found {f}")
                } else {
                    let shown = if f.abs() >= 1e8 {
                        format!("{f:e}")
                    } else {
                        f.to_string()
                    };
                    format!("out of range: {shown} (valid: {}–{})", lo, fmt_big(hi))
                };
                cx.err(n.loc, path, msg, None);
                return None;
            }
            Val::Str(s) => {
                let hint =
                    s.trim().replace('_', "").parse::<u64>().ok().map(|v| {
                        format!("write the number without quotes: `{} = {v}`", last(path))
                    });
                cx.err(n.loc, path, "expected a whole number, found a string", hint);
                return None;
            }
            other => {
                cx.err(
                    n.loc,
                    path,
                    format!("expected a whole number, found {}", other.type_name()),
                    None,
                );
                return None;
            }
        };
    if v < lo || v > hi {
        cx.err(
            n.loc,
            path,
            format!(
                "out of range: {} (valid: {}–{})",
                fmt_big(v),
                lo,
                fmt_big(hi)
            ),
            None,
        );
        return None;
    }
    Some(v)
}

/// Large counts in a readable form (1e15 rather than 1000000000000000).
pub(crate) fn fmt_big(v: u64) -> String {
    let e = format!("{:e}", v as f64);
    if v >= 100_000_000 && !e.contains('.') {
        e
    } else {
        v.to_string()
    }
}

pub(crate) fn string(cx: &mut Cx, n: &Node, path: &str) -> Option<String> {
    match &n.val {
        Val::Str(s) => Some(s.clone()),
        other => {
            cx.err(
                n.loc,
                path,
                format!("expected a string, found {}", other.type_name()),
                Some(format!(
                    "put the value in quotes: `{} = \"...\"`",
                    last(path)
                )),
            );
            None
        }
    }
}

pub(crate) fn boolean(cx: &mut Cx, n: &Node, path: &str) -> Option<bool> {
    match &n.val {
        Val::Bool(b) => Some(*b),
        Val::Str(s) if s == "true" || s == "false" => {
            cx.err(
                n.loc,
                path,
                "expected a boolean, found a string",
                Some(format!("write `{} = {s}` without quotes", last(path))),
            );
            None
        }
        other => {
            cx.err(
                n.loc,
                path,
                format!(
                    "expected a boolean (true or false), found {}",
                    other.type_name()
                ),
                None,
            );
            None
        }
    }
}

/// One of a closed list of words; a misspelling gets the nearest word as a hint.
pub(crate) fn choice(
    cx: &mut Cx,
    n: &Node,
    path: &str,
    options: &[&'static str],
) -> Option<&'static str> {
    let s = string(cx, n, path)?;
    if let Some(o) = options.iter().find(|o| **o == s) {
        return Some(o);
    }
    let list = options
        .iter()
        .map(|o| format!("`{o}`"))
        .collect::<Vec<_>>()
        .join(", ");
    let hint = nearest(&s, options).map(|o| format!("did you mean `{o}`?"));
    cx.err(
        n.loc,
        path,
        format!("unknown value `{s}`; expected one of {list}"),
        hint,
    );
    None
}

/// An array of exactly `N` numbers, each within `r`.
pub(crate) fn vec_n<const N: usize>(
    cx: &mut Cx,
    n: &Node,
    path: &str,
    r: Range,
) -> Option<[f64; N]> {
    let Val::Array(items) = &n.val else {
        cx.err(
            n.loc,
            path,
            format!(
                "expected an array of {N} numbers{}, found {}",
                unit_words(r.unit),
                n.val.type_name()
            ),
            None,
        );
        return None;
    };
    if items.len() != N {
        cx.err(
            n.loc,
            path,
            format!("expected {N} numbers, found {}", items.len()),
            None,
        );
        return None;
    }
    let mut out = [0.0; N];
    let mut ok = true;
    for (i, it) in items.iter().enumerate() {
        match num_in(cx, it, &format!("{path}[{i}]"), r) {
            Some(v) => out[i] = v,
            None => ok = false,
        }
    }
    ok.then_some(out)
}

/// Either one number (used for all `N` components) or an array of `N`.
pub(crate) fn scalar_or_vec<const N: usize>(
    cx: &mut Cx,
    n: &Node,
    path: &str,
    r: Range,
) -> Option<[f64; N]> {
    match &n.val {
        Val::Array(_) => vec_n::<N>(cx, n, path, r),
        _ => num_in(cx, n, path, r).map(|v| [v; N]),
    }
}

/// An array of exactly `N` whole numbers within `lo..=hi`.
pub(crate) fn uvec_n<const N: usize>(
    cx: &mut Cx,
    n: &Node,
    path: &str,
    lo: u64,
    hi: u64,
) -> Option<[u64; N]> {
    let Val::Array(items) = &n.val else {
        cx.err(
            n.loc,
            path,
            format!(
                "expected an array of {N} whole numbers, found {}",
                n.val.type_name()
            ),
            None,
        );
        return None;
    };
    if items.len() != N {
        cx.err(
            n.loc,
            path,
            format!("expected {N} whole numbers, found {}", items.len()),
            None,
        );
        return None;
    }
    let mut out = [0; N];
    let mut ok = true;
    for (i, it) in items.iter().enumerate() {
        match uint_in(cx, it, &format!("{path}[{i}]"), lo, hi) {
            Some(v) => out[i] = v,
            None => ok = false,
        }
    }
    ok.then_some(out)
}

/// A table whose keys are checked against a fixed list; unknown keys are reported on creation.
pub(crate) struct Tbl<'a> {
    pub node: &'a Node,
    pub path: String,
}

impl<'a> Tbl<'a> {
    /// Check that `node` is a table and that every key is in `allowed`. `what` names the table in
    /// messages ("a `depth_dose` score").
    pub fn new(
        cx: &mut Cx,
        node: &'a Node,
        path: &str,
        allowed: &[&'static str],
        what: &str,
    ) -> Option<Tbl<'a>> {
        let Val::Table(entries) = &node.val else {
            cx.err(
                node.key_or_value(),
                path,
                format!("expected a table, found {}", node.val.type_name()),
                None,
            );
            return None;
        };
        for (k, n) in entries {
            if allowed.contains(&k.as_str()) {
                continue;
            }
            let kp = join(path, k);
            let near = nearest(k, allowed);
            let value = match &n.val {
                Val::Int(i) => Some(*i as f64),
                Val::Float(f) => Some(*f),
                _ => None,
            };
            let hint = near.map(|s| match unit_hint(k, s, value) {
                Some(u) => format!("did you mean `{s}`? ({u})"),
                None => format!("did you mean `{s}`?"),
            });
            let hint =
                hint.or_else(|| Some(format!("valid keys for {what}: {}", allowed.join(", "))));
            cx.err(
                n.key_or_value(),
                &kp,
                format!("unknown key in {what}"),
                hint,
            );
        }
        Some(Tbl {
            node,
            path: path.to_string(),
        })
    }

    pub fn get(&self, key: &str) -> Option<&'a Node> {
        self.node.get(key)
    }

    pub fn kp(&self, key: &str) -> String {
        join(&self.path, key)
    }

    /// Where "missing key" errors point: the table's header (or the first key of an inline table).
    pub fn loc(&self) -> Loc {
        self.node.loc
    }

    /// A required key; a missing one is an error with `hint`.
    pub fn req(&self, cx: &mut Cx, key: &str, hint: &str) -> Option<&'a Node> {
        let n = self.get(key);
        if n.is_none() {
            let h = if hint.is_empty() {
                None
            } else {
                Some(hint.to_string())
            };
            cx.err(self.loc(), &self.kp(key), format!("missing key `{key}`"), h);
        }
        n
    }

    pub fn num_req(&self, cx: &mut Cx, key: &str, r: Range, hint: &str) -> Option<f64> {
        let n = self.req(cx, key, hint)?;
        num_in(cx, n, &self.kp(key), r)
    }

    pub fn num_opt(&self, cx: &mut Cx, key: &str, r: Range) -> Option<f64> {
        let n = self.get(key)?;
        num_in(cx, n, &self.kp(key), r)
    }

    pub fn bool_or(&self, cx: &mut Cx, key: &str, default: bool) -> bool {
        match self.get(key) {
            None => default,
            Some(n) => boolean(cx, n, &self.kp(key)).unwrap_or(default),
        }
    }

    pub fn str_req(&self, cx: &mut Cx, key: &str, hint: &str) -> Option<String> {
        let n = self.req(cx, key, hint)?;
        string(cx, n, &self.kp(key))
    }

    pub fn str_opt(&self, cx: &mut Cx, key: &str) -> Option<String> {
        let n = self.get(key)?;
        string(cx, n, &self.kp(key))
    }

    pub fn choice_or(
        &self,
        cx: &mut Cx,
        key: &str,
        options: &[&'static str],
        default: &'static str,
    ) -> &'static str {
        match self.get(key) {
            None => default,
            Some(n) => choice(cx, n, &self.kp(key), options).unwrap_or(default),
        }
    }

    pub fn choice_req(
        &self,
        cx: &mut Cx,
        key: &str,
        options: &[&'static str],
    ) -> Option<&'static str> {
        let hint = format!(
            "add `{key} = \"{}\"` (one of {})",
            options[0],
            options.join(", ")
        );
        let n = self.req(cx, key, &hint)?;
        choice(cx, n, &self.kp(key), options)
    }

    pub fn vec3_req(&self, cx: &mut Cx, key: &str, r: Range, hint: &str) -> Option<[f64; 3]> {
        let n = self.req(cx, key, hint)?;
        vec_n::<3>(cx, n, &self.kp(key), r)
    }

    pub fn vec3_or(&self, cx: &mut Cx, key: &str, r: Range, default: [f64; 3]) -> Option<[f64; 3]> {
        match self.get(key) {
            None => Some(default),
            Some(n) => vec_n::<3>(cx, n, &self.kp(key), r),
        }
    }
}
