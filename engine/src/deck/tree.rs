//! The parsed deck as a tree of located values, and the merging of included decks.
//!
//! Every value remembers the file and byte range it came from, so that errors found after
//! merging (or after a sweep substitutes a value) still point at the text the user wrote.

use super::error::{line_column, DeckError};
use std::path::{Path, PathBuf};

/// Which file a piece of text came from and why it was read.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FileRole {
    /// The deck named on the command line.
    Deck,
    /// A deck named in an `include` list.
    Include,
    /// A spectrum file named by `source.spectrum_file`.
    Spectrum,
}

/// The verbatim text of one file read while loading a deck (kept for provenance).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SourceFile {
    /// Path as it was named (joined to the including deck's folder when relative).
    pub path: PathBuf,
    /// Why the file was read.
    pub role: FileRole,
    /// The file's text, byte for byte.
    pub text: String,
}

/// A place in one of the loaded files: file index and byte range.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub(crate) struct Loc {
    pub file: usize,
    pub start: usize,
    pub end: usize,
}

/// A value and where it was written.
#[derive(Debug, Clone)]
pub(crate) struct Node {
    /// The value's own text (for tables: the header, or the parent's location when implicit).
    pub loc: Loc,
    /// The key's text, when the value sits under a key.
    pub key_loc: Option<Loc>,
    pub val: Val,
}

#[derive(Debug, Clone)]
pub(crate) enum Val {
    Str(String),
    Int(i64),
    Float(f64),
    Bool(bool),
    Datetime(String),
    Array(Vec<Node>),
    /// Entries in the order written.
    Table(Vec<(String, Node)>),
}

impl Val {
    /// The TOML type name, for "expected …, found …" messages.
    pub fn type_name(&self) -> &'static str {
        match self {
            Val::Str(_) => "a string",
            Val::Int(_) => "an integer",
            Val::Float(_) => "a float",
            Val::Bool(_) => "a boolean",
            Val::Datetime(_) => "a date-time",
            Val::Array(_) => "an array",
            Val::Table(_) => "a table",
        }
    }
}

impl Node {
    /// Where an error about this value should point: the key if known, else the value.
    pub fn key_or_value(&self) -> Loc {
        self.key_loc.unwrap_or(self.loc)
    }

    pub fn get(&self, key: &str) -> Option<&Node> {
        match &self.val {
            Val::Table(t) => t.iter().find(|(k, _)| k == key).map(|(_, n)| n),
            _ => None,
        }
    }
}

/// The files read so far and their texts; errors are located through it.
#[derive(Debug, Default, Clone)]
pub(crate) struct Files {
    pub files: Vec<SourceFile>,
}

impl Files {
    pub fn add(&mut self, path: PathBuf, role: FileRole, text: String) -> usize {
        self.files.push(SourceFile { path, role, text });
        self.files.len() - 1
    }

    pub fn error(
        &self,
        loc: Loc,
        key_path: &str,
        message: String,
        hint: Option<String>,
    ) -> DeckError {
        let f = &self.files[loc.file];
        let (line, column) = line_column(&f.text, loc.start);
        DeckError {
            file: f.path.clone(),
            line,
            column,
            key_path: key_path.to_string(),
            message,
            hint,
        }
    }

    pub fn describe(&self, loc: Loc) -> String {
        let f = &self.files[loc.file];
        let (line, column) = line_column(&f.text, loc.start);
        format!("{}:{}:{}", f.path.display(), line, column)
    }
}

fn loc_of(file: usize, span: Option<std::ops::Range<usize>>, fallback: Loc) -> Loc {
    match span {
        Some(r) => Loc {
            file,
            start: r.start,
            end: r.end,
        },
        None => fallback,
    }
}

fn from_value(file: usize, v: &toml_edit::Value, fallback: Loc) -> Node {
    let loc = loc_of(file, v.span(), fallback);
    let val = match v {
        toml_edit::Value::String(s) => Val::Str(s.value().clone()),
        toml_edit::Value::Integer(i) => Val::Int(*i.value()),
        toml_edit::Value::Float(f) => Val::Float(*f.value()),
        toml_edit::Value::Boolean(b) => Val::Bool(*b.value()),
        toml_edit::Value::Datetime(d) => Val::Datetime(d.value().to_string()),
        toml_edit::Value::Array(a) => {
            Val::Array(a.iter().map(|x| from_value(file, x, loc)).collect())
        }
        toml_edit::Value::InlineTable(t) => {
            let mut entries = Vec::new();
            for (k, item) in t.iter() {
                let key = t.key(k);
                let key_loc = key.and_then(|k| k.span()).map(|r| Loc {
                    file,
                    start: r.start,
                    end: r.end,
                });
                let mut n = from_value(file, item, key_loc.unwrap_or(loc));
                n.key_loc = key_loc.or(Some(n.loc));
                entries.push((k.to_string(), n));
            }
            Val::Table(entries)
        }
    };
    Node {
        loc,
        key_loc: None,
        val,
    }
}

fn from_table(file: usize, t: &toml_edit::Table, fallback: Loc) -> Node {
    let loc = loc_of(file, t.span(), fallback);
    let mut entries = Vec::new();
    for (k, item) in t.iter() {
        let key_loc = t.key(k).and_then(|k| k.span()).map(|r| Loc {
            file,
            start: r.start,
            end: r.end,
        });
        let mut n = from_item(file, item, key_loc.unwrap_or(loc));
        n.key_loc = key_loc.or(Some(n.loc));
        entries.push((k.to_string(), n));
    }
    Node {
        loc,
        key_loc: None,
        val: Val::Table(entries),
    }
}

fn from_item(file: usize, item: &toml_edit::Item, fallback: Loc) -> Node {
    match item {
        toml_edit::Item::Value(v) => from_value(file, v, fallback),
        toml_edit::Item::Table(t) => from_table(file, t, fallback),
        toml_edit::Item::ArrayOfTables(a) => {
            let loc = loc_of(file, a.span(), fallback);
            let elems = a.iter().map(|t| from_table(file, t, loc)).collect();
            Node {
                loc,
                key_loc: None,
                val: Val::Array(elems),
            }
        }
        toml_edit::Item::None => Node {
            loc: fallback,
            key_loc: None,
            val: Val::Table(Vec::new()),
        },
    }
}

/// Parse one file's text into a located tree; broken TOML gives one error at the parser's position.
pub(crate) fn parse_text(files: &Files, file: usize) -> Result<Node, DeckError> {
    let text = &files.files[file].text;
    match toml_edit::ImDocument::parse(text.as_str()) {
        Ok(doc) => Ok(from_table(
            file,
            doc.as_table(),
            Loc {
                file,
                start: 0,
                end: 0,
            },
        )),
        Err(e) => {
            let start = e.span().map(|r| r.start).unwrap_or(0);
            let msg = e.message().trim().replace('\n', "; ");
            Err(files.error(
                Loc {
                    file,
                    start,
                    end: start,
                },
                "",
                format!("broken TOML: {msg}"),
                Some("check the quoting, brackets and `key = value` form on this line".into()),
            ))
        }
    }
}

/// Top-level arrays whose entries accumulate across included decks instead of replacing.
const ACCUMULATED: &[&str] = &["material", "score"];

/// Read `path` and every deck it includes, merge them, and return the merged tree.
///
/// Merge rules (see SCHEMA.md): included decks are merged in the order listed, then the including
/// deck on top. Tables merge key by key. `[[material]]` and `[[score]]` entries accumulate
/// (included first). Any other key set by the including deck replaces the included value; the same
/// key set by two sibling includes is an error naming both places.
pub(crate) fn load_tree(
    path: &Path,
    role: FileRole,
    files: &mut Files,
    chain: &mut Vec<PathBuf>,
    include_loc: Option<Loc>,
    errors: &mut Vec<DeckError>,
) -> Option<Node> {
    let canon = std::fs::canonicalize(path).unwrap_or_else(|_| path.to_path_buf());
    if let Some(pos) = chain.iter().position(|p| *p == canon) {
        let names: Vec<String> = chain[pos..]
            .iter()
            .chain(std::iter::once(&canon))
            .map(|p| {
                p.file_name()
                    .map(|f| f.to_string_lossy().into_owned())
                    .unwrap_or_default()
            })
            .collect();
        let msg = format!("include loop: {}", names.join(" → "));
        let hint = Some("remove one of the `include` entries in this chain".to_string());
        errors.push(match include_loc {
            Some(l) => files.error(l, "include", msg, hint),
            None => DeckError {
                file: path.into(),
                line: 0,
                column: 0,
                key_path: "include".into(),
                message: msg,
                hint,
            },
        });
        return None;
    }
    let text = match std::fs::read_to_string(path) {
        Ok(t) => t,
        Err(e) => {
            let msg = format!("cannot read deck `{}`: {e}", path.display());
            errors.push(match include_loc {
                Some(l) => files.error(
                    l,
                    "include",
                    msg,
                    Some(
                        "check the path; relative paths are taken from the including deck's folder"
                            .into(),
                    ),
                ),
                None => DeckError {
                    file: path.into(),
                    line: 0,
                    column: 0,
                    key_path: String::new(),
                    message: msg,
                    hint: None,
                },
            });
            return None;
        }
    };
    chain.push(canon);
    let out = tree_from_text(path, role, text, files, chain, errors);
    chain.pop();
    out
}

/// Parse deck text that stands for the file `path` (not read) and merge its includes.
pub(crate) fn load_tree_from_text(
    path: &Path,
    text: &str,
    files: &mut Files,
    errors: &mut Vec<DeckError>,
) -> Option<Node> {
    let canon = std::fs::canonicalize(path).unwrap_or_else(|_| path.to_path_buf());
    let mut chain = vec![canon];
    tree_from_text(
        path,
        FileRole::Deck,
        text.to_string(),
        files,
        &mut chain,
        errors,
    )
}

fn tree_from_text(
    path: &Path,
    role: FileRole,
    text: String,
    files: &mut Files,
    chain: &mut Vec<PathBuf>,
    errors: &mut Vec<DeckError>,
) -> Option<Node> {
    let id = files.add(path.to_path_buf(), role, text);
    let mut root = match parse_text(files, id) {
        Ok(n) => n,
        Err(e) => {
            errors.push(e);
            return None;
        }
    };
    // Pull out the include list.
    let mut includes: Vec<(PathBuf, Loc)> = Vec::new();
    if let Val::Table(entries) = &mut root.val {
        if let Some(i) = entries.iter().position(|(k, _)| k == "include") {
            let (_, inc) = entries.remove(i);
            match &inc.val {
                Val::Array(items) => {
                    for it in items {
                        match &it.val {
                            Val::Str(s) => {
                                let base = path.parent().unwrap_or(Path::new(""));
                                includes.push((base.join(s), it.loc));
                            }
                            other => errors.push(files.error(
                                it.loc,
                                "include",
                                format!(
                                    "expected a file name (string), found {}",
                                    other.type_name()
                                ),
                                None,
                            )),
                        }
                    }
                }
                Val::Str(s) => {
                    let base = path.parent().unwrap_or(Path::new(""));
                    includes.push((base.join(s), inc.loc));
                }
                other => errors.push(files.error(
                    inc.key_or_value(),
                    "include",
                    format!(
                        "expected an array of file names, found {}",
                        other.type_name()
                    ),
                    Some("write `include = [\"common.toml\"]`".into()),
                )),
            }
        }
    }
    if includes.is_empty() {
        return Some(root);
    }
    let mut base: Option<Node> = None;
    for (p, l) in includes {
        if let Some(n) = load_tree(&p, FileRole::Include, files, chain, Some(l), errors) {
            base = Some(match base {
                None => n,
                Some(mut b) => {
                    merge(&mut b, n, MergeMode::Siblings, "", files, errors);
                    b
                }
            });
        }
    }
    match base {
        None => Some(root),
        Some(mut b) => {
            let root_loc = root.loc;
            merge(&mut b, root, MergeMode::Override, "", files, errors);
            b.loc = root_loc;
            Some(b)
        }
    }
}

#[derive(Clone, Copy, PartialEq)]
enum MergeMode {
    /// Two included decks: the same non-table key in both is an error.
    Siblings,
    /// The including deck over its includes: its keys win.
    Override,
}

fn merge(
    base: &mut Node,
    top: Node,
    mode: MergeMode,
    path: &str,
    files: &Files,
    errors: &mut Vec<DeckError>,
) {
    let (Val::Table(be), Val::Table(te)) = (&mut base.val, top.val) else {
        unreachable!()
    };
    for (k, tn) in te {
        let kp = if path.is_empty() {
            k.clone()
        } else {
            format!("{path}.{k}")
        };
        match be.iter_mut().find(|(bk, _)| *bk == k) {
            None => be.push((k, tn)),
            Some((_, bn)) => {
                let both_tables =
                    matches!(bn.val, Val::Table(_)) && matches!(tn.val, Val::Table(_));
                if both_tables {
                    merge(bn, tn, mode, &kp, files, errors);
                } else if path.is_empty() && ACCUMULATED.contains(&k.as_str()) {
                    match (&mut bn.val, tn.val) {
                        (Val::Array(ba), Val::Array(ta)) => ba.extend(ta),
                        (_, v) => {
                            // Not arrays: let validation report the type; keep the top value.
                            *bn = Node {
                                loc: tn.loc,
                                key_loc: tn.key_loc,
                                val: v,
                            };
                        }
                    }
                } else if mode == MergeMode::Override {
                    *bn = tn;
                } else {
                    errors.push(files.error(
                        tn.key_or_value(),
                        &kp,
                        format!("set by two included decks (also at {})", files.describe(bn.key_or_value())),
                        Some("set it in only one of them, or in the including deck, whose value wins".into()),
                    ));
                }
            }
        }
    }
}
