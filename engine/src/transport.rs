//! The transport loop: one history at a time, photon by photon, and the parallel run driver.
//!
//! A history starts one source photon and follows it and any fluorescence photons it causes
//! until each is absorbed, falls below the energy cut-off or leaves the world. Slab geometry is
//! tracked exactly (distance to the next boundary vs. a sampled free path, resampled at each
//! boundary, which the memoryless exponential allows). Voxel grids are tracked by delta
//! (Woodcock) tracking with a majorant that is constant over stretches of 8 × 8 × 8-voxel
//! bricks (see `Problem::track_voxels` and `dosemill_geometry::BrickWalk`).
//!
//! Parallel runs: histories form fixed chunks; workers (one per thread) pull chunk indices from a
//! shared counter and score into their own tallies; tallies merge exactly (integer sums), so the
//! result does not depend on the thread count or on which worker ran which chunk.

use crate::physics::{compton, fluorescence, isotropic, photoelectric, rotate, xs::{Lookup, MaterialXs}, Interaction, PhysicsOptions};
use crate::rng::{chunk_range, history_stream, Stream};
use crate::score::{counts, PhotonView, Scorer};
use crate::source::Source;
use crate::physics::majorant::{LocalMajorants, Majorant};
use dosemill_geometry::{BrickMedium, Region, SlabStack, Vec3, VoxelGrid};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

/// Most photons a history can hold waiting (fluorescence); beyond this, the energy of further
/// fluorescence photons is deposited locally and counted as such (it never happens in practice).
pub const STACK_DEPTH: usize = 8;

/// The geometry a problem is tracked in.
#[derive(Debug, Clone)]
pub enum Geometry {
    /// A stack of slabs, tracked exactly.
    Slabs(SlabStack),
    /// A voxel grid in a world box, tracked by Woodcock (delta) tracking inside the grid and
    /// exactly in the world medium around it.
    Voxels(Box<VoxelWorld>),
}

/// How photons are tracked inside a voxel grid.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum VoxelTracking {
    /// Woodcock (delta) tracking with the majorant: no voxel boundaries are computed.
    #[default]
    Woodcock,
    /// Voxel-to-voxel stepping with exact boundary distances (slower; a cross-check).
    Exact,
}

/// A geometry tracked boundary by boundary (slabs, or voxels stepped exactly).
trait ExactGeometry {
    fn step(&self, p: Vec3, d: Vec3, r: Region) -> dosemill_geometry::Boundary;
    fn material_of(&self, r: Region) -> Option<(u16, f64)>;
}

impl ExactGeometry for SlabStack {
    #[inline(always)]
    fn step(&self, p: Vec3, d: Vec3, r: Region) -> dosemill_geometry::Boundary {
        SlabStack::step(self, p, d, r)
    }
    #[inline(always)]
    fn material_of(&self, r: Region) -> Option<(u16, f64)> {
        SlabStack::material_of(self, r)
    }
}

impl ExactGeometry for VoxelGrid {
    #[inline(always)]
    fn step(&self, p: Vec3, d: Vec3, r: Region) -> dosemill_geometry::Boundary {
        VoxelGrid::step(self, p, d, r)
    }
    #[inline(always)]
    fn material_of(&self, r: Region) -> Option<(u16, f64)> {
        VoxelGrid::material_of(self, r)
    }
}

/// A voxel grid with its tracking majorant and region labels.
#[derive(Debug, Clone)]
pub struct VoxelWorld {
    /// Tracking method inside the grid.
    pub tracking: VoxelTracking,
    /// The grid (shared with scorers that walk it).
    pub grid: std::sync::Arc<VoxelGrid>,
    /// μ_max(E) over the grid's materials at their largest densities: the majorant of bricks
    /// that no local majorant class covers (see `dosemill_geometry::BrickMedium::Global`).
    pub majorant: Majorant,
    /// Region label per voxel and the label names (phantom regions), if any.
    pub labels: Option<std::sync::Arc<(Vec<u16>, Vec<String>)>>,
}

impl Geometry {
    /// The world box.
    pub fn world_bounds(&self) -> dosemill_geometry::Aabb {
        match self {
            Geometry::Slabs(s) => s.world().bounds,
            Geometry::Voxels(v) => v.grid.world().bounds,
        }
    }

    /// The region of a point (for starting points).
    pub fn locate(&self, p: Vec3) -> Region {
        match self {
            Geometry::Slabs(s) => s.locate(p),
            Geometry::Voxels(v) => v.grid.locate(p),
        }
    }
}

/// Everything a run needs except the run settings.
#[derive(Debug, Clone)]
pub struct Problem {
    /// Materials, indexed by the geometry's material indices.
    pub materials: Vec<MaterialXs>,
    /// The geometry.
    pub geometry: Geometry,
    /// The source.
    pub source: Source,
    /// Physics switches.
    pub options: PhysicsOptions,
    /// The scorers (configuration; their tallies are ignored and zeroed per worker).
    pub scorers: Vec<Scorer>,
}

impl Problem {
    /// True when some scorer needs every flight segment.
    #[inline]
    fn segments_wanted(&self) -> bool {
        self.scorers.iter().any(Scorer::wants_segments)
    }

    #[inline]
    fn interactions_wanted(&self) -> bool {
        self.scorers.iter().any(Scorer::wants_interactions)
    }
}

#[derive(Debug, Clone, Copy)]
struct Photon {
    pos: Vec3,
    dir: Vec3,
    kev: f64,
    weight: f64,
    region: Region,
    incoherent: u16,
    coherent: u16,
    fluorescence: bool,
    /// ln of the energy, kept with it.
    ln_kev: f64,
    /// Material whose table lookup is cached (`NO_MATERIAL`: none), the lookup and its μ/ρ.
    cached_material: u16,
    cached: Lookup,
    cached_mu_rho: f64,
}

const NO_MATERIAL: u16 = u16::MAX;

impl Photon {
    #[inline]
    fn new(pos: Vec3, dir: Vec3, kev: f64, weight: f64, region: Region, fluorescence: bool) -> Self {
        Photon {
            pos,
            dir,
            kev,
            weight,
            region,
            incoherent: 0,
            coherent: 0,
            fluorescence,
            ln_kev: kev.ln(),
            cached_material: NO_MATERIAL,
            cached: Lookup::default(),
            cached_mu_rho: 0.0,
        }
    }

    #[inline]
    fn set_energy(&mut self, kev: f64) {
        self.kev = kev;
        self.ln_kev = kev.ln();
        self.cached_material = NO_MATERIAL;
    }

    /// μ/ρ of material `m` at the photon's energy, from the cache when possible.
    #[inline(always)]
    fn mu_rho(&mut self, m: u16, materials: &[MaterialXs]) -> f64 {
        if self.cached_material != m {
            let table = &materials[m as usize];
            self.cached = table.lookup_ln(self.ln_kev);
            self.cached_mu_rho = table.mu_rho_at(self.cached);
            self.cached_material = m;
        }
        self.cached_mu_rho
    }

    /// Keeps a lookup of material `m` at the photon's energy made elsewhere (bit for bit what
    /// [`Photon::mu_rho`] would compute).
    #[inline(always)]
    fn keep_lookup(&mut self, m: u16, at: Lookup, mu_rho: f64) {
        self.cached_material = m;
        self.cached = at;
        self.cached_mu_rho = mu_rho;
    }

    #[inline]
    fn view(&self) -> PhotonView {
        PhotonView {
            pos: self.pos,
            dir: self.dir,
            kev: self.kev,
            ln_kev: self.ln_kev,
            weight: self.weight,
            incoherent: self.incoherent,
            coherent: self.coherent,
            fluorescence: self.fluorescence,
        }
    }
}

/// Energy bookkeeping of one history (keV): incident = deposited + escaped.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct HistoryOutcome {
    /// Energy of the source photon.
    pub incident_kev: f64,
    /// Energy deposited anywhere (object and world medium).
    pub deposited_kev: f64,
    /// Energy carried out of the world by escaping photons.
    pub escaped_kev: f64,
}

struct Ctx<'a> {
    scorers: &'a mut [Scorer],
    /// A detector steering Compton directions toward its face (forced detection), if any.
    steer: Option<&'a crate::score::detector::DetectorSetup>,
    segments: bool,
    sites: bool,
    history: u64,
    outcome: HistoryOutcome,
}

impl Ctx<'_> {
    #[inline]
    fn deposit(&mut self, region: Region, pos: Vec3, kev: f64) {
        if kev > 0.0 {
            self.outcome.deposited_kev += kev;
            for s in self.scorers.iter_mut() {
                s.deposit(region, pos, kev, self.history);
            }
        }
    }
    #[inline]
    fn escape(&mut self, p: &Photon) {
        self.outcome.escaped_kev += p.kev * p.weight;
        let view = p.view();
        for s in self.scorers.iter_mut() {
            s.escape(&view, self.history);
        }
    }
    #[inline]
    fn segment(&mut self, p: &Photon, length_cm: f64) {
        let view = p.view();
        for s in self.scorers.iter_mut() {
            s.segment(&view, length_cm, self.history);
        }
    }
    /// The start of a straight flight of `p` (next-event estimators along flights).
    #[inline]
    fn flight(&mut self, problem: &Problem, p: &Photon) {
        if self.sites && !p.region.is_escaped() {
            let view = p.view();
            for s in self.scorers.iter_mut() {
                s.flight(problem, &view, self.history);
            }
        }
    }
    #[inline]
    fn count(&mut self, bin: usize, w: f64) {
        for s in self.scorers.iter_mut() {
            s.count(bin, w, self.history);
        }
    }
}

impl Problem {
    /// Runs history `history` of a run seeded with `seed`, scoring into `scorers`.
    /// A pure function of (problem, seed, history): any history can be replayed alone.
    pub fn run_history(&self, seed: u64, history: u64, scorers: &mut [Scorer]) -> HistoryOutcome {
        let mut rng = history_stream(seed, history);
        let (pos, dir, kev, weight) = self.source.sample_weighted(&mut rng);
        let segments = self.segments_wanted();
        let sites = self.interactions_wanted();
        let steer = self.scorers.iter().find_map(|s| match s {
            Scorer::Detector(d) if d.setup.steers() => Some(&*d.setup),
            _ => None,
        });
        let mut ctx = Ctx { scorers, steer, history, segments, sites, outcome: HistoryOutcome { incident_kev: kev * weight, ..Default::default() } };
        let mut stack = [Photon::new(pos, dir, kev, weight, Region::ESCAPED, false); STACK_DEPTH];
        let mut depth = 1usize;
        stack[0].region = enter_world(&self.geometry, pos, dir, &mut stack[0].pos);
        match &self.geometry {
            Geometry::Slabs(slabs) => {
                while depth > 0 {
                    depth -= 1;
                    let photon = stack[depth];
                    self.track_exact(slabs, photon, &mut rng, &mut ctx, &mut stack, &mut depth);
                }
            }
            Geometry::Voxels(world) => {
                let mut local = LocalMajorants::new();
                while depth > 0 {
                    depth -= 1;
                    let photon = stack[depth];
                    match world.tracking {
                        VoxelTracking::Woodcock => self.track_voxels(world, photon, &mut local, &mut rng, &mut ctx, &mut stack, &mut depth),
                        VoxelTracking::Exact => self.track_exact(&*world.grid, photon, &mut rng, &mut ctx, &mut stack, &mut depth),
                    }
                }
            }
        }
        ctx.outcome
    }

    /// Follows one photon region by region (exact boundaries) until it is absorbed or escapes.
    #[inline]
    fn track_exact<G: ExactGeometry>(
        &self,
        slabs: &G,
        mut p: Photon,
        rng: &mut Stream,
        ctx: &mut Ctx,
        stack: &mut [Photon; STACK_DEPTH],
        depth: &mut usize,
    ) {
        if p.kev < self.options.cutoff_kev {
            ctx.count(counts::CUTOFF, p.weight);
            ctx.deposit(p.region, p.pos, p.kev * p.weight);
            return;
        }
        ctx.flight(self, &p);
        loop {
            if p.region.is_escaped() {
                ctx.escape(&p);
                return;
            }
            if !self.exact_step(slabs, &mut p, rng, ctx, stack, depth) {
                return;
            }
        }
    }

    /// One exact step: to the next boundary, or to a sampled interaction before it (the free
    /// path is resampled at each boundary, which the memoryless exponential allows).
    /// Returns false when the photon is gone.
    #[inline(always)]
    fn exact_step<G: ExactGeometry>(
        &self,
        geometry: &G,
        p: &mut Photon,
        rng: &mut Stream,
        ctx: &mut Ctx,
        stack: &mut [Photon; STACK_DEPTH],
        depth: &mut usize,
    ) -> bool {
        let boundary = geometry.step(p.pos, p.dir, p.region);
        let medium = geometry.material_of(p.region);
        let free_path = match medium {
            Some((m, rho)) if rho > 0.0 => rng.exponential() / (p.mu_rho(m, &self.materials) * rho),
            _ => f64::INFINITY,
        };
        if free_path >= boundary.distance_cm {
            if ctx.segments {
                ctx.segment(p, boundary.distance_cm);
            }
            p.pos = boundary.landing(p.pos, p.dir);
            p.region = boundary.next;
            return true;
        }
        if ctx.segments {
            ctx.segment(p, free_path);
        }
        p.pos = p.pos + p.dir * free_path;
        let (m, _) = medium.expect("an interaction needs a medium");
        self.interact(p, &self.materials[m as usize], rng, ctx, stack, depth)
    }

    /// Follows one photon through a voxel world until it is absorbed or escapes: exact tracking
    /// in the world medium, Woodcock tracking with local majorants inside the grid. The grid's
    /// bricks form stretches of constant majorant along the flight (`VoxelGrid::brick_walk`);
    /// an exponential optical depth τ is spent stretch by stretch (μ_max of the stretch × its
    /// length), which places tentative collisions exactly as delta tracking with a piecewise
    /// constant majorant does. A tentative collision is real with probability μ(voxel)/μ_max
    /// (certainly, with no random number drawn, where μ = μ_max: in a soft-tissue region whose
    /// majorant is the tissue's μ, every tentative collision in tissue is real); the medium is
    /// read from the brick tables, the voxel arrays only where bricks and cells are mixed.
    /// After a virtual collision a new τ is drawn (the exponential is memoryless).
    #[inline]
    #[allow(clippy::too_many_arguments)]
    fn track_voxels(
        &self,
        world: &VoxelWorld,
        mut p: Photon,
        local: &mut LocalMajorants,
        rng: &mut Stream,
        ctx: &mut Ctx,
        stack: &mut [Photon; STACK_DEPTH],
        depth: &mut usize,
    ) {
        if p.kev < self.options.cutoff_kev {
            ctx.count(counts::CUTOFF, p.weight);
            ctx.deposit(p.region, p.pos, p.kev * p.weight);
            return;
        }
        ctx.flight(self, &p);
        let grid = &*world.grid;
        let bounds = grid.bounds();
        let world_box = grid.world().bounds;
        let classes = grid.majorant_classes();
        loop {
            if p.region.is_escaped() {
                ctx.escape(&p);
                return;
            }
            if p.region.is_world() {
                if !self.exact_step(grid, &mut p, rng, ctx, stack, depth) {
                    return;
                }
                continue;
            }
            // Inside the grid: delta tracking with the local majorant of each stretch, to the
            // next real collision or out of the grid.
            local.at_energy(p.kev);
            let mut walk = grid.brick_walk(p.pos, p.dir);
            // Optical depth (in majorant units) left to the next tentative collision.
            let mut tau = rng.exponential();
            loop {
                let (start, end, medium) = walk.stretch();
                let mu_max = match medium {
                    BrickMedium::Class(c) => local.class_mu(c, &classes[c as usize], p.ln_kev, &self.materials),
                    BrickMedium::Global => world.majorant.mu_per_cm_ln(p.ln_kev),
                };
                let depth_here = mu_max * (end - start);
                if tau >= depth_here {
                    tau -= depth_here;
                    match walk.advance() {
                        Ok(()) => continue,
                        Err(exit) => {
                            if ctx.segments {
                                ctx.segment(&p, exit.distance_cm);
                            }
                            let q = walk.point(exit.distance_cm).with_axis(exit.axis, exit.plane_cm);
                            p.pos = q;
                            // Just beyond the grid face: the world, unless the world box ends there too.
                            let beyond = q + p.dir * (1e-9 * (1.0 + bounds.scale_cm()));
                            p.region = if world_box.contains(beyond) { Region::WORLD } else { Region::ESCAPED };
                            break;
                        }
                    }
                }
                // A tentative collision in this stretch.
                let s = (start + tau / mu_max).min(end);
                let (v, cell) = walk.voxel_at(s);
                let (m, rho) = walk.voxel_medium(v, cell);
                let mu = local.mu_rho(m, p.ln_kev, &self.materials) * rho;
                // Real with probability μ/μ_max; where the voxel's medium sets the majorant
                // (μ = μ_max, bit for bit) it is real without drawing.
                if mu < mu_max && rng.uniform() * mu_max >= mu {
                    walk.resume_at(s);
                    tau = rng.exponential();
                    continue;
                }
                if ctx.segments {
                    ctx.segment(&p, s);
                }
                p.pos = walk.point(s);
                p.region = Region::object(v);
                for sc in ctx.scorers.iter() {
                    sc.collision_ahead(v);
                }
                match local.kept(m) {
                    Some((at, mu_rho)) => p.keep_lookup(m, at, mu_rho),
                    None => {
                        p.mu_rho(m, &self.materials);
                    }
                }
                if !self.interact(&mut p, &self.materials[m as usize], rng, ctx, stack, depth) {
                    return;
                }
                break;
            }
        }
    }

    /// One interaction at the photon's position. Returns false when the photon is gone.
    #[inline]
    fn interact(
        &self,
        p: &mut Photon,
        material: &MaterialXs,
        rng: &mut Stream,
        ctx: &mut Ctx,
        stack: &mut [Photon; STACK_DEPTH],
        depth: &mut usize,
    ) -> bool {
        let (component, kind) = material.sample_channel_at(p.cached, rng);
        let c = &material.components[component];
        ctx.count(Scorer::interaction_bin(kind), p.weight);
        if ctx.sites {
            let site = crate::score::InteractionSite { photon: p.view(), region: p.region, material: p.cached_material, element: c.element, kind };
            for s in ctx.scorers.iter_mut() {
                s.interaction(self, &site, ctx.history);
            }
        }
        match kind {
            Interaction::Photoelectric => {
                let mut local = p.kev;
                if self.options.fluorescence {
                    let shell = photoelectric::sample_shell_ln(p.kev, p.ln_kev, c.element, rng);
                    let emitted = fluorescence::cascade(c.element, shell, rng);
                    for &line in &emitted.kev[..emitted.count] {
                        if line >= self.options.cutoff_kev && *depth < STACK_DEPTH {
                            stack[*depth] = Photon::new(p.pos, isotropic(rng), line, p.weight, p.region, true);
                            *depth += 1;
                            local -= line;
                            ctx.count(counts::FLUORESCENCE, p.weight);
                        }
                    }
                }
                ctx.deposit(p.region, p.pos, local * p.weight);
                false
            }
            Interaction::Incoherent => {
                let (ratio, dir) = match ctx.steer {
                    None => {
                        let (ratio, cos_theta) = compton::sample(p.kev, c.element, self.options.bound_compton, rng);
                        (ratio, rotate(p.dir, cos_theta, rng.azimuth()))
                    }
                    Some(d) => {
                        let (dir, ratio, factor) = d.steer_incoherent(p.pos, p.dir, p.kev, p.ln_kev, p.cached_material as usize, component, c.element, self.options.bound_compton, rng);
                        p.weight *= factor;
                        (ratio, dir)
                    }
                };
                let scattered = p.kev * ratio;
                ctx.deposit(p.region, p.pos, (p.kev - scattered) * p.weight);
                p.set_energy(scattered);
                p.dir = dir;
                p.incoherent = p.incoherent.saturating_add(1);
                if p.kev < self.options.cutoff_kev {
                    ctx.count(counts::CUTOFF, p.weight);
                    ctx.deposit(p.region, p.pos, p.kev * p.weight);
                    return false;
                }
                ctx.flight(self, p);
                true
            }
            Interaction::Coherent => {
                let table = c.rayleigh.as_ref().expect("coherent channel without its table");
                let cos_theta = table.sample(p.kev, rng);
                p.dir = rotate(p.dir, cos_theta, rng.azimuth());
                p.coherent = p.coherent.saturating_add(1);
                ctx.flight(self, p);
                true
            }
        }
    }
}

/// The region a source photon starts in; a photon starting outside the world box is moved to
/// where its ray enters the box (or escapes at once if it misses).
fn enter_world(geometry: &Geometry, pos: Vec3, dir: Vec3, out: &mut Vec3) -> Region {
    let r = geometry.locate(pos);
    if !r.is_escaped() {
        return r;
    }
    let b = geometry.world_bounds();
    match b.chord(pos, dir) {
        Some(c) if c.enter_cm >= 0.0 && c.exit_cm > c.enter_cm => {
            let mut q = pos + dir * c.enter_cm;
            if let Some(a) = c.enter_axis.index() {
                let plane = if dir.axis(a) > 0.0 { b.min_cm.axis(a) } else { b.max_cm.axis(a) };
                q = q.with_axis(a, plane);
            }
            *out = q;
            geometry.locate(q)
        }
        _ => Region::ESCAPED,
    }
}

/// How a run is carried out.
#[derive(Debug, Clone)]
pub struct RunSettings {
    /// Histories in the whole run.
    pub histories: u64,
    /// Run seed.
    pub seed: u64,
    /// Histories per chunk.
    pub chunk_histories: u64,
    /// Worker threads (≥ 1).
    pub threads: usize,
    /// Show a progress bar on a terminal.
    pub progress: bool,
}

/// Merged result of the chunks a run carried out.
#[derive(Debug, Clone)]
pub struct RunResult {
    /// Merged scorers (flushed tallies).
    pub scorers: Vec<Scorer>,
    /// Histories carried out.
    pub histories: u64,
    /// Chunks carried out, ascending.
    pub chunks: Vec<u64>,
    /// Wall time (s).
    pub wall_time_s: f64,
}

/// Runs the given chunks of a problem on `settings.threads` workers. If `stop` becomes true,
/// workers finish the chunk in hand and return; the result then holds the chunks completed.
pub fn run_chunks(problem: &Problem, settings: &RunSettings, chunks: &[u64], stop: Option<&AtomicBool>) -> RunResult {
    let total: u64 = chunks.iter().map(|&c| {
        let r = chunk_range(c, settings.chunk_histories, settings.histories);
        r.end - r.start
    }).sum();
    let bar = progress_bar(settings, total);
    let r = run_chunks_with(problem, settings, chunks, stop, bar.as_ref());
    if let Some(b) = bar {
        b.finish_and_clear();
    }
    r
}

/// As [`run_chunks`], advancing the caller's progress bar (one bar over several calls).
pub fn run_chunks_with(
    problem: &Problem,
    settings: &RunSettings,
    chunks: &[u64],
    stop: Option<&AtomicBool>,
    bar: Option<&indicatif::ProgressBar>,
) -> RunResult {
    let mut acc = RunResult::empty(problem);
    run_chunks_into(problem, settings, chunks, stop, bar, &mut acc);
    acc
}

/// Runs `chunks` and adds their scores, histories, chunks and wall time to `acc` (a result of
/// `problem`). Workers score into views of `acc`'s tallies: dense tallies get a zeroed copy per
/// worker, added at the end; shared tallies (voxel dose grids) are scored into directly, so a
/// large grid exists once however many threads run and however many calls add to `acc`.
/// A caller that runs many sets of chunks in turn keeps a [`Workers`] instead.
pub fn run_chunks_into(
    problem: &Problem,
    settings: &RunSettings,
    chunks: &[u64],
    stop: Option<&AtomicBool>,
    bar: Option<&indicatif::ProgressBar>,
    acc: &mut RunResult,
) {
    let start = std::time::Instant::now();
    let mut workers = Workers::new(settings.threads, acc);
    workers.run(problem, settings, chunks, stop, bar);
    workers.gather(acc);
    acc.wall_time_s += start.elapsed().as_secs_f64();
}

/// What one worker has scored since the last [`Workers::gather`].
struct WorkerSlot {
    scorers: Vec<Scorer>,
    chunks: Vec<u64>,
    histories: u64,
}

/// A pool of workers that keep their partial tallies from one set of chunks to the next: a job
/// run in many waves builds the pool and the per-worker copies of its dense tallies once, and
/// merges them into the result only when it [`gather`](Workers::gather)s (before a
/// checkpoint, a target-uncertainty check and at the end), not after every wave. The sums are
/// exact integers, so when and in which order they are merged changes no bit of the result.
pub struct Workers {
    pool: rayon::ThreadPool,
    slots: Vec<std::sync::Mutex<WorkerSlot>>,
}

impl Workers {
    /// `threads` workers scoring into views of `acc`'s tallies.
    pub fn new(threads: usize, acc: &RunResult) -> Self {
        let pool = rayon::ThreadPoolBuilder::new().num_threads(threads.max(1)).build().expect("thread pool");
        let slots = (0..pool.current_num_threads())
            .map(|_| std::sync::Mutex::new(WorkerSlot { scorers: acc.scorers.iter().map(Scorer::worker_view).collect(), chunks: Vec::new(), histories: 0 }))
            .collect();
        Workers { pool, slots }
    }

    /// Runs `chunks` (workers pull them from a shared counter). If `stop` becomes true, workers
    /// finish the chunk in hand and return. The scores stay with the workers until
    /// [`gather`](Self::gather).
    pub fn run(&mut self, problem: &Problem, settings: &RunSettings, chunks: &[u64], stop: Option<&AtomicBool>, bar: Option<&indicatif::ProgressBar>) {
        let next = AtomicUsize::new(0);
        let slots = &self.slots;
        self.pool.broadcast(|ctx| {
            let mut guard = slots[ctx.index()].lock().expect("worker slot");
            let slot = &mut *guard;
            loop {
                if stop.is_some_and(|s| s.load(Ordering::Relaxed)) {
                    break;
                }
                let i = next.fetch_add(1, Ordering::Relaxed);
                let Some(&chunk) = chunks.get(i) else { break };
                let range = chunk_range(chunk, settings.chunk_histories, settings.histories);
                let n = range.end - range.start;
                for h in range {
                    problem.run_history(settings.seed, h, &mut slot.scorers);
                }
                slot.histories += n;
                slot.chunks.push(chunk);
                if let Some(b) = bar {
                    b.inc(n);
                }
            }
        });
    }

    /// Chunks run since the last [`gather`](Self::gather).
    pub fn pending_chunks(&self) -> usize {
        self.slots.iter().map(|s| s.lock().expect("worker slot").chunks.len()).sum()
    }

    /// Adds the workers' scores, histories and chunks to `acc` and clears the workers' copies.
    pub fn gather(&mut self, acc: &mut RunResult) {
        for slot in &self.slots {
            let mut guard = slot.lock().expect("worker slot");
            let slot = &mut *guard;
            if slot.chunks.is_empty() {
                continue;
            }
            for (m, s) in acc.scorers.iter_mut().zip(&mut slot.scorers) {
                s.tally_mut().flush();
                m.tally_mut().merge(s.tally());
                s.tally_mut().clear_flushed();
            }
            acc.chunks.append(&mut slot.chunks);
            acc.histories += slot.histories;
            slot.histories = 0;
        }
        acc.chunks.sort_unstable();
    }
}

impl RunResult {
    /// Adds the scores, histories and chunks of `other` (another set of chunks of the same run).
    pub fn merge(&mut self, other: &RunResult) {
        for (m, s) in self.scorers.iter_mut().zip(&other.scorers) {
            m.tally_mut().merge(s.tally());
        }
        self.histories += other.histories;
        self.chunks.extend_from_slice(&other.chunks);
        self.chunks.sort_unstable();
        self.wall_time_s += other.wall_time_s;
    }

    /// An empty result for `problem` (no chunks run).
    pub fn empty(problem: &Problem) -> RunResult {
        RunResult { scorers: problem.scorers.iter().map(Scorer::zeroed).collect(), histories: 0, chunks: Vec::new(), wall_time_s: 0.0 }
    }
}

/// Runs every chunk of the run.
pub fn run(problem: &Problem, settings: &RunSettings) -> RunResult {
    let n = crate::rng::chunk_count(settings.histories, settings.chunk_histories);
    let chunks: Vec<u64> = (0..n).collect();
    run_chunks(problem, settings, &chunks, None)
}

/// A progress bar over `total` histories with histories/s and ETA, or `None` when progress is
/// off or stderr is not a terminal.
pub fn progress_bar(settings: &RunSettings, total: u64) -> Option<indicatif::ProgressBar> {
    use std::io::IsTerminal;
    if !settings.progress || !std::io::stderr().is_terminal() {
        return None;
    }
    let bar = indicatif::ProgressBar::new(total);
    bar.set_style(
        indicatif::ProgressStyle::with_template("{bar:40} {pos}/{len} histories  {per_sec}  ETA {eta}")
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
    );
    Some(bar)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn raw(r: &RunResult) -> Vec<(Vec<u128>, Vec<u128>)> {
        r.scorers.iter().map(|s| s.tally().raw()).collect()
    }

    /// Workers kept across waves and gathered at irregular points give the same bits as one
    /// call over all chunks (the sums are exact integers), on any thread count.
    #[test]
    fn workers_gathered_at_any_point_give_the_same_bits() {
        let problem = crate::score::detector::p2::problem(2.0, 5.0, crate::score::detector::p2::Estimator::Forced);
        let settings = RunSettings { histories: 1_200, seed: 5, chunk_histories: 100, threads: 1, progress: false };
        let all: Vec<u64> = (0..12).collect();
        let one = run_chunks(&problem, &settings, &all, None);
        for threads in [1, 2] {
            let settings = RunSettings { threads, ..settings.clone() };
            let mut acc = RunResult::empty(&problem);
            let mut workers = Workers::new(threads, &acc);
            workers.run(&problem, &settings, &all[0..3], None, None);
            workers.gather(&mut acc);
            workers.run(&problem, &settings, &all[3..7], None, None);
            workers.run(&problem, &settings, &all[7..9], None, None);
            assert_eq!(workers.pending_chunks(), 6);
            workers.gather(&mut acc);
            workers.gather(&mut acc);
            workers.run(&problem, &settings, &all[9..12], None, None);
            workers.gather(&mut acc);
            assert_eq!(acc.histories, 1_200);
            assert_eq!(acc.chunks, all);
            assert!(raw(&one).iter().any(|(s, _)| s.iter().any(|&v| v > 0)), "the run scored something");
            assert!(raw(&acc) == raw(&one), "{threads} threads: the same sums bit for bit");
        }
    }
}
