//! `loopbal what-if` on files: the answer, its CSV and text forms, and bad input named.

use std::path::Path;

use serde_json::Value;

use std::process::Output;

use super::{has_keys, loopbal, purge_design_files, s, stderr};

fn what_if(model: &Path, readings: &Path, extra: &[&str]) -> Output {
    let mut args = vec!["what-if", "--model", s(model), "--readings", s(readings)];
    args.extend_from_slice(extra);
    loopbal(&args)
}

/// `loopbal what-if` on files: the contract's fields, the last period as the base by default,
/// the new purge's argon at the reactor inlet lower than the base's, σ on every value, the
/// holds and the caution; a sweep gives its points; CSV and text carry the same figures.
#[test]
fn what_if_moves_the_purge_from_the_reconciled_base_case() {
    let dir = tempfile::tempdir().unwrap();
    let (model, data) = purge_design_files(dir.path());
    let out = what_if(&model, &data, &["--set", "split:purge=0.10"]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    has_keys(&v, &["base", "holds", "points", "caution"], "what-if");
    assert_eq!(v["base"]["period_start"], "2026-06-01T01:00:00Z");
    assert_eq!(v["base"]["status"], "solved");
    assert!(v["caution"]
        .as_str()
        .unwrap()
        .contains("licensed engineering practice"));
    let holds: Vec<&str> = v["holds"]
        .as_array()
        .unwrap()
        .iter()
        .map(|h| h.as_str().unwrap())
        .collect();
    assert!(
        holds
            .iter()
            .any(|h| h.contains("single-pass conversion of \"N2\"")),
        "{holds:?}"
    );
    assert!(
        holds.iter().any(|h| h.contains("fresh feed \"feed\"")),
        "{holds:?}"
    );
    let point = &v["points"][0];
    has_keys(
        point,
        &["settings", "status", "figures", "streams"],
        "point",
    );
    assert_eq!(point["settings"]["split:purge"], 0.10);
    assert_eq!(point["status"], "solved");
    let y = point["figures"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["name"] == "inert_fraction_reactor_inlet")
        .unwrap();
    // By hand (reconcile/tests/whatif/): y(0.10) = n_I / (4 n_N + n_I) with n_I = 3 / 0.1,
    // n_N = 93 / 0.55: 30 / 706.36 = 4.25 %; the base is noisy, so within a few σ.
    let (value, sigma) = (y["value"].as_f64().unwrap(), y["sigma"].as_f64().unwrap());
    assert!(
        sigma > 0.0 && (value - 30.0 / (4.0 * 93.0 / 0.55 + 30.0)).abs() < 5.0 * sigma,
        "{y}"
    );
    for s in point["streams"].as_array().unwrap() {
        assert!(s["molar_flow_sigma"].as_f64().unwrap() >= 0.0, "{s}");
    }

    let out = what_if(
        &model,
        &data,
        &["--sweep", "split:purge=0.02..0.2:5", "--format", "csv"],
    );
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let csv = String::from_utf8(out.stdout).unwrap();
    assert!(csv.starts_with("point,settings,status,kind,name,subject,uom,value,sigma\n"));
    assert!(
        csv.lines()
            .any(|l| l.starts_with("4,split:purge=0.2,solved,figure,inert_fraction_reactor_inlet")),
        "{csv}"
    );

    let out = what_if(
        &model,
        &data,
        &["--set", "split:purge=0", "--format", "text"],
    );
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(
        text.contains("no steady state") && text.contains("\"Ar\" accumulates"),
        "{text}"
    );
}

/// The optimum on invented prices, within an argon limit, with the margin's σ.
#[test]
fn what_if_finds_the_purge_optimum_within_the_inert_limit() {
    let dir = tempfile::tempdir().unwrap();
    let (model, data) = purge_design_files(dir.path());
    let out = what_if(
        &model,
        &data,
        &[
            "--price",
            "NH3=10",
            "--loss-value",
            "N2=4",
            "--loss-value",
            "H2=1",
            "--recycle-cost",
            "0.6",
            "--max-inlet-fraction",
            "conv:Ar=0.05",
        ],
    );
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    let o = &v["optimum"];
    has_keys(
        o,
        &[
            "setting",
            "value",
            "margin",
            "margin_sigma",
            "holds",
            "point",
            "caution",
        ],
        "optimum",
    );
    assert_eq!(o["setting"], "split:purge");
    assert!(o["margin_sigma"].as_f64().unwrap() > 0.0);
    let y = o["point"]["figures"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["name"] == "inert_fraction_reactor_inlet")
        .unwrap()["value"]
        .as_f64()
        .unwrap();
    assert!(y <= 0.05 + 1e-9, "{y}");
}

/// Bad what-if input exits 2 naming the item.
#[test]
fn what_if_bad_input_exits_2_naming_the_item() {
    let dir = tempfile::tempdir().unwrap();
    let (model, data) = purge_design_files(dir.path());
    for (args, want) in [
        (vec!["--set", "split:vent=0.1"], "unknown stream \"vent\""),
        (
            vec!["--set", "split:purge=1.2"],
            "\"split:purge\": 1.2 is outside [0, 1]",
        ),
        (
            vec!["--set", "conversion:cracking=0.3"],
            "unknown reaction \"cracking\"",
        ),
        (
            vec!["--set", "inlet_fraction:conv:Xe=0.1"],
            "unknown component \"Xe\"",
        ),
        (vec!["--set", "split:purge"], "not a setting name"),
        (vec!["--sweep", "split:purge=0..0.5:1001"], "1001 points"),
        (
            vec!["--set", "inlet_fraction:conv:Ar=0.001"],
            "inlet_fraction:conv:Ar",
        ),
        (vec!["--period", "2026-07-01T00:00:00Z"], "--period"),
    ] {
        let out = what_if(&model, &data, &args);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {}", stderr(&out));
        assert!(stderr(&out).contains(want), "{args:?}: {}", stderr(&out));
        assert!(out.stdout.is_empty());
    }
}
