//! Input decks: a TOML schema of dosemill's own (see `SCHEMA.md` beside this file), loaded and
//! validated before any photon is started.
//!
//! * [`load`] reads a deck and everything it includes, checks every key, type, range and
//!   reference, and returns a [`Deck`]: the verbatim text of every file read and the
//!   [`ResolvedDeck`] with all defaults filled in. Errors are collected — as many as one pass
//!   can find — each naming `file:line:column`, the key and, where there is one, the fix.
//! * [`validate_with`] checks library material names through a lookup supplied by the caller.
//! * [`resolved_toml`] writes the resolved deck back as a deck (for `dosemill check` and the
//!   result file); loading that text gives the same resolved deck.
//! * [`expand`] turns a `[sweep]` into one resolved deck per combination of values.
//!
//! ```no_run
//! let deck = dosemill_engine::deck::load(std::path::Path::new("runs/water.toml"))
//!     .map_err(|errs| for e in &errs { eprintln!("{e}") });
//! ```

mod elements;
mod emit;
mod error;
mod reader;
mod spectrum_file;
mod sweep;
mod tree;
mod types;
mod validate;

pub use error::DeckError;
pub use sweep::{SweepAxis, MAX_COMBINATIONS};
pub use tree::{FileRole, SourceFile};
pub use types::*;
pub use validate::{
    BYTES_PER_PIXEL_ESTIMATE, BYTES_PER_VOXEL_ESTIMATE, MAX_BINS, MAX_DETECTOR_PIXELS,
    MAX_HISTORIES, MAX_VOXELS,
};

use std::path::{Path, PathBuf};
use tree::{Files, Node, Val};
use validate::{MaterialUse, Walk};

/// A loaded, validated deck.
#[derive(Debug, Clone)]
pub struct Deck {
    /// The deck file as named.
    pub path: PathBuf,
    /// Every file read, verbatim: the deck first, then included decks and spectrum files.
    pub files: Vec<SourceFile>,
    /// The deck with defaults filled in (the sweep's base point when there is a `[sweep]`).
    pub resolved: ResolvedDeck,
    /// The swept parameters, in the order written; empty without `[sweep]`.
    pub sweep: Vec<SweepAxis>,
    points: Vec<(Vec<(String, toml::Value)>, ResolvedDeck)>,
    uses: Vec<MaterialUse>,
    user_materials: Vec<String>,
    located: Files,
}

/// Load and validate the deck at `path` (and the decks it includes).
pub fn load(path: &Path) -> Result<Deck, Vec<DeckError>> {
    let mut files = Files::default();
    let mut errors = Vec::new();
    let tree = tree::load_tree(
        path,
        FileRole::Deck,
        &mut files,
        &mut Vec::new(),
        None,
        &mut errors,
    );
    finish(path, tree, files, errors)
}

/// Load and validate deck text as if it were the file `path` (used for messages, for the
/// default output name and for relative paths; `path` itself is not read, its includes are).
pub fn load_str(text: &str, path: &Path) -> Result<Deck, Vec<DeckError>> {
    let mut files = Files::default();
    let mut errors = Vec::new();
    let tree = tree::load_tree_from_text(path, text, &mut files, &mut errors);
    finish(path, tree, files, errors)
}

fn finish(
    path: &Path,
    tree: Option<Node>,
    files: Files,
    mut errors: Vec<DeckError>,
) -> Result<Deck, Vec<DeckError>> {
    let Some(mut root) = tree else {
        return Err(dedup(errors));
    };
    // Take the sweep out of the tree: the base point is the deck without it.
    let mut sweep_node = None;
    if let Val::Table(entries) = &mut root.val {
        if let Some(i) = entries.iter().position(|(k, _)| k == "sweep") {
            sweep_node = Some(entries.remove(i).1);
        }
    }
    let mut walk = Walk::new(&files, path.to_path_buf());
    let base = walk.deck(&root);
    let base_ok = walk.cx.errors.is_empty() && errors.is_empty();
    let mut axes = Vec::new();
    if let Some(s) = &sweep_node {
        axes = sweep::read_axes(&mut walk.cx, s, &root);
    }
    errors.append(&mut walk.cx.errors);
    let mut uses = std::mem::take(&mut walk.uses);
    let user_materials = std::mem::take(&mut walk.user_materials);
    let mut spectra = std::mem::take(&mut walk.spectra);
    // A broken base deck would repeat its errors in every combination: stop here. Bad sweep
    // axes do not stop the valid axes from being checked.
    let Some(base) = base.filter(|_| base_ok) else {
        return Err(dedup(errors));
    };
    let mut points = Vec::new();
    if !axes.is_empty() {
        let combos = sweep::combinations(&axes);
        if combos.len() > MAX_COMBINATIONS {
            let s = sweep_node.as_ref().expect("sweep present");
            errors.push(files.error(
                s.key_or_value(),
                "sweep",
                format!(
                    "the sweep expands to {} combinations (limit {MAX_COMBINATIONS})",
                    combos.len()
                ),
                Some("sweep fewer values, or split the study into several decks".into()),
            ));
            return Err(dedup(errors));
        }
        let labels = sweep::labels(&axes);
        for combo in combos {
            let mut t = root.clone();
            let mut values = Vec::new();
            let mut name = base_stem(&base.run.output);
            for (ai, &vi) in combo.iter().enumerate() {
                let ax = &axes[ai];
                sweep::set_path(&mut t, &ax.key_path, ax.nodes[vi].clone(), ax.key_loc);
                values.push((ax.key_path.clone(), ax.values[vi].clone()));
                name.push_str(&format!(
                    "__{}-{}",
                    labels[ai],
                    sweep::value_label(&ax.values[vi])
                ));
            }
            let mut w = Walk::new(&files, path.to_path_buf());
            let r = w.deck(&t);
            errors.append(&mut w.cx.errors);
            uses.append(&mut w.uses);
            for s in w.spectra.drain(..) {
                if !spectra.iter().any(|x| x.path == s.path) {
                    spectra.push(s);
                }
            }
            if let Some(mut r) = r {
                r.run.output = base.run.output.with_file_name(format!("{name}.h5"));
                points.push((values, r));
            }
        }
    }
    if !errors.is_empty() {
        return Err(dedup(errors));
    }
    let mut all = files.files.clone();
    all.extend(spectra);
    Ok(Deck {
        path: path.to_path_buf(),
        files: all,
        resolved: base,
        sweep: axes,
        points,
        uses,
        user_materials,
        located: files,
    })
}

fn base_stem(output: &Path) -> String {
    output
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "run".into())
}

/// Drop repeated errors (a sweep reports a bad value once, not once per combination) and order
/// them as they appear: by file (in the order read), then line and column.
fn dedup(errors: Vec<DeckError>) -> Vec<DeckError> {
    let mut out: Vec<DeckError> = Vec::new();
    for e in errors {
        if !out.contains(&e) {
            out.push(e);
        }
    }
    let mut files: Vec<PathBuf> = Vec::new();
    for e in &out {
        if !files.contains(&e.file) {
            files.push(e.file.clone());
        }
    }
    out.sort_by_key(|e| (files.iter().position(|f| *f == e.file), e.line, e.column));
    out
}

/// Check every library material name the deck uses (layers, shapes, filters, detector layers,
/// grid materials, labels — all names not defined by a `[[material]]`) with `lookup`, which
/// returns `Err(message)` for an unknown name. A message of the form `"unknown material; did
/// you mean `water`?"` is split at the first `"; "` into message and hint.
pub fn validate_with(
    deck: &Deck,
    lookup: &dyn Fn(&str) -> Result<(), String>,
) -> Result<(), Vec<DeckError>> {
    let errs = dedup(validate::check_library_names(
        &deck.located,
        &deck.uses,
        &deck.user_materials,
        lookup,
    ));
    if errs.is_empty() {
        Ok(())
    } else {
        Err(errs)
    }
}

/// The resolved deck (base point) as deck text: every default explicit, every path absolute.
pub fn resolved_toml(deck: &Deck) -> String {
    emit::resolved_to_toml(&deck.resolved)
}

/// Any resolved deck (for example one sweep combination) as deck text.
pub fn resolved_deck_toml(resolved: &ResolvedDeck) -> String {
    emit::resolved_to_toml(resolved)
}

/// The sweep's combinations: for each, the swept values (`key path`, value) and the resolved
/// deck. The Cartesian product runs with the last axis fastest. Each combination's output is
/// `<output stem>__<label>-<value>[__<label>-<value>…].h5` beside the base output, where the
/// label is the key path's last segment (the whole path when two axes share it), e.g.
/// `water__kvp-80__thickness_cm-2.h5`. A deck without `[sweep]` gives one entry with no values.
pub fn expand(deck: &Deck) -> Vec<(Vec<(String, toml::Value)>, ResolvedDeck)> {
    if deck.sweep.is_empty() {
        vec![(Vec::new(), deck.resolved.clone())]
    } else {
        deck.points.clone()
    }
}

/// The built-in materials library as a lookup for [`validate_with`]: library names, aliases
/// and element symbols (case-insensitive); an unknown name gets the nearest library names.
pub fn library_lookup(name: &str) -> Result<(), String> {
    use dosemill_xsdata::material::MaterialError;
    match dosemill_xsdata::library::lookup(name) {
        Ok(_) => Ok(()),
        Err(MaterialError::UnknownMaterial { suggestions, .. }) => {
            let mut msg = format!("`{name}` is not a material of the library");
            if let Some((first, rest)) = suggestions.split_first() {
                msg.push_str(&format!("; did you mean `{first}`?"));
                if !rest.is_empty() {
                    msg.push_str(&format!(" (also near: {})", rest.join(", ")));
                }
            } else {
                msg.push_str("; `dosemill materials` lists the library");
            }
            Err(msg)
        }
        Err(other) => Err(other.to_string()),
    }
}

/// [`load`], then [`validate_with`] against the built-in materials library: what `dosemill
/// check` and `dosemill run` call before starting a photon.
pub fn load_checked(path: &Path) -> Result<Deck, Vec<DeckError>> {
    let deck = load(path)?;
    validate_with(&deck, &library_lookup)?;
    Ok(deck)
}
