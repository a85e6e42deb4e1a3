//! The `attenuation` and `materials` subcommands, run as the real binary.

use std::process::Command;

fn dosemill(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_dosemill"))
        .args(args)
        .output()
        .expect("run dosemill")
}

#[test]
fn water_60_kev_json_matches_nist() {
    // NIST SRD 126 (from memory, REFERENCES.md): water at 60 keV μ/ρ 0.2059, μen/ρ 0.03190 cm²/g.
    let o = dosemill(&["attenuation", "water", "--kev", "60", "--json"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value =
        serde_json::from_slice(&o.stdout).expect("exactly one JSON document");
    let arr = v.as_array().expect("a JSON array");
    assert_eq!(arr.len(), 1);
    let obj = arr[0].as_object().unwrap();
    let mut keys: Vec<&str> = obj.keys().map(|k| k.as_str()).collect();
    keys.sort();
    assert_eq!(
        keys,
        [
            "hvl_cm",
            "kev",
            "mu_per_cm",
            "mu_rho_cm2_g",
            "mu_rho_no_coherent_cm2_g",
            "muen_rho_cm2_g"
        ]
    );
    let f = |k: &str| obj[k].as_f64().unwrap();
    assert_eq!(f("kev"), 60.0);
    assert!(
        (f("mu_rho_cm2_g") - 0.2059).abs() / 0.2059 <= 0.01,
        "{}",
        f("mu_rho_cm2_g")
    );
    assert!(
        (f("muen_rho_cm2_g") - 0.03190).abs() / 0.03190 <= 0.02,
        "{}",
        f("muen_rho_cm2_g")
    );
    // Water density 1 g/cm³: μ equals μ/ρ; HVL = ln 2/μ.
    assert!((f("mu_per_cm") - f("mu_rho_cm2_g")).abs() < 1e-12);
    assert!((f("hvl_cm") * f("mu_per_cm") - std::f64::consts::LN_2).abs() < 1e-9);
    assert!(f("mu_rho_no_coherent_cm2_g") < f("mu_rho_cm2_g"));
}

#[test]
fn several_energies_give_one_array_in_order() {
    let o = dosemill(&["attenuation", "Al", "--kev", "20,60,100", "--json"]);
    assert!(o.status.success());
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let kevs: Vec<f64> = v
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["kev"].as_f64().unwrap())
        .collect();
    assert_eq!(kevs, [20.0, 60.0, 100.0]);
}

#[test]
fn table_output_by_default() {
    let o = dosemill(&["attenuation", "pmma", "--kev", "30,80"]);
    assert!(o.status.success());
    let s = String::from_utf8(o.stdout).unwrap();
    assert!(s.contains("pmma") && s.contains("HVL"), "{s}");
    assert_eq!(s.lines().filter(|l| l.trim_start().starts_with("30.000") || l.trim_start().starts_with("80.000")).count(), 2, "{s}");
}

#[test]
fn unknown_material_exits_2_with_suggestions() {
    let o = dosemill(&["attenuation", "watr", "--kev", "60"]);
    assert_eq!(o.status.code(), Some(2));
    let e = String::from_utf8_lossy(&o.stderr);
    assert!(
        e.contains("unknown material `watr`") && e.contains("water"),
        "{e}"
    );
    assert!(o.stdout.is_empty());
}

#[test]
fn energy_out_of_range_exits_2_naming_value_and_range() {
    for bad in ["0.5", "900"] {
        let o = dosemill(&[
            "attenuation",
            "water",
            "--kev",
            &format!("60,{bad}"),
            "--json",
        ]);
        assert_eq!(o.status.code(), Some(2));
        let e = String::from_utf8_lossy(&o.stderr);
        assert!(e.contains(bad) && e.contains("1–800 keV"), "{e}");
        assert!(o.stdout.is_empty(), "no partial output");
    }
}

#[test]
fn materials_lists_names_densities_sources() {
    let o = dosemill(&["materials"]);
    assert!(o.status.success());
    let s = String::from_utf8(o.stdout).unwrap();
    for needle in [
        "water",
        "cortical_bone",
        "breast_glandular",
        "ICRU Report 44",
        "Hammerstein",
        "NIST SRD 126",
        "1.9200",
    ] {
        assert!(s.contains(needle), "missing {needle}");
    }
}
