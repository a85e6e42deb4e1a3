//! The schema: walks the merged tree, checks every key, and builds the resolved structs.

use super::error::{fmt_num, nearest, DeckError};
use super::reader::{
    choice, join, num_in, scalar_or_vec, string, uint_in, uvec_n, vec_n, Cx, Range, Tbl,
};
use super::tree::{FileRole, Files, Loc, Node, SourceFile, Val};
use super::types::*;
use super::{elements, spectrum_file};
use std::path::{Path, PathBuf};

/// Most histories a run may ask for.
pub const MAX_HISTORIES: u64 = 1_000_000_000_000_000;
/// Most voxels in a grid (geometry or scoring). 2.5e8 voxels at about 18 bytes each
/// (material index, dose sum and sum of squares) is about 4.5 GB.
pub const MAX_VOXELS: u64 = 250_000_000;
/// Estimated memory per voxel (bytes) used in the size message.
pub const BYTES_PER_VOXEL_ESTIMATE: u64 = 18;
/// Most pixels in one detector (8192 × 8192).
pub const MAX_DETECTOR_PIXELS: u64 = 8192 * 8192;
/// Estimated memory per detector pixel (bytes): four f64 accumulators (primary and scatter,
/// sums and sums of squares).
pub const BYTES_PER_PIXEL_ESTIMATE: u64 = 32;
/// Most bins in a depth-dose or spectrum score.
pub const MAX_BINS: u64 = 10_000_000;

const LEN: Range = Range::any("cm");
const DENSITY: Range = Range::pos(30.0, "g/cm³");
const ENERGY: Range = Range::closed(1.0, 800.0, "keV");

/// A library material name used somewhere in the deck, kept to check against the library later.
#[derive(Debug, Clone)]
pub(crate) struct MaterialUse {
    pub name: String,
    pub loc: Loc,
    pub key_path: String,
}

pub(crate) struct Walk<'f> {
    pub cx: Cx<'f>,
    pub user_materials: Vec<String>,
    pub uses: Vec<MaterialUse>,
    pub spectra: Vec<SourceFile>,
    /// The deck named on the command line (for the default output name).
    pub main_deck: PathBuf,
    /// Where `source.energy_bias.toward` was given (for the cross-check against the scores).
    energy_bias_loc: Option<Loc>,
    /// Where `[source.field_bias]` (its `toward`) was given.
    field_bias_loc: Option<Loc>,
    /// Where each detector's `forced_detection_steer` above 0 was given, with the score's name.
    steer_locs: Vec<(Loc, String)>,
}

fn is_identifier(s: &str) -> bool {
    let mut c = s.chars();
    matches!(c.next(), Some(f) if f.is_ascii_alphabetic())
        && c.all(|ch| ch.is_ascii_alphanumeric() || ch == '_' || ch == '-')
        && s.len() <= 64
}

fn human_bytes(b: f64) -> String {
    let units = ["B", "kB", "MB", "GB", "TB", "PB", "EB"];
    let mut v = b;
    let mut i = 0;
    while v >= 1000.0 && i + 1 < units.len() {
        v /= 1000.0;
        i += 1;
    }
    format!("{} {}", fmt_num((v * 10.0).round() / 10.0), units[i])
}

impl<'f> Walk<'f> {
    pub fn new(files: &'f Files, main_deck: PathBuf) -> Self {
        Walk {
            cx: Cx {
                files,
                errors: Vec::new(),
            },
            user_materials: Vec::new(),
            uses: Vec::new(),
            spectra: Vec::new(),
            main_deck,
            energy_bias_loc: None,
            field_bias_loc: None,
            steer_locs: Vec::new(),
        }
    }

    fn err(&mut self, loc: Loc, key_path: &str, message: impl Into<String>, hint: Option<String>) {
        self.cx.err(loc, key_path, message, hint);
    }

    /// Folder of the file a value was written in: relative paths are taken from there.
    fn folder_of(&self, loc: Loc) -> PathBuf {
        self.cx.files.files[loc.file]
            .path
            .parent()
            .map(Path::to_path_buf)
            .unwrap_or_default()
    }

    fn path_value(&mut self, n: &Node, path: &str) -> Option<PathBuf> {
        let s = string(&mut self.cx, n, path)?;
        if s.trim().is_empty() {
            self.err(n.loc, path, "empty file name", None);
            return None;
        }
        let p = PathBuf::from(&s);
        let joined = if p.is_absolute() {
            p
        } else {
            self.folder_of(n.loc).join(p)
        };
        // Absolute, so that the resolved deck means the same from any working folder.
        Some(std::path::absolute(&joined).unwrap_or(joined))
    }

    fn mat_ref(&mut self, n: &Node, path: &str) -> Option<MaterialRef> {
        let name = string(&mut self.cx, n, path)?;
        if self.user_materials.contains(&name) {
            return Some(MaterialRef {
                name,
                user_defined: true,
            });
        }
        if name.is_empty()
            || !name
                .chars()
                .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-')
        {
            self.err(
                n.loc,
                path,
                format!("`{name}` is not a valid material name"),
                Some("material names use letters, digits, `_` and `-`".into()),
            );
            return None;
        }
        // Not defined here: a library name (or a typo of a deck material, which
        // `check_library_names` reports when the library does not know the name either).
        self.uses.push(MaterialUse {
            name: name.clone(),
            loc: n.loc,
            key_path: path.to_string(),
        });
        Some(MaterialRef {
            name,
            user_defined: false,
        })
    }

    fn check_voxel_count(&mut self, loc: Loc, path: &str, counts: &[u64], what: &str) -> bool {
        let total: f64 = counts.iter().map(|&c| c as f64).product();
        if total > MAX_VOXELS as f64 {
            let dims = counts
                .iter()
                .map(|c| c.to_string())
                .collect::<Vec<_>>()
                .join(" × ");
            self.err(
                loc,
                path,
                format!(
                    "{what} of {dims} = {:e} voxels is too large: about {} of memory at {} bytes per voxel (limit {:e} voxels)",
                    total,
                    human_bytes(total * BYTES_PER_VOXEL_ESTIMATE as f64),
                    BYTES_PER_VOXEL_ESTIMATE,
                    MAX_VOXELS as f64
                ),
                Some("use larger voxels or fewer of them".into()),
            );
            return false;
        }
        true
    }

    // ---------------------------------------------------------------- top level

    /// `[source.<what>_bias]`'s `toward` must name a detector score of the deck.
    fn check_bias_target(&mut self, loc: Loc, scores: &[Score], toward: &str, what: &str) {
        let detectors: Vec<&str> = scores.iter().filter(|s| matches!(s.kind, ScoreKind::Detector(_))).map(|s| s.name.as_str()).collect();
        if detectors.contains(&toward) {
            return;
        }
        let hint = nearest(toward, &detectors).map(|s| format!("did you mean `{s}`?")).or_else(|| {
            Some(if detectors.is_empty() {
                format!("the {what} bias needs a `[[score]]` with `kind = \"detector\"`; remove `[source.{what}_bias]` or add one")
            } else {
                format!("detector scores in this deck: {}", detectors.join(", "))
            })
        });
        self.err(loc, &format!("source.{what}_bias.toward"), format!("no detector score named `{toward}`"), hint);
    }

    pub fn deck(&mut self, root: &Node) -> Option<ResolvedDeck> {
        // A protocol file (`dosemill protocol`) given where a deck is expected: one error that
        // says so, instead of a missing key for every deck table and an unknown one for each
        // protocol table.
        let deck_keys = ["run", "source", "geometry", "score"];
        if let Some(p) = ["protocol", "exam"].iter().find_map(|k| root.get(k)) {
            if deck_keys.iter().all(|k| root.get(k).is_none()) {
                let loc = p.key_or_value();
                let file = self.cx.files.files.get(loc.file).map(|f| f.path.display().to_string()).unwrap_or_default();
                self.cx.err(loc, "", "this is a protocol file (`[protocol]`, `[[exam]]`), not a deck", Some(format!("evaluate it with `dosemill protocol {file}`")));
                return None;
            }
        }
        let top = Tbl::new(
            &mut self.cx,
            root,
            "",
            &[
                "run", "source", "material", "geometry", "score", "sweep", "include",
            ],
            "the deck",
        )?;
        let materials = match top.get("material") {
            Some(n) => self.materials(n),
            None => Vec::new(),
        };
        let run = match top.req(
            &mut self.cx,
            "run",
            "add a `[run]` table with at least `histories = ...`",
        ) {
            Some(n) => self.run(n),
            None => None,
        };
        let source = match top.req(&mut self.cx, "source", "add a `[source]` table with `kind` and one of `energy_kev`, `spectrum_file` or `[source.tube]`") {
            Some(n) => self.source(n),
            None => None,
        };
        let geometry = match top.req(
            &mut self.cx,
            "geometry",
            "add a `[geometry]` table with `kind = \"slabs\"` or `kind = \"voxels\"`",
        ) {
            Some(n) => self.geometry(n),
            None => None,
        };
        let scores = match top.req(
            &mut self.cx,
            "score",
            "add at least one `[[score]]` with a `name` and a `kind`",
        ) {
            Some(n) => self.scores(n, geometry.as_ref()),
            None => None,
        };
        let (run, source, geometry, scores) = (run?, source?, geometry?, scores?);
        // Cross-checks.
        if let Some(stop) = &run.1 {
            let names: Vec<&str> = scores.iter().map(|s| s.name.as_str()).collect();
            if !names.contains(&stop.0.score.as_str()) {
                let hint = nearest(&stop.0.score, &names)
                    .map(|s| format!("did you mean `{s}`?"))
                    .or_else(|| Some(format!("score names in this deck: {}", names.join(", "))));
                self.err(
                    stop.1,
                    "run.stop_at_uncertainty.score",
                    format!("no score named `{}`", stop.0.score),
                    hint,
                );
            }
        }
        if let (Some(b), Some(loc)) = (&source.energy_bias, self.energy_bias_loc) {
            self.check_bias_target(loc, &scores, &b.toward, "energy");
            if let SourceEnergy::Monoenergetic { .. } = source.energy {
                self.err(loc, "source.energy_bias", "a single-energy source has no energies to bias", Some("remove `[source.energy_bias]`, or give a spectrum (`spectrum_file` or `[source.tube]`)".into()));
            }
        }
        if let [(_, first), rest @ ..] = &self.steer_locs[..] {
            let first = first.clone();
            for (loc, key) in rest.to_vec() {
                self.err(
                    loc,
                    &key,
                    format!("only one detector can steer Compton directions; `{first}` does already"),
                    Some("remove `forced_detection_steer` from all detectors but one".into()),
                );
            }
        }
        if let (Some(b), Some(loc)) = (&source.field_bias, self.field_bias_loc) {
            self.check_bias_target(loc, &scores, &b.toward, "field");
            let refused = match &source.shape {
                SourceShape::Pencil { .. } => Some(("a pencil beam has no field to bias", "remove `[source.field_bias]`, or use `kind = \"parallel\"` or `\"point\"` with a rectangular field")),
                SourceShape::Parallel { field: Field::Circle { .. }, .. } | SourceShape::Point { field: Field::Circle { .. }, .. } => {
                    Some(("the field bias needs a rectangular field", "use `field = { shape = \"rectangle\", … }`, or remove `[source.field_bias]`"))
                }
                SourceShape::Point { focal_spot_cm: [fw, fh], .. } if *fw > 0.0 || *fh > 0.0 => {
                    Some(("the field bias needs a point focus", "set `focal_spot_cm = [0, 0]`, or remove `[source.field_bias]`"))
                }
                _ => None,
            };
            if let Some((msg, hint)) = refused {
                self.err(loc, "source.field_bias", msg, Some(hint.into()));
            }
        }
        let max_kev = match &source.energy {
            SourceEnergy::Monoenergetic { energy_kev } => *energy_kev,
            SourceEnergy::SpectrumFile { energies_kev, .. } => {
                energies_kev.last().copied().unwrap_or(0.0)
            }
            SourceEnergy::Tube(t) => t.kvp,
        };
        let mut run_v = run.0;
        if run_v.energy_cutoff_kev >= max_kev {
            let loc = run.2;
            self.err(
                loc,
                "run.energy_cutoff_kev",
                format!("energy cut-off {} keV is not below the highest source energy {} keV: no photon would be transported", fmt_num(run_v.energy_cutoff_kev), fmt_num(max_kev)),
                Some("lower `energy_cutoff_kev` (default 1)".into()),
            );
        }
        run_v.stop_at_uncertainty = run.1.map(|s| s.0);
        Some(ResolvedDeck {
            run: run_v,
            source,
            materials,
            geometry,
            scores,
        })
    }

    // ---------------------------------------------------------------- [run]

    #[allow(clippy::type_complexity)]
    fn run(&mut self, n: &Node) -> Option<(Run, Option<(StopAtUncertainty, Loc)>, Loc)> {
        let cx = &mut self.cx;
        let t = Tbl::new(
            cx,
            n,
            "run",
            &[
                "histories",
                "seed",
                "threads",
                "histories_per_chunk",
                "stop_at_uncertainty",
                "time_limit_s",
                "energy_cutoff_kev",
                "bound_compton",
                "rayleigh",
                "fluorescence",
                "output",
                "checkpoint_interval_s",
            ],
            "`[run]`",
        )?;
        let histories = t
            .req(cx, "histories", "add `histories = 1_000_000` (1 to 1e15)")
            .and_then(|h| uint_in(cx, h, "run.histories", 1, MAX_HISTORIES));
        let seed = match t.get("seed") {
            Some(s) => uint_in(cx, s, "run.seed", 0, i64::MAX as u64),
            None => Some(1),
        };
        let threads = match t.get("threads") {
            Some(s) => uint_in(cx, s, "run.threads", 1, 4096).map(|v| Some(v as u32)),
            None => Some(None),
        };
        let chunk = match t.get("histories_per_chunk") {
            Some(s) => uint_in(cx, s, "run.histories_per_chunk", 1, 1_000_000_000),
            None => Some(10_000),
        };
        let mut stop = Some(None);
        if let Some(s) = t.get("stop_at_uncertainty") {
            stop = None;
            if let Some(st) = Tbl::new(
                cx,
                s,
                "run.stop_at_uncertainty",
                &["score", "relative"],
                "`stop_at_uncertainty`",
            ) {
                let score = st.str_req(
                    cx,
                    "score",
                    "name the score whose uncertainty stops the run",
                );
                let rel = st.num_req(
                    cx,
                    "relative",
                    Range {
                        lo: 0.0,
                        hi: 1.0,
                        lo_open: true,
                        hi_open: false,
                        unit: "",
                    },
                    "add `relative = 0.01` for 1 %",
                );
                let sloc = st.get("score").map(|x| x.loc).unwrap_or(s.loc);
                if let (Some(score), Some(relative)) = (score, rel) {
                    stop = Some(Some((StopAtUncertainty { score, relative }, sloc)));
                }
            }
        }
        let time_limit_s = t.num_opt(cx, "time_limit_s", Range::pos(1e9, "s"));
        let cut_ok = t.get("energy_cutoff_kev").map(|c| {
            num_in(
                cx,
                c,
                "run.energy_cutoff_kev",
                Range {
                    lo: 1.0,
                    hi: 800.0,
                    lo_open: false,
                    hi_open: true,
                    unit: "keV",
                },
            )
        });
        let energy_cutoff_kev = match cut_ok {
            None => Some(1.0),
            Some(v) => v,
        };
        let cut_loc = t.get("energy_cutoff_kev").map(|c| c.loc).unwrap_or(n.loc);
        let bound_compton = t.bool_or(cx, "bound_compton", true);
        let rayleigh = t.bool_or(cx, "rayleigh", true);
        let fluorescence = t.bool_or(cx, "fluorescence", true);
        let checkpoint_interval_s = t.num_opt(cx, "checkpoint_interval_s", Range::pos(1e9, "s"));
        let output = match t.get("output") {
            Some(o) => {
                let p = self.path_value(o, "run.output");
                if let Some(p) = &p {
                    if p.extension().and_then(|e| e.to_str()) != Some("h5") {
                        self.err(
                            o.loc,
                            "run.output",
                            "result files are HDF5 and end in `.h5`",
                            Some(format!(
                                "write `output = \"{}\"`",
                                p.with_extension("h5")
                                    .file_name()
                                    .unwrap_or_default()
                                    .to_string_lossy()
                            )),
                        );
                    }
                }
                p
            }
            None => {
                let p = self.main_deck.with_extension("h5");
                Some(std::path::absolute(&p).unwrap_or(p))
            }
        };
        let tl_bad = t.get("time_limit_s").is_some() && time_limit_s.is_none();
        let ck_bad = t.get("checkpoint_interval_s").is_some() && checkpoint_interval_s.is_none();
        if tl_bad || ck_bad {
            return None;
        }
        Some((
            Run {
                histories: histories?,
                seed: seed?,
                threads: threads?,
                histories_per_chunk: chunk?,
                stop_at_uncertainty: None,
                time_limit_s,
                energy_cutoff_kev: energy_cutoff_kev?,
                bound_compton,
                rayleigh,
                fluorescence,
                output: output?,
                checkpoint_interval_s,
            },
            stop?,
            cut_loc,
        ))
    }

    // ---------------------------------------------------------------- [source]

    fn source(&mut self, n: &Node) -> Option<Source> {
        let t = Tbl::new(
            &mut self.cx,
            n,
            "source",
            &[
                "kind",
                "position_cm",
                "direction",
                "field",
                "field_distance_cm",
                "focal_spot_cm",
                "energy_kev",
                "spectrum_file",
                "tube",
                "energy_bias",
                "field_bias",
            ],
            "`[source]`",
        )?;
        let cx = &mut self.cx;
        let kind = t.choice_req(cx, "kind", &["pencil", "parallel", "point"]);
        let position_cm = if kind == Some("point") {
            t.vec3_req(
                cx,
                "position_cm",
                LEN,
                "a point source needs `position_cm = [x, y, z]`",
            )
        } else {
            t.vec3_or(cx, "position_cm", LEN, [0.0, 0.0, 0.0])
        };
        let direction = t.vec3_or(cx, "direction", Range::any(""), [0.0, 0.0, 1.0]);
        if let (Some(d), Some(dn)) = (direction, t.get("direction")) {
            if d.iter().all(|c| *c == 0.0) {
                cx.err(
                    dn.loc,
                    "source.direction",
                    "the direction is the zero vector",
                    Some("give a non-zero vector such as `[0, 0, 1]`".into()),
                );
            }
        }
        let mut field = None;
        let mut field_distance_cm = None;
        let mut focal_spot_cm = Some([0.0, 0.0]);
        match kind {
            Some("pencil") => {
                if let Some(f) = t.get("field") {
                    cx.err(
                        f.key_or_value(),
                        "source.field",
                        "a pencil beam has no field",
                        Some("remove `field`, or use `kind = \"parallel\"` or `\"point\"`".into()),
                    );
                }
                if let Some(f) = t.get("field_distance_cm") {
                    cx.err(
                        f.key_or_value(),
                        "source.field_distance_cm",
                        "only a point source has a field distance",
                        None,
                    );
                }
            }
            Some(k) => {
                field = t
                    .req(cx, "field", "add `field = { shape = \"rectangle\", width_cm = 10, height_cm = 10 }` or `{ shape = \"circle\", radius_cm = 5 }`")
                    .and_then(|f| field_of(cx, f, "source.field"));
                if k == "point" {
                    field_distance_cm = t.num_req(cx, "field_distance_cm", Range::pos(1e5, "cm"), "a point source needs `field_distance_cm`: the distance from the point at which `field` is measured");
                    if let Some(f) = t.get("focal_spot_cm") {
                        focal_spot_cm = vec_n::<2>(cx, f, "source.focal_spot_cm", Range::closed(0.0, 1.0, "cm"));
                    }
                } else if let Some(f) = t.get("field_distance_cm") {
                    cx.err(
                        f.key_or_value(),
                        "source.field_distance_cm",
                        "only a point source has a field distance",
                        Some("remove it; a parallel beam's field is its cross-section".into()),
                    );
                }
            }
            None => {}
        }
        if let (Some(k), Some(f)) = (kind, t.get("focal_spot_cm")) {
            if k != "point" {
                cx.err(
                    f.key_or_value(),
                    "source.focal_spot_cm",
                    "only a point source has a focal spot",
                    Some("remove it, or use `kind = \"point\"` with a `field` and `field_distance_cm`".into()),
                );
            }
        }
        // Energy: exactly one of three.
        let given: Vec<&str> = ["energy_kev", "spectrum_file", "tube"]
            .into_iter()
            .filter(|k| t.get(k).is_some())
            .collect();
        let energy = match given.len() {
            0 => {
                cx.err(t.loc(), "source", "no photon energy given", Some("add one of `energy_kev = 60`, `spectrum_file = \"spectrum.csv\"` or a `[source.tube]` table".into()));
                None
            }
            1 => match given[0] {
                "energy_kev" => num_in(cx, t.get("energy_kev")?, "source.energy_kev", ENERGY)
                    .map(|e| SourceEnergy::Monoenergetic { energy_kev: e }),
                "spectrum_file" => self.spectrum(t.get("spectrum_file")?),
                _ => self.tube(t.get("tube")?).map(SourceEnergy::Tube),
            },
            _ => {
                let second = t.get(given[1])?;
                cx.err(
                    second.key_or_value(),
                    &format!("source.{}", given[1]),
                    format!(
                        "`{}` and `{}` both give the photon energy",
                        given[0], given[1]
                    ),
                    Some(
                        "keep exactly one of `energy_kev`, `spectrum_file` and `[source.tube]`"
                            .into(),
                    ),
                );
                None
            }
        };
        let shape = match kind? {
            "pencil" => SourceShape::Pencil {
                position_cm: position_cm?,
                direction: direction?,
            },
            "parallel" => SourceShape::Parallel {
                position_cm: position_cm?,
                direction: direction?,
                field: field?,
            },
            _ => SourceShape::Point {
                position_cm: position_cm?,
                direction: direction?,
                field: field?,
                field_distance_cm: field_distance_cm?,
                focal_spot_cm: focal_spot_cm?,
            },
        };
        let energy_bias = match t.get("energy_bias") {
            None => Some(None),
            Some(b) => self.energy_bias(b).map(Some),
        };
        let field_bias = match t.get("field_bias") {
            None => Some(None),
            Some(b) => self.field_bias(b).map(Some),
        };
        if direction?.iter().all(|c| *c == 0.0) {
            return None;
        }
        Some(Source {
            shape,
            energy: energy?,
            energy_bias: energy_bias?,
            field_bias: field_bias?,
        })
    }

    fn field_bias(&mut self, n: &Node) -> Option<FieldBias> {
        let cx = &mut self.cx;
        let t = Tbl::new(cx, n, "source.field_bias", &["toward", "length_cm", "floor"], "`[source.field_bias]`")?;
        let toward = t.str_req(cx, "toward", "name the `kind = \"detector\"` score whose ROI the start rays are biased toward, e.g. `toward = \"image\"`");
        let length_cm = match t.get("length_cm") {
            None => Some(FIELD_BIAS_LENGTH_DEFAULT_CM),
            Some(f) => num_in(cx, f, "source.field_bias.length_cm", Range { lo: 0.0, hi: 1e4, lo_open: true, hi_open: false, unit: "cm" }),
        };
        let floor = match t.get("floor") {
            None => Some(FIELD_BIAS_FLOOR_DEFAULT),
            Some(f) => num_in(cx, f, "source.field_bias.floor", Range { lo: 0.0, hi: 1.0, lo_open: true, hi_open: false, unit: "" }),
        };
        self.field_bias_loc = Some(t.get("toward").map(|x| x.loc).unwrap_or(n.loc));
        Some(FieldBias { toward: toward?, length_cm: length_cm?, floor: floor? })
    }

    fn energy_bias(&mut self, n: &Node) -> Option<EnergyBias> {
        let cx = &mut self.cx;
        let t = Tbl::new(cx, n, "source.energy_bias", &["toward", "floor"], "`[source.energy_bias]`")?;
        let toward = t.str_req(cx, "toward", "name the `kind = \"detector\"` score the energies are biased toward, e.g. `toward = \"image\"`");
        let floor = match t.get("floor") {
            None => Some(ENERGY_BIAS_FLOOR_DEFAULT),
            Some(f) => num_in(cx, f, "source.energy_bias.floor", Range { lo: 0.0, hi: 1.0, lo_open: true, hi_open: false, unit: "" }),
        };
        self.energy_bias_loc = Some(t.get("toward").map(|x| x.loc).unwrap_or(n.loc));
        Some(EnergyBias { toward: toward?, floor: floor? })
    }

    fn spectrum(&mut self, n: &Node) -> Option<SourceEnergy> {
        let path = self.path_value(n, "source.spectrum_file")?;
        let text = match std::fs::read_to_string(&path) {
            Ok(t) => t,
            Err(e) => {
                self.err(
                    n.loc,
                    "source.spectrum_file",
                    format!("cannot read spectrum file `{}`: {e}", path.display()),
                    Some(
                        "relative paths are taken from the folder of the deck that names the file"
                            .into(),
                    ),
                );
                return None;
            }
        };
        match spectrum_file::parse(&text) {
            Ok((energies_kev, weights)) => {
                if !self.spectra.iter().any(|s| s.path == path) {
                    self.spectra.push(SourceFile {
                        path: path.clone(),
                        role: FileRole::Spectrum,
                        text,
                    });
                }
                Some(SourceEnergy::SpectrumFile {
                    path,
                    energies_kev,
                    weights,
                })
            }
            Err(e) => {
                // Point at the deck key, and name the place in the spectrum file.
                self.err(
                    n.loc,
                    "source.spectrum_file",
                    format!("bad spectrum file {}:{}:{}: {}", path.display(), e.line, e.column, e.message),
                    Some("spectrum files have two columns: energy (keV, 1–800, increasing) and relative weight (≥ 0, at least one > 0)".into()),
                );
                None
            }
        }
    }

    fn tube(&mut self, n: &Node) -> Option<Tube> {
        let t = Tbl::new(
            &mut self.cx,
            n,
            "source.tube",
            &[
                "kvp",
                "anode",
                "anode_angle_deg",
                "filters",
                "ripple_percent",
            ],
            "`[source.tube]`",
        )?;
        let cx = &mut self.cx;
        let kvp = t.num_req(
            cx,
            "kvp",
            Range::closed(15.0, 300.0, "kV"),
            "add the tube voltage, e.g. `kvp = 80` (15–300 kV)",
        );
        let anode = match t.choice_or(cx, "anode", &["W", "Mo", "Rh"], "W") {
            "Mo" => Anode::Mo,
            "Rh" => Anode::Rh,
            _ => Anode::W,
        };
        let anode_bad = t.get("anode").is_some_and(
            |a| !matches!(&a.val, Val::Str(s) if ["W", "Mo", "Rh"].contains(&s.as_str())),
        );
        let anode_angle_deg = t
            .get("anode_angle_deg")
            .map(|a| {
                num_in(
                    cx,
                    a,
                    "source.tube.anode_angle_deg",
                    Range::closed(crate::spectrum::ANODE_ANGLE_RANGE_DEG.0, crate::spectrum::ANODE_ANGLE_RANGE_DEG.1, "°"),
                )
            })
            .unwrap_or(Some(12.0));
        let ripple_percent = t
            .get("ripple_percent")
            .map(|a| {
                num_in(
                    cx,
                    a,
                    "source.tube.ripple_percent",
                    Range::closed(crate::spectrum::RIPPLE_RANGE_PERCENT.0, crate::spectrum::RIPPLE_RANGE_PERCENT.1, "%"),
                )
            })
            .unwrap_or(Some(0.0));
        let mut filters = Some(Vec::new());
        if let Some(f) = t.get("filters") {
            match &f.val {
                Val::Array(items) => {
                    let mut out = Vec::new();
                    let mut ok = true;
                    for (i, it) in items.iter().enumerate() {
                        match self.filter(it, &format!("source.tube.filters[{i}]")) {
                            Some(x) => out.push(x),
                            None => ok = false,
                        }
                    }
                    filters = ok.then_some(out);
                }
                other => {
                    self.err(f.loc, "source.tube.filters", format!("expected an array of filters, found {}", other.type_name()), Some("write `filters = [\"Al:2.5\", \"Cu:0.1\"]` (thickness in mm) or `[{ material = \"Al\", thickness_mm = 2.5 }]`".into()));
                    filters = None;
                }
            }
        }
        if anode_bad {
            return None;
        }
        Some(Tube {
            kvp: kvp?,
            anode,
            anode_angle_deg: anode_angle_deg?,
            filters: filters?,
            ripple_percent: ripple_percent?,
        })
    }

    fn filter(&mut self, n: &Node, path: &str) -> Option<Filter> {
        // The tube model's own limit (`spectrum::FILTER_MAX_MM`), so set-up never refuses what passes here.
        const THICK: Range = Range::pos(crate::spectrum::FILTER_MAX_MM / 10.0, "cm");
        match &n.val {
            Val::Str(s) => {
                // "<material>:<thickness>[unit]", thickness in mm unless a unit is written.
                let Some((m, th)) = s.split_once(':') else {
                    self.err(
                        n.loc,
                        path,
                        format!("filter `{s}` is not of the form `material:thickness_mm`"),
                        Some("write e.g. `\"Al:2.5\"` for 2.5 mm of aluminium".into()),
                    );
                    return None;
                };
                let th = th.trim();
                // Divisors (not factors) keep round values exact: 0.1 mm → 0.01 cm.
                let (num_part, per_cm) = if let Some(v) = th.strip_suffix("mm") {
                    (v, 10.0)
                } else if let Some(v) = th.strip_suffix("um") {
                    (v, 1e4)
                } else if let Some(v) = th.strip_suffix("cm") {
                    (v, 1.0)
                } else {
                    (th, 10.0)
                };
                let Ok(v) = num_part.trim().parse::<f64>() else {
                    self.err(
                        n.loc,
                        path,
                        format!("filter thickness `{th}` is not a number"),
                        Some(
                            "write e.g. `\"Al:2.5\"` (mm), `\"Cu:0.1mm\"` or `\"Al:0.25cm\"`"
                                .into(),
                        ),
                    );
                    return None;
                };
                let cm = v / per_cm;
                if !THICK.contains(cm) {
                    self.err(
                        n.loc,
                        path,
                        format!(
                            "filter thickness out of range: {} cm (valid: {})",
                            fmt_num(cm),
                            THICK.describe()
                        ),
                        None,
                    );
                    return None;
                }
                let mnode = Node {
                    loc: n.loc,
                    key_loc: None,
                    val: Val::Str(m.trim().to_string()),
                };
                let material = self.mat_ref(&mnode, path)?;
                Some(Filter {
                    material,
                    thickness_cm: cm,
                })
            }
            Val::Table(_) => {
                let t = Tbl::new(
                    &mut self.cx,
                    n,
                    path,
                    &["material", "thickness_mm", "thickness_cm"],
                    "a filter",
                )?;
                let material = t
                    .req(&mut self.cx, "material", "add `material = \"Al\"`")
                    .and_then(|m| self.mat_ref(m, &join(path, "material")));
                let cx = &mut self.cx;
                let th = match (t.get("thickness_mm"), t.get("thickness_cm")) {
                    (Some(_), Some(c)) => {
                        cx.err(
                            c.key_or_value(),
                            &t.kp("thickness_cm"),
                            "give the thickness once, in mm or in cm",
                            None,
                        );
                        None
                    }
                    (Some(m), None) => {
                        num_in(cx, m, &t.kp("thickness_mm"), Range::pos(crate::spectrum::FILTER_MAX_MM, "mm"))
                            .map(|v| v / 10.0)
                    }
                    (None, Some(c)) => num_in(cx, c, &t.kp("thickness_cm"), THICK),
                    (None, None) => {
                        cx.err(
                            t.loc(),
                            &t.kp("thickness_mm"),
                            "missing key `thickness_mm`",
                            Some("add `thickness_mm = 2.5` (or `thickness_cm`)".into()),
                        );
                        None
                    }
                };
                Some(Filter {
                    material: material?,
                    thickness_cm: th?,
                })
            }
            other => {
                self.err(
                    n.loc,
                    path,
                    format!(
                        "expected a filter (`\"Al:2.5\"` or a table), found {}",
                        other.type_name()
                    ),
                    None,
                );
                None
            }
        }
    }

    // ---------------------------------------------------------------- [[material]]

    fn materials(&mut self, n: &Node) -> Vec<Material> {
        let Val::Array(items) = &n.val else {
            self.err(
                n.key_or_value(),
                "material",
                format!(
                    "expected `[[material]]` entries, found {}",
                    n.val.type_name()
                ),
                Some("write each material as its own `[[material]]` table".into()),
            );
            return Vec::new();
        };
        // Names first, so references anywhere can be told apart from library names.
        let mut seen: Vec<(String, Loc)> = Vec::new();
        for (i, it) in items.iter().enumerate() {
            if let Some(Node {
                val: Val::Str(name),
                loc,
                ..
            }) = it.get("name")
            {
                if let Some((_, first)) = seen.iter().find(|(s, _)| s == name) {
                    let where_ = self.cx.files.describe(*first);
                    self.err(
                        *loc,
                        &format!("material[{i}].name"),
                        format!("material `{name}` is defined twice (first at {where_})"),
                        Some("give each material its own name".into()),
                    );
                } else {
                    seen.push((name.clone(), *loc));
                }
            }
        }
        self.user_materials = seen.into_iter().map(|(s, _)| s).collect();
        let mut out = Vec::new();
        for (i, it) in items.iter().enumerate() {
            if let Some(m) = self.material(it, &format!("material[{i}]")) {
                out.push(m);
            }
        }
        out
    }

    fn material(&mut self, n: &Node, path: &str) -> Option<Material> {
        let cx = &mut self.cx;
        let t = Tbl::new(
            cx,
            n,
            path,
            &[
                "name",
                "density_g_cm3",
                "formula",
                "mass_fractions",
                "normalise",
            ],
            "a `[[material]]`",
        )?;
        let name = t.str_req(cx, "name", "add `name = \"...\"`");
        if let (Some(nm), Some(nn)) = (&name, t.get("name")) {
            if !is_identifier(nm) {
                cx.err(
                    nn.loc,
                    &t.kp("name"),
                    format!("`{nm}` is not a valid material name"),
                    Some(
                        "start with a letter; use letters, digits, `_` and `-` (at most 64)".into(),
                    ),
                );
            }
        }
        let density = t.num_req(cx, "density_g_cm3", DENSITY, "add `density_g_cm3 = ...`");
        let normalise = t.bool_or(cx, "normalise", false);
        let composition = match (t.get("formula"), t.get("mass_fractions")) {
            (Some(_), Some(m)) => {
                cx.err(
                    m.key_or_value(),
                    &t.kp("mass_fractions"),
                    "give either `formula` or `mass_fractions`, not both",
                    None,
                );
                None
            }
            (None, None) => {
                cx.err(t.loc(), path, "no composition given", Some("add `formula = \"H2O\"` or `mass_fractions = { H = 0.111894, O = 0.888106 }`".into()));
                None
            }
            (Some(f), None) => {
                if let Some(nz) = t.get("normalise") {
                    cx.err(
                        nz.key_or_value(),
                        &t.kp("normalise"),
                        "`normalise` applies to `mass_fractions` only",
                        Some("remove it".into()),
                    );
                }
                let s = string(cx, f, &t.kp("formula"));
                match s.map(|s| (elements::check_formula(&s), s)) {
                    Some((Ok(_), s)) => Some(Composition::Formula(s)),
                    Some((Err(e), s)) => {
                        cx.err(f.loc, &t.kp("formula"), format!("bad formula `{s}`: {e}"), Some("write element symbols with counts, e.g. `H2O`, `CaCO3`, `Ca10(PO4)6(OH)2`".into()));
                        None
                    }
                    None => None,
                }
            }
            (None, Some(m)) => mass_fractions(
                cx,
                m,
                &t.kp("mass_fractions"),
                normalise,
                t.get("normalise"),
            ),
        };
        let name = name?;
        if !is_identifier(&name) {
            return None;
        }
        Some(Material {
            name,
            density_g_cm3: density?,
            composition: composition?,
        })
    }

    // ---------------------------------------------------------------- [geometry]

    fn geometry(&mut self, n: &Node) -> Option<Geometry> {
        let kind_node = n.get("kind");
        let kind = match kind_node {
            Some(k) => choice(&mut self.cx, k, "geometry.kind", &["slabs", "voxels"]),
            None => {
                self.cx.err(
                    n.loc,
                    "geometry.kind",
                    "missing key `kind`",
                    Some("add `kind = \"slabs\"` or `kind = \"voxels\"`".into()),
                );
                None
            }
        }?;
        if kind == "slabs" {
            self.slabs(n)
        } else {
            self.voxels(n)
        }
    }

    fn world(&mut self, t: &Tbl) -> Option<World> {
        match t.get("world") {
            None => Some(World::Vacuum),
            Some(w) => match choice(&mut self.cx, w, "geometry.world", &["vacuum", "air"])? {
                "air" => Some(World::Air),
                _ => Some(World::Vacuum),
            },
        }
    }

    fn slabs(&mut self, n: &Node) -> Option<Geometry> {
        let t = Tbl::new(
            &mut self.cx,
            n,
            "geometry",
            &["kind", "world", "start_z_cm", "lateral_size_cm", "layer"],
            "slab `[geometry]`",
        )?;
        let world = self.world(&t);
        let cx = &mut self.cx;
        let start = t
            .get("start_z_cm")
            .map(|s| num_in(cx, s, "geometry.start_z_cm", LEN))
            .unwrap_or(Some(0.0));
        let lateral = match t.get("lateral_size_cm") {
            None => Some(None),
            Some(l) => {
                vec_n::<2>(cx, l, "geometry.lateral_size_cm", Range::pos(1e5, "cm")).map(Some)
            }
        };
        let layers_node = t.req(
            cx,
            "layer",
            "add at least one `[[geometry.layer]]` with `material` and `thickness_cm`",
        );
        let mut layers = None;
        if let Some(ln) = layers_node {
            match &ln.val {
                Val::Array(items) if !items.is_empty() => {
                    if items.len() > 10_000 {
                        self.err(
                            ln.key_or_value(),
                            "geometry.layer",
                            format!("{} layers is more than the limit of 10000", items.len()),
                            None,
                        );
                    }
                    let mut out = Vec::new();
                    let mut ok = true;
                    for (i, it) in items.iter().enumerate() {
                        match self.layer(it, &format!("geometry.layer[{i}]")) {
                            Some(l) => out.push(l),
                            None => ok = false,
                        }
                    }
                    layers = ok.then_some(out);
                }
                Val::Array(_) => self.err(
                    ln.key_or_value(),
                    "geometry.layer",
                    "no layers",
                    Some("add at least one `[[geometry.layer]]`".into()),
                ),
                other => self.err(
                    ln.key_or_value(),
                    "geometry.layer",
                    format!(
                        "expected `[[geometry.layer]]` tables, found {}",
                        other.type_name()
                    ),
                    None,
                ),
            }
        }
        Some(Geometry::Slabs(Slabs {
            world: world?,
            start_z_cm: start?,
            lateral_size_cm: lateral?,
            layers: layers?,
        }))
    }

    fn layer(&mut self, n: &Node, path: &str) -> Option<Layer> {
        let t = Tbl::new(
            &mut self.cx,
            n,
            path,
            &["name", "material", "thickness_cm", "density_g_cm3"],
            "a `[[geometry.layer]]`",
        )?;
        let material = t
            .req(&mut self.cx, "material", "add `material = \"water\"`")
            .and_then(|m| self.mat_ref(m, &t.kp("material")));
        let cx = &mut self.cx;
        let thickness = t.num_req(
            cx,
            "thickness_cm",
            Range::pos(1e5, "cm"),
            "add `thickness_cm = ...`",
        );
        let density = t.num_opt(cx, "density_g_cm3", DENSITY);
        let density_bad = t.get("density_g_cm3").is_some() && density.is_none();
        let name = t.str_opt(cx, "name");
        if density_bad || (t.get("name").is_some() && name.is_none()) {
            return None;
        }
        Some(Layer {
            name,
            material: material?,
            thickness_cm: thickness?,
            density_g_cm3: density,
        })
    }

    /// `voxels`, `voxel_size_cm`, `origin_cm` (default: centred in x and y, starting at z = 0).
    fn grid(&mut self, t: &Tbl, what: &str) -> Option<Grid> {
        let cx = &mut self.cx;
        let voxels = t
            .req(cx, "voxels", "add `voxels = [nx, ny, nz]`")
            .and_then(|v| uvec_n::<3>(cx, v, &t.kp("voxels"), 1, u32::MAX as u64));
        let size = t
            .req(
                cx,
                "voxel_size_cm",
                "add `voxel_size_cm = 0.2` or `[dx, dy, dz]`",
            )
            .and_then(|v| scalar_or_vec::<3>(cx, v, &t.kp("voxel_size_cm"), Range::pos(1e3, "cm")));
        let voxels = voxels?;
        if !self.check_voxel_count(t.get("voxels")?.loc, &t.kp("voxels"), &voxels, what) {
            return None;
        }
        let size = size?;
        let origin = match t.get("origin_cm") {
            None => Some([
                -(voxels[0] as f64) * size[0] / 2.0,
                -(voxels[1] as f64) * size[1] / 2.0,
                0.0,
            ]),
            Some(o) => vec_n::<3>(&mut self.cx, o, &t.kp("origin_cm"), LEN),
        };
        Some(Grid {
            voxels,
            voxel_size_cm: size,
            origin_cm: origin?,
        })
    }

    fn voxels(&mut self, n: &Node) -> Option<Geometry> {
        let has_file = n.get("file").is_some();
        let is_h5 =
            matches!(n.get("file"), Some(Node { val: Val::Str(s), .. }) if s.ends_with(".h5"));
        let allowed: &[&str] = if is_h5 {
            &["kind", "world", "file"]
        } else if has_file {
            &[
                "kind",
                "world",
                "file",
                "voxels",
                "voxel_size_cm",
                "origin_cm",
                "bytes_per_voxel",
                "labels",
            ]
        } else {
            &[
                "kind",
                "world",
                "voxels",
                "voxel_size_cm",
                "origin_cm",
                "phantom",
                "file",
            ]
        };
        let what = if is_h5 {
            "an HDF5 voxel `[geometry]` (the file carries its grid)"
        } else if has_file {
            "a raw voxel `[geometry]`"
        } else {
            "a phantom voxel `[geometry]`"
        };
        let t = Tbl::new(&mut self.cx, n, "geometry", allowed, what)?;
        let world = self.world(&t);
        let content = match (t.get("file"), t.get("phantom")) {
            (Some(_), Some(p)) => {
                self.err(
                    p.key_or_value(),
                    "geometry.phantom",
                    "give either `file` or `[geometry.phantom]`, not both",
                    None,
                );
                None
            }
            (None, None) => {
                self.err(
                    t.loc(),
                    "geometry",
                    "a voxel geometry needs `file = \"...\"` or a `[geometry.phantom]`",
                    None,
                );
                None
            }
            (Some(f), None) => {
                let path = self.path_value(f, "geometry.file");
                match path {
                    Some(p) if is_h5 => {
                        if !p.is_file() {
                            self.err(f.loc, "geometry.file", format!("voxel file `{}` does not exist", p.display()), Some("relative paths are taken from the folder of the deck that names the file".into()));
                            None
                        } else {
                            Some(VoxelContent::Hdf5 { path: p })
                        }
                    }
                    Some(p) if p.extension().and_then(|e| e.to_str()) == Some("raw") => {
                        self.raw(&t, f, p)
                    }
                    Some(_) => {
                        self.err(f.loc, "geometry.file", "voxel files are `.h5` (grid inside) or `.raw` (grid given in the deck)", None);
                        None
                    }
                    None => None,
                }
            }
            (None, Some(p)) => self.phantom(&t, p),
        };
        Some(Geometry::Voxels(Voxels {
            world: world?,
            content: content?,
        }))
    }

    fn raw(&mut self, t: &Tbl, f: &Node, path: PathBuf) -> Option<VoxelContent> {
        let grid = self.grid(t, "voxel grid");
        let cx = &mut self.cx;
        let bpv = match t.get("bytes_per_voxel") {
            None => Some(1u8),
            Some(b) => uint_in(cx, b, "geometry.bytes_per_voxel", 1, 2).map(|v| v as u8),
        };
        let mut labels = None;
        if let Some(l) = t.req(cx, "labels", "add `labels = { \"0\" = \"air\", \"1\" = \"water\" }` mapping each label to a material") {
            if let Val::Table(entries) = &l.val {
                let mut out = Vec::new();
                let mut ok = true;
                for (k, v) in entries {
                    let kp = format!("geometry.labels.{k}");
                    let max = if bpv == Some(2) { 65535 } else { 255 };
                    match k.parse::<u32>() {
                        Ok(lab) if lab <= max => match self.mat_ref(v, &kp) {
                            Some(m) => out.push((lab, m)),
                            None => ok = false,
                        },
                        _ => {
                            self.err(v.key_or_value(), &kp, format!("label `{k}` is not a whole number 0–{max}"), None);
                            ok = false;
                        }
                    }
                }
                out.sort_by_key(|(l, _)| *l);
                if out.is_empty() && ok {
                    self.err(l.key_or_value(), "geometry.labels", "no labels", Some("map each label in the file to a material".into()));
                    ok = false;
                }
                labels = ok.then_some(out);
            } else {
                self.err(l.key_or_value(), "geometry.labels", format!("expected a table of label = material, found {}", l.val.type_name()), None);
            }
        }
        let (grid, bpv) = (grid?, bpv?);
        match std::fs::metadata(&path) {
            Err(e) => {
                self.err(
                    f.loc,
                    "geometry.file",
                    format!("cannot read voxel file `{}`: {e}", path.display()),
                    Some(
                        "relative paths are taken from the folder of the deck that names the file"
                            .into(),
                    ),
                );
                return None;
            }
            Ok(m) => {
                let want = grid.voxel_count() * bpv as u64;
                if m.len() != want {
                    self.err(
                        f.loc,
                        "geometry.file",
                        format!("voxel file has {} bytes but the grid {}×{}×{} at {bpv} byte(s) per voxel needs {want}", m.len(), grid.voxels[0], grid.voxels[1], grid.voxels[2]),
                        Some("check `voxels` and `bytes_per_voxel`".into()),
                    );
                    return None;
                }
            }
        }
        Some(VoxelContent::Raw {
            path,
            grid,
            bytes_per_voxel: bpv,
            labels: labels?,
        })
    }

    fn phantom(&mut self, t: &Tbl, p: &Node) -> Option<VoxelContent> {
        let grid = self.grid(t, "phantom grid");
        let pt = Tbl::new(
            &mut self.cx,
            p,
            "geometry.phantom",
            &["fill", "shape"],
            "`[geometry.phantom]`",
        )?;
        let fill = match pt.get("fill") {
            Some(f) => self.mat_ref(f, "geometry.phantom.fill"),
            None => {
                let n = Node {
                    loc: p.loc,
                    key_loc: None,
                    val: Val::Str("air".into()),
                };
                self.mat_ref(&n, "geometry.phantom.fill")
            }
        };
        let mut shapes = Some(Vec::new());
        if let Some(s) = pt.get("shape") {
            match &s.val {
                Val::Array(items) => {
                    let mut out = Vec::new();
                    let mut ok = true;
                    for (i, it) in items.iter().enumerate() {
                        match self.shape(it, &format!("geometry.phantom.shape[{i}]")) {
                            Some(x) => out.push(x),
                            None => ok = false,
                        }
                    }
                    shapes = ok.then_some(out);
                }
                other => {
                    self.err(
                        s.key_or_value(),
                        "geometry.phantom.shape",
                        format!(
                            "expected `[[geometry.phantom.shape]]` tables, found {}",
                            other.type_name()
                        ),
                        None,
                    );
                    shapes = None;
                }
            }
        }
        Some(VoxelContent::Phantom {
            grid: grid?,
            fill: fill?,
            shapes: shapes?,
        })
    }

    fn shape(&mut self, n: &Node, path: &str) -> Option<Shape> {
        let kind = match n.get("kind") {
            Some(k) => choice(
                &mut self.cx,
                k,
                &join(path, "kind"),
                &["box", "sphere", "ellipsoid", "cylinder"],
            ),
            None => {
                self.err(
                    n.loc,
                    &join(path, "kind"),
                    "missing key `kind`",
                    Some("add `kind = \"box\"` (or sphere, ellipsoid, cylinder)".into()),
                );
                None
            }
        }?;
        let common = ["kind", "center_cm", "material", "density_g_cm3", "region"];
        let extra: &[&'static str] = match kind {
            "box" | "ellipsoid" => &["half_size_cm"],
            "sphere" => &["radius_cm"],
            _ => &["radius_cm", "length_cm", "axis"],
        };
        let allowed: Vec<&'static str> = common.iter().chain(extra).copied().collect();
        let t = Tbl::new(
            &mut self.cx,
            n,
            path,
            &allowed,
            &format!("a `{kind}` shape"),
        )?;
        let material = t
            .req(&mut self.cx, "material", "add `material = \"water\"`")
            .and_then(|m| self.mat_ref(m, &t.kp("material")));
        let cx = &mut self.cx;
        let center = t.vec3_req(cx, "center_cm", LEN, "add `center_cm = [x, y, z]`");
        let density = t.num_opt(cx, "density_g_cm3", DENSITY);
        let region = t.str_opt(cx, "region");
        let pos = Range::pos(1e5, "cm");
        let form = match kind {
            "box" => t
                .vec3_req(cx, "half_size_cm", pos, "add `half_size_cm = [hx, hy, hz]`")
                .map(|h| ShapeForm::Box { half_size_cm: h }),
            "ellipsoid" => t
                .vec3_req(
                    cx,
                    "half_size_cm",
                    pos,
                    "add the semi-axes `half_size_cm = [a, b, c]`",
                )
                .map(|h| ShapeForm::Ellipsoid { half_size_cm: h }),
            "sphere" => t
                .num_req(cx, "radius_cm", pos, "add `radius_cm = ...`")
                .map(|r| ShapeForm::Sphere { radius_cm: r }),
            _ => {
                let r = t.num_req(cx, "radius_cm", pos, "add `radius_cm = ...`");
                let l = t.num_req(cx, "length_cm", pos, "add `length_cm = ...` (full length)");
                let axis = axis_or(cx, &t, "axis");
                match (r, l, axis) {
                    (Some(radius_cm), Some(length_cm), Some(axis)) => Some(ShapeForm::Cylinder {
                        radius_cm,
                        length_cm,
                        axis,
                    }),
                    _ => None,
                }
            }
        };
        if (t.get("density_g_cm3").is_some() && density.is_none())
            || (t.get("region").is_some() && region.is_none())
        {
            return None;
        }
        Some(Shape {
            form: form?,
            center_cm: center?,
            material: material?,
            density_g_cm3: density,
            region,
        })
    }

    // ---------------------------------------------------------------- [[score]]

    fn scores(&mut self, n: &Node, geometry: Option<&Geometry>) -> Option<Vec<Score>> {
        let Val::Array(items) = &n.val else {
            self.err(
                n.key_or_value(),
                "score",
                format!("expected `[[score]]` entries, found {}", n.val.type_name()),
                Some("write each score as its own `[[score]]` table".into()),
            );
            return None;
        };
        if items.is_empty() {
            self.err(
                n.key_or_value(),
                "score",
                "no scores",
                Some("add at least one `[[score]]`".into()),
            );
            return None;
        }
        let mut out = Vec::new();
        let mut ok = true;
        let mut names: Vec<(String, Loc)> = Vec::new();
        for (i, it) in items.iter().enumerate() {
            let path = format!("score[{i}]");
            match self.score(it, &path, geometry) {
                Some(s) => {
                    if let Some((_, first)) = names.iter().find(|(nm, _)| *nm == s.name) {
                        let where_ = self.cx.files.describe(*first);
                        let loc = it.get("name").map(|x| x.loc).unwrap_or(it.loc);
                        self.err(
                            loc,
                            &format!("{path}.name"),
                            format!("score name `{}` is already used (at {where_})", s.name),
                            Some("give each score a unique name".into()),
                        );
                        ok = false;
                    } else {
                        names.push((
                            s.name.clone(),
                            it.get("name").map(|x| x.loc).unwrap_or(it.loc),
                        ));
                    }
                    out.push(s);
                }
                None => ok = false,
            }
        }
        ok.then_some(out)
    }

    fn score(&mut self, n: &Node, path: &str, geometry: Option<&Geometry>) -> Option<Score> {
        const KINDS: &[&str] = &[
            "layer_energy",
            "depth_dose",
            "escape",
            "interaction_counts",
            "transmitted_spectrum",
            "air_kerma",
            "voxel_dose",
            "detector",
        ];
        let kind = match n.get("kind") {
            Some(k) => choice(&mut self.cx, k, &join(path, "kind"), KINDS),
            None => {
                self.err(
                    n.loc,
                    &join(path, "kind"),
                    "missing key `kind`",
                    Some(format!("add `kind = \"...\"`, one of {}", KINDS.join(", "))),
                );
                None
            }
        };
        let extra: &[&'static str] = match kind {
            Some("depth_dose") => &["z_min_cm", "z_max_cm", "bin_width_cm"],
            Some("transmitted_spectrum") => &["energy_min_kev", "energy_max_kev", "bin_width_kev"],
            Some("air_kerma") => &["position_cm", "normal_axis", "radius_cm"],
            Some("voxel_dose") => &["estimator", "grid"],
            Some("detector") => &[
                "position_cm",
                "normal_axis",
                "size_cm",
                "pixel_pitch_cm",
                "response",
                "layer",
                "anti_scatter_grid",
                "forced_detection",
                "roi_size_cm",
                "forced_detection_face_points",
                "forced_detection_from",
                "forced_detection_roulette_below",
                "forced_detection_coherent_directions",
                "forced_detection_steer",
                "primary_subpixels",
                "primary_focal_points",
            ],
            _ => &[],
        };
        // With no valid kind the other keys cannot be checked; report the kind only.
        let kind = Some(kind?);
        let allowed: Vec<&'static str> = ["name", "kind"].iter().chain(extra).copied().collect();
        let what = match kind {
            Some(k) => format!("a `{k}` score"),
            None => "a score".into(),
        };
        let t = Tbl::new(&mut self.cx, n, path, &allowed, &what)?;
        let cx = &mut self.cx;
        let name = t.str_req(cx, "name", "add a unique `name = \"...\"`");
        if let (Some(nm), Some(nn)) = (&name, t.get("name")) {
            if !is_identifier(nm) {
                cx.err(
                    nn.loc,
                    &t.kp("name"),
                    format!("`{nm}` is not a valid score name"),
                    Some(
                        "start with a letter; use letters, digits, `_` and `-` (at most 64)".into(),
                    ),
                );
                return None;
            }
        }
        let k = match kind? {
            "layer_energy" => {
                if matches!(geometry, Some(Geometry::Voxels(_))) {
                    cx.err(
                        n.get("kind")?.loc,
                        &t.kp("kind"),
                        "`layer_energy` needs slab geometry",
                        Some("use `voxel_dose` (or `depth_dose`) with voxels".into()),
                    );
                    return None;
                }
                Some(ScoreKind::LayerEnergy)
            }
            "escape" => Some(ScoreKind::Escape),
            "interaction_counts" => Some(ScoreKind::InteractionCounts),
            "depth_dose" => {
                let lo = t.num_req(cx, "z_min_cm", LEN, "add `z_min_cm = ...`");
                let hi = t.num_req(cx, "z_max_cm", LEN, "add `z_max_cm = ...`");
                let w = t.num_req(
                    cx,
                    "bin_width_cm",
                    Range::pos(1e5, "cm"),
                    "add `bin_width_cm = ...`",
                );
                let (lo, hi, w) = (lo?, hi?, w?);
                bins(cx, &t, "z_max_cm", lo, hi, w, "cm", "z_min_cm")?;
                Some(ScoreKind::DepthDose {
                    z_min_cm: lo,
                    z_max_cm: hi,
                    bin_width_cm: w,
                })
            }
            "transmitted_spectrum" => {
                let lo = t
                    .get("energy_min_kev")
                    .map(|x| {
                        num_in(
                            cx,
                            x,
                            &t.kp("energy_min_kev"),
                            Range {
                                lo: 0.0,
                                hi: 800.0,
                                lo_open: false,
                                hi_open: true,
                                unit: "keV",
                            },
                        )
                    })
                    .unwrap_or(Some(0.0));
                let hi = t.num_req(
                    cx,
                    "energy_max_kev",
                    Range::pos(800.0, "keV"),
                    "add `energy_max_kev = ...` (at most 800)",
                );
                let w = t.num_req(
                    cx,
                    "bin_width_kev",
                    Range::pos(800.0, "keV"),
                    "add `bin_width_kev = 1`",
                );
                let (lo, hi, w) = (lo?, hi?, w?);
                bins(cx, &t, "energy_max_kev", lo, hi, w, "keV", "energy_min_kev")?;
                Some(ScoreKind::TransmittedSpectrum {
                    energy_min_kev: lo,
                    energy_max_kev: hi,
                    bin_width_kev: w,
                })
            }
            "air_kerma" => {
                let p = t.vec3_req(
                    cx,
                    "position_cm",
                    LEN,
                    "add `position_cm = [x, y, z]`, the point where air kerma is scored",
                );
                let a = axis_or(cx, &t, "normal_axis");
                let r = t.num_req(
                    cx,
                    "radius_cm",
                    Range::pos(10.0, "cm"),
                    "add `radius_cm = 0.5`, the radius of the small scoring disc",
                );
                Some(ScoreKind::AirKerma {
                    position_cm: p?,
                    normal_axis: a?,
                    radius_cm: r?,
                })
            }
            "voxel_dose" => {
                if matches!(geometry, Some(Geometry::Slabs(_))) {
                    let at = t.get("kind").map_or(t.loc(), |k| k.loc);
                    self.cx.err(
                        at,
                        &t.kp("kind"),
                        "a `voxel_dose` score needs voxel geometry; this deck's geometry is slabs",
                        Some("in slabs score `kind = \"depth_dose\"`; for a dose grid, build the layers as boxes of a `[geometry] kind = \"voxels\"` phantom".into()),
                    );
                    return None;
                }
                let est =
                    match t.choice_or(cx, "estimator", &["analog", "track_length"], "track_length")
                    {
                        "analog" => Estimator::Analog,
                        _ => Estimator::TrackLength,
                    };
                let est_bad = t.get("estimator").is_some_and(
                    |e| !matches!(&e.val, Val::Str(s) if s == "analog" || s == "track_length"),
                );
                let grid = match t.get("grid") {
                    Some(g) => {
                        let gp = t.kp("grid");
                        let gt = Tbl::new(
                            cx,
                            g,
                            &gp,
                            &["voxels", "voxel_size_cm", "origin_cm"],
                            "a scoring grid",
                        )?;
                        Some(self.grid(&gt, "scoring grid")?)
                    }
                    None => None,
                };
                if est_bad {
                    return None;
                }
                Some(ScoreKind::VoxelDose {
                    estimator: est,
                    grid,
                })
            }
            _ => self.detector(&t).map(ScoreKind::Detector),
        };
        Some(Score {
            name: name?,
            kind: k?,
        })
    }

    fn detector(&mut self, t: &Tbl) -> Option<Detector> {
        let cx = &mut self.cx;
        let position = t.vec3_req(
            cx,
            "position_cm",
            LEN,
            "add `position_cm = [x, y, z]`, the centre of the detector face",
        );
        let axis = axis_or(cx, t, "normal_axis");
        let size = t
            .req(cx, "size_cm", "add `size_cm = [width, height]`")
            .and_then(|s| vec_n::<2>(cx, s, &t.kp("size_cm"), Range::pos(1e3, "cm")));
        let pitch = t
            .req(
                cx,
                "pixel_pitch_cm",
                "add `pixel_pitch_cm = 0.1` or `[pu, pv]`",
            )
            .and_then(|s| {
                scalar_or_vec::<2>(cx, s, &t.kp("pixel_pitch_cm"), Range::pos(100.0, "cm"))
            });
        let resp = t.choice_or(
            cx,
            "response",
            &["energy_fluence", "photon_fluence", "absorbed"],
            "energy_fluence",
        );
        let resp_bad = t.get("response").is_some_and(|e| !matches!(&e.val, Val::Str(s) if ["energy_fluence", "photon_fluence", "absorbed"].contains(&s.as_str())));
        let forced = t.bool_or(cx, "forced_detection", false);
        let roi = match t.get("roi_size_cm") {
            None => Some(None),
            Some(n) => match scalar_or_vec::<2>(cx, n, &t.kp("roi_size_cm"), Range::pos(1e3, "cm")) {
                Some(r) => match size {
                    Some(s) if r[0] > s[0] * (1.0 + 1e-9) || r[1] > s[1] * (1.0 + 1e-9) => {
                        cx.err(
                            n.loc,
                            &t.kp("roi_size_cm"),
                            format!("the region of interest {} × {} cm is larger than the face {} × {} cm", fmt_num(r[0]), fmt_num(r[1]), fmt_num(s[0]), fmt_num(s[1])),
                            Some(format!("use `roi_size_cm = [{}, {}]` or smaller", fmt_num(r[0].min(s[0])), fmt_num(r[1].min(s[1])))),
                        );
                        None
                    }
                    _ => Some(Some(r)),
                },
                None => None,
            },
        };
        let face_points = match t.get("forced_detection_face_points") {
            Some(n) => uint_in(cx, n, &t.kp("forced_detection_face_points"), 1, 64),
            None => Some(1),
        };
        let fd_from = match t.choice_or(cx, "forced_detection_from", &["flights", "collisions"], "flights") {
            "collisions" => ForcedDetectionFrom::Collisions,
            _ => ForcedDetectionFrom::Flights,
        };
        let roulette_below = match t.get("forced_detection_roulette_below") {
            Some(_) => t.num_opt(cx, "forced_detection_roulette_below", Range::closed(0.0, 1.0, "")),
            None => Some(DEFAULT_FD_ROULETTE_BELOW),
        };
        let coherent_directions = t.bool_or(cx, "forced_detection_coherent_directions", true);
        let steer = match t.get("forced_detection_steer") {
            Some(n) => match t.num_opt(cx, "forced_detection_steer", Range::closed(0.0, MAX_FD_STEER, "")) {
                Some(s) if s > 0.0 && !forced => {
                    cx.err(
                        n.loc,
                        &t.kp("forced_detection_steer"),
                        "steering Compton directions toward the face needs forced detection (analog crossings would not gain from it)".to_string(),
                        Some("add `forced_detection = true`, or remove `forced_detection_steer`".to_string()),
                    );
                    None
                }
                Some(s) => {
                    if s > 0.0 {
                        self.steer_locs.push((n.loc, t.kp("forced_detection_steer")));
                    }
                    Some(s)
                }
                None => None,
            },
            None => Some(0.0),
        };
        let primary_subpixels = match t.get("primary_subpixels") {
            Some(n) => uint_in(cx, n, &t.kp("primary_subpixels"), 1, 32),
            None => Some(DEFAULT_PRIMARY_SUBPIXELS as u64),
        };
        let primary_focal_points = match t.get("primary_focal_points") {
            Some(n) => uint_in(cx, n, &t.kp("primary_focal_points"), 1, 16),
            None => Some(DEFAULT_PRIMARY_FOCAL_POINTS as u64),
        };
        let mut pixels = None;
        if let (Some(s), Some(p)) = (size, pitch) {
            let n0 = (s[0] / p[0]).round();
            let n1 = (s[1] / p[1]).round();
            let total = n0 * n1;
            let pn = t.get("pixel_pitch_cm")?;
            if total > MAX_DETECTOR_PIXELS as f64 {
                cx.err(
                    pn.loc,
                    &t.kp("pixel_pitch_cm"),
                    format!(
                        "detector of {} × {} = {:e} pixels is too large: about {} of memory at {} bytes per pixel (limit {:e} pixels, 8192 × 8192)",
                        n0,
                        n1,
                        total,
                        human_bytes(total * BYTES_PER_PIXEL_ESTIMATE as f64),
                        BYTES_PER_PIXEL_ESTIMATE,
                        MAX_DETECTOR_PIXELS as f64
                    ),
                    Some("use a larger pixel pitch or a smaller detector".into()),
                );
            } else if n0 < 1.0
                || n1 < 1.0
                || ((n0 * p[0] - s[0]).abs() > 1e-6 * s[0])
                || ((n1 * p[1] - s[1]).abs() > 1e-6 * s[1])
            {
                let fix = [n0.max(1.0) * p[0], n1.max(1.0) * p[1]];
                cx.err(
                    pn.loc,
                    &t.kp("pixel_pitch_cm"),
                    format!(
                        "the detector size {} × {} cm is not a whole number of {} × {} cm pixels",
                        fmt_num(s[0]),
                        fmt_num(s[1]),
                        fmt_num(p[0]),
                        fmt_num(p[1])
                    ),
                    Some(format!(
                        "use `size_cm = [{}, {}]`",
                        fmt_num(fix[0]),
                        fmt_num(fix[1])
                    )),
                );
            } else {
                pixels = Some([n0 as u64, n1 as u64]);
            }
        }
        let response = match resp {
            "absorbed" => match t.get("layer") {
                None => {
                    cx.err(
                        t.loc(),
                        &t.kp("layer"),
                        "an `absorbed` response needs the sensitive layer",
                        Some("add `layer = { material = \"...\", thickness_cm = 0.05 }`".into()),
                    );
                    None
                }
                Some(l) => {
                    let lp = t.kp("layer");
                    let lt = Tbl::new(
                        cx,
                        l,
                        &lp,
                        &["material", "thickness_cm"],
                        "a detector layer",
                    )?;
                    let m = lt
                        .req(&mut self.cx, "material", "add `material = \"...\"`")
                        .and_then(|m| self.mat_ref(m, &lt.kp("material")));
                    let th = lt.num_req(
                        &mut self.cx,
                        "thickness_cm",
                        Range::pos(100.0, "cm"),
                        "add `thickness_cm = ...`",
                    );
                    Some(Response::Absorbed {
                        material: m?,
                        thickness_cm: th?,
                    })
                }
            },
            other => {
                if let Some(l) = t.get("layer") {
                    cx.err(
                        l.key_or_value(),
                        &t.kp("layer"),
                        format!("a `{other}` response has no sensitive layer"),
                        Some("remove `layer`, or set `response = \"absorbed\"`".into()),
                    );
                    None
                } else if other == "photon_fluence" {
                    Some(Response::PhotonFluence)
                } else {
                    Some(Response::EnergyFluence)
                }
            }
        };
        let grid = match t.get("anti_scatter_grid") {
            None => Some(None),
            Some(g) => self
                .anti_scatter_grid(g, &t.kp("anti_scatter_grid"))
                .map(Some),
        };
        if resp_bad {
            return None;
        }
        Some(Detector {
            position_cm: position?,
            normal_axis: axis?,
            size_cm: size?,
            pixel_pitch_cm: pitch?,
            pixels: pixels?,
            response: response?,
            anti_scatter_grid: grid?,
            roi_size_cm: roi?,
            forced_detection: forced,
            forced_detection_face_points: face_points? as usize,
            forced_detection_from: fd_from,
            forced_detection_roulette_below: roulette_below?,
            forced_detection_coherent_directions: coherent_directions,
            forced_detection_steer: steer?,
            primary_subpixels: primary_subpixels? as usize,
            primary_focal_points: primary_focal_points? as usize,
        })
    }

    fn anti_scatter_grid(&mut self, n: &Node, path: &str) -> Option<AntiScatterGrid> {
        let t = Tbl::new(
            &mut self.cx,
            n,
            path,
            &[
                "ratio",
                "strips_per_cm",
                "strip_width_cm",
                "strip_material",
                "interspace_material",
                "focus_distance_cm",
            ],
            "an anti-scatter grid",
        )?;
        let cx = &mut self.cx;
        let ratio = t.num_req(
            cx,
            "ratio",
            Range::closed(1.0, 50.0, ""),
            "add the grid ratio, e.g. `ratio = 10`",
        );
        let freq = t.num_req(
            cx,
            "strips_per_cm",
            Range::pos(200.0, "1/cm"),
            "add `strips_per_cm = 40`",
        );
        let width = t.num_req(
            cx,
            "strip_width_cm",
            Range::pos(1.0, "cm"),
            "add `strip_width_cm = 0.005`",
        );
        let focus = t.num_opt(cx, "focus_distance_cm", Range::pos(1e5, "cm"));
        let focus_bad = t.get("focus_distance_cm").is_some() && focus.is_none();
        if let (Some(f), Some(w)) = (freq, width) {
            if w >= 1.0 / f {
                cx.err(
                    t.get("strip_width_cm")?.loc,
                    &t.kp("strip_width_cm"),
                    format!(
                        "strips {} cm wide do not fit {} per cm (period {} cm)",
                        fmt_num(w),
                        fmt_num(f),
                        fmt_num(1.0 / f)
                    ),
                    None,
                );
                return None;
            }
        }
        let sm = match t.get("strip_material") {
            Some(m) => self.mat_ref(m, &t.kp("strip_material")),
            None => Some(MaterialRef {
                name: "Pb".into(),
                user_defined: self.user_materials.iter().any(|m| m == "Pb"),
            }),
        };
        let im = match t.get("interspace_material") {
            Some(m) => self.mat_ref(m, &t.kp("interspace_material")),
            None => Some(MaterialRef {
                name: "Al".into(),
                user_defined: self.user_materials.iter().any(|m| m == "Al"),
            }),
        };
        if focus_bad {
            return None;
        }
        Some(AntiScatterGrid {
            ratio: ratio?,
            strips_per_cm: freq?,
            strip_width_cm: width?,
            strip_material: sm?,
            interspace_material: im?,
            focus_distance_cm: focus,
        })
    }
}

fn axis_or(cx: &mut Cx, t: &Tbl, key: &str) -> Option<Axis> {
    match t.get(key) {
        None => Some(Axis::Z),
        Some(a) => match choice(cx, a, &t.kp(key), &["x", "y", "z"])? {
            "x" => Some(Axis::X),
            "y" => Some(Axis::Y),
            _ => Some(Axis::Z),
        },
    }
}

/// Check that `lo..hi` is a whole number of `w`-wide bins, and not too many.
#[allow(clippy::too_many_arguments)]
fn bins(
    cx: &mut Cx,
    t: &Tbl,
    hi_key: &str,
    lo: f64,
    hi: f64,
    w: f64,
    unit: &str,
    lo_key: &str,
) -> Option<u64> {
    let hn = t.get(hi_key)?;
    if hi <= lo {
        cx.err(
            hn.loc,
            &t.kp(hi_key),
            format!(
                "`{hi_key}` ({}) must be greater than `{lo_key}` ({})",
                fmt_num(hi),
                fmt_num(lo)
            ),
            None,
        );
        return None;
    }
    let n = (hi - lo) / w;
    if n > MAX_BINS as f64 {
        let wk = if unit == "cm" {
            "bin_width_cm"
        } else {
            "bin_width_kev"
        };
        cx.err(
            t.get(wk).unwrap_or(hn).loc,
            &t.kp(wk),
            format!(
                "{:e} bins is more than the limit of {:e}",
                n.round(),
                MAX_BINS as f64
            ),
            Some("use wider bins".into()),
        );
        return None;
    }
    let r = n.round();
    if r < 1.0 || (r - n).abs() > 1e-6 * n.max(1.0) {
        let fix = lo + r.max(1.0) * w;
        cx.err(
            hn.loc,
            &t.kp(hi_key),
            format!(
                "the range {}–{} {unit} is not a whole number of {} {unit} bins ({} bins)",
                fmt_num(lo),
                fmt_num(hi),
                fmt_num(w),
                fmt_num(n)
            ),
            Some(format!("use `{hi_key} = {}`", fmt_num(fix))),
        );
        return None;
    }
    Some(r as u64)
}

fn mass_fractions(
    cx: &mut Cx,
    m: &Node,
    path: &str,
    normalise: bool,
    normalise_node: Option<&Node>,
) -> Option<Composition> {
    let Val::Table(entries) = &m.val else {
        cx.err(
            m.loc,
            path,
            format!(
                "expected a table of element = mass fraction, found {}",
                m.val.type_name()
            ),
            Some("write `mass_fractions = { H = 0.111894, O = 0.888106 }`".into()),
        );
        return None;
    };
    if entries.is_empty() {
        cx.err(m.loc, path, "no elements", None);
        return None;
    }
    let mut out = Vec::new();
    let mut ok = true;
    for (k, v) in entries {
        let kp = join(path, k);
        let z = elements::z_of(k);
        if z.is_none() {
            let fixed = {
                let mut c = k.chars();
                c.next()
                    .map(|f| f.to_ascii_uppercase().to_string() + &c.as_str().to_ascii_lowercase())
                    .unwrap_or_default()
            };
            let hint = if elements::z_of(&fixed).is_some() {
                Some(format!("did you mean `{fixed}`?"))
            } else {
                nearest(k, &elements::SYMBOLS).map(|s| format!("did you mean `{s}`?"))
            };
            cx.err(
                v.key_or_value(),
                &kp,
                format!("`{k}` is not an element symbol (Z = 1–98)"),
                hint,
            );
            ok = false;
        }
        // With `normalise = true` the values are relative weights of any size.
        let r = if normalise {
            Range::pos(f64::MAX, "")
        } else {
            Range::pos(1.0, "")
        };
        match num_in(cx, v, &kp, r) {
            Some(w) if ok => out.push(ElementFraction {
                symbol: k.clone(),
                z: z.unwrap_or(0),
                mass_fraction: w,
            }),
            _ => ok = false,
        }
    }
    if !ok {
        return None;
    }
    let sum: f64 = out.iter().map(|e| e.mass_fraction).sum();
    if (sum - 1.0).abs() > 1e-6 {
        if normalise {
            for e in &mut out {
                e.mass_fraction /= sum;
            }
        } else {
            cx.err(
                m.loc,
                path,
                format!("mass fractions sum to {sum:.7}, not 1 (within 1e-6)"),
                Some("fix the fractions, or add `normalise = true` to scale them to 1".into()),
            );
            return None;
        }
    }
    let _ = normalise_node;
    Some(Composition::MassFractions(out))
}

/// A field table: `{ shape = "rectangle", width_cm, height_cm }` or `{ shape = "circle", radius_cm }`.
fn field_of(cx: &mut Cx, n: &Node, path: &str) -> Option<Field> {
    let shape = match n.get("shape") {
        Some(s) => choice(cx, s, &join(path, "shape"), &["rectangle", "circle"]),
        None => {
            cx.err(
                n.loc,
                &join(path, "shape"),
                "missing key `shape`",
                Some("add `shape = \"rectangle\"` or `shape = \"circle\"`".into()),
            );
            None
        }
    }?;
    let r = Range::pos(1e4, "cm");
    if shape == "rectangle" {
        let t = Tbl::new(
            cx,
            n,
            path,
            &["shape", "width_cm", "height_cm"],
            "a rectangular field",
        )?;
        let w = t.num_req(cx, "width_cm", r, "add `width_cm = ...`");
        let h = t.num_req(cx, "height_cm", r, "add `height_cm = ...`");
        Some(Field::Rectangle {
            width_cm: w?,
            height_cm: h?,
        })
    } else {
        let t = Tbl::new(cx, n, path, &["shape", "radius_cm"], "a circular field")?;
        let rad = t.num_req(cx, "radius_cm", r, "add `radius_cm = ...`");
        Some(Field::Circle { radius_cm: rad? })
    }
}

/// Check library material names through `lookup`; errors point at each use.
pub(crate) fn check_library_names(
    files: &Files,
    uses: &[MaterialUse],
    user_materials: &[String],
    lookup: &dyn Fn(&str) -> Result<(), String>,
) -> Vec<DeckError> {
    let users: Vec<&str> = user_materials.iter().map(String::as_str).collect();
    let mut errs = Vec::new();
    for u in uses {
        if let Err(msg) = lookup(&u.name) {
            let (message, hint) = match msg.split_once("; ") {
                Some((m, h)) => (m.to_string(), Some(h.to_string())),
                None => (msg, None),
            };
            // Unknown to the library and close to a material of this deck: a typo of it.
            let (message, hint) = match nearest(&u.name, &users) {
                Some(near) => (
                    format!(
                        "`{}` is neither a material of this deck nor a library material",
                        u.name
                    ),
                    Some(format!("did you mean `{near}`, defined in this deck?")),
                ),
                None => (message, hint),
            };
            errs.push(files.error(u.loc, &u.key_path, message, hint));
        }
    }
    errs
}
