//! The resolved deck written back as a deck: every default explicit, every path absolute.
//! Loading this text gives the same [`ResolvedDeck`] (tested on every good deck).

use super::types::*;
use toml_edit::{value, Array, ArrayOfTables, DocumentMut, InlineTable, Item, Table, Value};

fn f(v: f64) -> Value {
    Value::from(v)
}

fn arr_f(v: &[f64]) -> Value {
    let mut a = Array::new();
    for x in v {
        a.push(*x);
    }
    Value::Array(a)
}

fn arr_u(v: &[u64]) -> Value {
    let mut a = Array::new();
    for x in v {
        a.push(*x as i64);
    }
    Value::Array(a)
}

fn path_str(p: &std::path::Path) -> Value {
    Value::from(p.to_string_lossy().into_owned())
}

fn grid_inline(g: &Grid) -> InlineTable {
    let mut t = InlineTable::new();
    t.insert("voxels", arr_u(&g.voxels));
    t.insert("voxel_size_cm", arr_f(&g.voxel_size_cm));
    t.insert("origin_cm", arr_f(&g.origin_cm));
    t
}

fn grid_into(t: &mut Table, g: &Grid) {
    t["voxels"] = value(arr_u(&g.voxels));
    t["voxel_size_cm"] = value(arr_f(&g.voxel_size_cm));
    t["origin_cm"] = value(arr_f(&g.origin_cm));
}

fn world(w: World) -> &'static str {
    match w {
        World::Vacuum => "vacuum",
        World::Air => "air",
    }
}

/// Write `r` as deck text.
pub(crate) fn resolved_to_toml(r: &ResolvedDeck) -> String {
    let mut doc = DocumentMut::new();

    let mut run = Table::new();
    let u = &r.run;
    run["histories"] = value(u.histories as i64);
    run["seed"] = value(u.seed as i64);
    if let Some(t) = u.threads {
        run["threads"] = value(t as i64);
    }
    run["histories_per_chunk"] = value(u.histories_per_chunk as i64);
    if let Some(s) = &u.stop_at_uncertainty {
        let mut t = InlineTable::new();
        t.insert("score", s.score.as_str().into());
        t.insert("relative", f(s.relative));
        run["stop_at_uncertainty"] = value(t);
    }
    if let Some(t) = u.time_limit_s {
        run["time_limit_s"] = value(t);
    }
    run["energy_cutoff_kev"] = value(u.energy_cutoff_kev);
    run["bound_compton"] = value(u.bound_compton);
    run["rayleigh"] = value(u.rayleigh);
    run["fluorescence"] = value(u.fluorescence);
    run["output"] = value(path_str(&u.output));
    if let Some(t) = u.checkpoint_interval_s {
        run["checkpoint_interval_s"] = value(t);
    }
    doc["run"] = Item::Table(run);

    let mut src = Table::new();
    let field_inline = |fl: &Field| {
        let mut t = InlineTable::new();
        match fl {
            Field::Rectangle {
                width_cm,
                height_cm,
            } => {
                t.insert("shape", "rectangle".into());
                t.insert("width_cm", f(*width_cm));
                t.insert("height_cm", f(*height_cm));
            }
            Field::Circle { radius_cm } => {
                t.insert("shape", "circle".into());
                t.insert("radius_cm", f(*radius_cm));
            }
        }
        t
    };
    match &r.source.shape {
        SourceShape::Pencil {
            position_cm,
            direction,
        } => {
            src["kind"] = value("pencil");
            src["position_cm"] = value(arr_f(position_cm));
            src["direction"] = value(arr_f(direction));
        }
        SourceShape::Parallel {
            position_cm,
            direction,
            field,
        } => {
            src["kind"] = value("parallel");
            src["position_cm"] = value(arr_f(position_cm));
            src["direction"] = value(arr_f(direction));
            src["field"] = value(field_inline(field));
        }
        SourceShape::Point {
            position_cm,
            direction,
            field,
            field_distance_cm,
            focal_spot_cm,
        } => {
            src["kind"] = value("point");
            src["position_cm"] = value(arr_f(position_cm));
            src["direction"] = value(arr_f(direction));
            src["field"] = value(field_inline(field));
            src["field_distance_cm"] = value(*field_distance_cm);
            if focal_spot_cm.iter().any(|&x| x != 0.0) {
                src["focal_spot_cm"] = value(arr_f(focal_spot_cm));
            }
        }
    }
    match &r.source.energy {
        SourceEnergy::Monoenergetic { energy_kev } => src["energy_kev"] = value(*energy_kev),
        SourceEnergy::SpectrumFile { path, .. } => src["spectrum_file"] = value(path_str(path)),
        SourceEnergy::Tube(t) => {
            let mut tt = Table::new();
            tt["kvp"] = value(t.kvp);
            tt["anode"] = value(t.anode.symbol());
            tt["anode_angle_deg"] = value(t.anode_angle_deg);
            let mut fa = Array::new();
            for fl in &t.filters {
                let mut it = InlineTable::new();
                it.insert("material", fl.material.name.as_str().into());
                it.insert("thickness_cm", f(fl.thickness_cm));
                fa.push(it);
            }
            tt["filters"] = value(fa);
            tt["ripple_percent"] = value(t.ripple_percent);
            src["tube"] = Item::Table(tt);
        }
    }
    if let Some(b) = &r.source.energy_bias {
        let mut bt = Table::new();
        bt["toward"] = value(b.toward.as_str());
        bt["floor"] = value(b.floor);
        src["energy_bias"] = Item::Table(bt);
    }
    if let Some(b) = &r.source.field_bias {
        let mut bt = Table::new();
        bt["toward"] = value(b.toward.as_str());
        bt["length_cm"] = value(b.length_cm);
        bt["floor"] = value(b.floor);
        src["field_bias"] = Item::Table(bt);
    }
    doc["source"] = Item::Table(src);

    if !r.materials.is_empty() {
        let mut aot = ArrayOfTables::new();
        for m in &r.materials {
            let mut t = Table::new();
            t["name"] = value(m.name.as_str());
            t["density_g_cm3"] = value(m.density_g_cm3);
            match &m.composition {
                Composition::Formula(s) => t["formula"] = value(s.as_str()),
                Composition::MassFractions(v) => {
                    let mut it = InlineTable::new();
                    for e in v {
                        it.insert(&e.symbol, f(e.mass_fraction));
                    }
                    t["mass_fractions"] = value(it);
                    t["normalise"] = value(false);
                }
            }
            aot.push(t);
        }
        doc["material"] = Item::ArrayOfTables(aot);
    }

    let mut g = Table::new();
    match &r.geometry {
        Geometry::Slabs(s) => {
            g["kind"] = value("slabs");
            g["world"] = value(world(s.world));
            g["start_z_cm"] = value(s.start_z_cm);
            if let Some(l) = s.lateral_size_cm {
                g["lateral_size_cm"] = value(arr_f(&l));
            }
            let mut aot = ArrayOfTables::new();
            for l in &s.layers {
                let mut t = Table::new();
                if let Some(n) = &l.name {
                    t["name"] = value(n.as_str());
                }
                t["material"] = value(l.material.name.as_str());
                t["thickness_cm"] = value(l.thickness_cm);
                if let Some(d) = l.density_g_cm3 {
                    t["density_g_cm3"] = value(d);
                }
                aot.push(t);
            }
            g["layer"] = Item::ArrayOfTables(aot);
        }
        Geometry::Voxels(v) => {
            g["kind"] = value("voxels");
            g["world"] = value(world(v.world));
            match &v.content {
                VoxelContent::Hdf5 { path } => g["file"] = value(path_str(path)),
                VoxelContent::Raw {
                    path,
                    grid,
                    bytes_per_voxel,
                    labels,
                } => {
                    g["file"] = value(path_str(path));
                    grid_into(&mut g, grid);
                    g["bytes_per_voxel"] = value(*bytes_per_voxel as i64);
                    let mut it = InlineTable::new();
                    for (l, m) in labels {
                        it.insert(l.to_string().as_str(), m.name.as_str().into());
                    }
                    g["labels"] = value(it);
                }
                VoxelContent::Phantom { grid, fill, shapes } => {
                    grid_into(&mut g, grid);
                    let mut p = Table::new();
                    p["fill"] = value(fill.name.as_str());
                    let mut aot = ArrayOfTables::new();
                    for s in shapes {
                        let mut t = Table::new();
                        match &s.form {
                            ShapeForm::Box { half_size_cm } => {
                                t["kind"] = value("box");
                                t["half_size_cm"] = value(arr_f(half_size_cm));
                            }
                            ShapeForm::Ellipsoid { half_size_cm } => {
                                t["kind"] = value("ellipsoid");
                                t["half_size_cm"] = value(arr_f(half_size_cm));
                            }
                            ShapeForm::Sphere { radius_cm } => {
                                t["kind"] = value("sphere");
                                t["radius_cm"] = value(*radius_cm);
                            }
                            ShapeForm::Cylinder {
                                radius_cm,
                                length_cm,
                                axis,
                            } => {
                                t["kind"] = value("cylinder");
                                t["radius_cm"] = value(*radius_cm);
                                t["length_cm"] = value(*length_cm);
                                t["axis"] = value(axis.name());
                            }
                        }
                        t["center_cm"] = value(arr_f(&s.center_cm));
                        t["material"] = value(s.material.name.as_str());
                        if let Some(d) = s.density_g_cm3 {
                            t["density_g_cm3"] = value(d);
                        }
                        if let Some(r) = &s.region {
                            t["region"] = value(r.as_str());
                        }
                        aot.push(t);
                    }
                    p["shape"] = Item::ArrayOfTables(aot);
                    g["phantom"] = Item::Table(p);
                }
            }
        }
    }
    doc["geometry"] = Item::Table(g);

    let mut aot = ArrayOfTables::new();
    for s in &r.scores {
        let mut t = Table::new();
        t["name"] = value(s.name.as_str());
        match &s.kind {
            ScoreKind::LayerEnergy => t["kind"] = value("layer_energy"),
            ScoreKind::Escape => t["kind"] = value("escape"),
            ScoreKind::InteractionCounts => t["kind"] = value("interaction_counts"),
            ScoreKind::DepthDose {
                z_min_cm,
                z_max_cm,
                bin_width_cm,
            } => {
                t["kind"] = value("depth_dose");
                t["z_min_cm"] = value(*z_min_cm);
                t["z_max_cm"] = value(*z_max_cm);
                t["bin_width_cm"] = value(*bin_width_cm);
            }
            ScoreKind::TransmittedSpectrum {
                energy_min_kev,
                energy_max_kev,
                bin_width_kev,
            } => {
                t["kind"] = value("transmitted_spectrum");
                t["energy_min_kev"] = value(*energy_min_kev);
                t["energy_max_kev"] = value(*energy_max_kev);
                t["bin_width_kev"] = value(*bin_width_kev);
            }
            ScoreKind::AirKerma {
                position_cm,
                normal_axis,
                radius_cm,
            } => {
                t["kind"] = value("air_kerma");
                t["position_cm"] = value(arr_f(position_cm));
                t["normal_axis"] = value(normal_axis.name());
                t["radius_cm"] = value(*radius_cm);
            }
            ScoreKind::VoxelDose { estimator, grid } => {
                t["kind"] = value("voxel_dose");
                t["estimator"] = value(match estimator {
                    Estimator::Analog => "analog",
                    Estimator::TrackLength => "track_length",
                });
                if let Some(g) = grid {
                    t["grid"] = value(grid_inline(g));
                }
            }
            ScoreKind::Detector(d) => {
                t["kind"] = value("detector");
                t["position_cm"] = value(arr_f(&d.position_cm));
                t["normal_axis"] = value(d.normal_axis.name());
                t["size_cm"] = value(arr_f(&d.size_cm));
                t["pixel_pitch_cm"] = value(arr_f(&d.pixel_pitch_cm));
                match &d.response {
                    Response::EnergyFluence => t["response"] = value("energy_fluence"),
                    Response::PhotonFluence => t["response"] = value("photon_fluence"),
                    Response::Absorbed {
                        material,
                        thickness_cm,
                    } => {
                        t["response"] = value("absorbed");
                        let mut it = InlineTable::new();
                        it.insert("material", material.name.as_str().into());
                        it.insert("thickness_cm", f(*thickness_cm));
                        t["layer"] = value(it);
                    }
                }
                if let Some(g) = &d.anti_scatter_grid {
                    let mut it = InlineTable::new();
                    it.insert("ratio", f(g.ratio));
                    it.insert("strips_per_cm", f(g.strips_per_cm));
                    it.insert("strip_width_cm", f(g.strip_width_cm));
                    it.insert("strip_material", g.strip_material.name.as_str().into());
                    it.insert(
                        "interspace_material",
                        g.interspace_material.name.as_str().into(),
                    );
                    if let Some(fd) = g.focus_distance_cm {
                        it.insert("focus_distance_cm", f(fd));
                    }
                    t["anti_scatter_grid"] = value(it);
                }
                if let Some(r) = d.roi_size_cm {
                    t["roi_size_cm"] = value(arr_f(&r));
                }
                t["forced_detection"] = value(d.forced_detection);
                t["forced_detection_face_points"] = value(d.forced_detection_face_points as i64);
                t["forced_detection_from"] = value(d.forced_detection_from.name());
                t["forced_detection_roulette_below"] = value(d.forced_detection_roulette_below);
                t["forced_detection_coherent_directions"] = value(d.forced_detection_coherent_directions);
                if d.forced_detection_steer > 0.0 {
                    t["forced_detection_steer"] = value(d.forced_detection_steer);
                }
                if d.primary_subpixels != crate::deck::DEFAULT_PRIMARY_SUBPIXELS {
                    t["primary_subpixels"] = value(d.primary_subpixels as i64);
                }
                if d.primary_focal_points != crate::deck::DEFAULT_PRIMARY_FOCAL_POINTS {
                    t["primary_focal_points"] = value(d.primary_focal_points as i64);
                }
            }
        }
        aot.push(t);
    }
    doc["score"] = Item::ArrayOfTables(aot);
    doc.to_string()
}
