//! `loopbal meter-value` on files: the contract's fields, every meter and candidate valued,
//! the best additions, and bad input named with exit 2.

use std::path::Path;
use std::process::Output;

use serde_json::Value;

use super::{has_keys, loopbal, purge_design_files, s, stderr};

fn meter_value(model: &Path, readings: &Path, extra: &[&str]) -> Output {
    let mut args = vec![
        "meter-value",
        "--model",
        s(model),
        "--readings",
        s(readings),
    ];
    args.extend_from_slice(extra);
    loopbal(&args)
}

/// The purge fraction of the purge-design loop: its σ now, every meter's σ halved and lost
/// (never below / above the σ now), candidates best first, the best two additions lowering
/// both figures of a weighted set, and the caution.
#[test]
fn meter_value_values_every_meter_and_candidate_for_the_purge_fraction() {
    let dir = tempfile::tempdir().unwrap();
    let (model, data) = purge_design_files(dir.path());
    let out = meter_value(
        &model,
        &data,
        &[
            "--figure",
            "purge_fraction:purge",
            "--figure",
            "molar_flow:recycle=0.5",
            "--add-best",
            "2",
        ],
    );
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    has_keys(
        &v,
        &[
            "period",
            "figure",
            "meters",
            "candidates",
            "accuracies",
            "best",
            "caution",
        ],
        "meter value",
    );
    assert_eq!(
        v["period"], "2026-06-01T01:00:00Z",
        "the last period by default"
    );
    let sigma = v["figure"]["sigma"].as_f64().unwrap();
    assert_eq!(v["figure"]["name"], "purge_fraction");
    let meters = v["meters"].as_array().unwrap();
    assert!(meters.len() >= 8, "{}", meters.len());
    for m in meters {
        has_keys(
            m,
            &[
                "tag",
                "sigma_if_halved",
                "sigma_if_lost",
                "unobservable_if_lost",
            ],
            "meter",
        );
        let halved = m["sigma_if_halved"].as_f64().unwrap();
        assert!(halved <= sigma * (1.0 + 1e-9), "{m}");
        if let Some(lost) = m["sigma_if_lost"].as_f64() {
            assert!(lost >= sigma * (1.0 - 1e-9), "{m}");
        }
    }
    // Best repair first.
    let halved: Vec<f64> = meters
        .iter()
        .map(|m| m["sigma_if_halved"].as_f64().unwrap())
        .collect();
    assert!(halved.windows(2).all(|w| w[0] <= w[1]), "{halved:?}");
    let candidates = v["candidates"].as_array().unwrap();
    assert!(!candidates.is_empty());
    for c in candidates {
        has_keys(
            c,
            &[
                "stream",
                "quantity",
                "component",
                "uom",
                "sigma",
                "sigma_pct",
                "sigma_if_added",
                "makes_observable",
            ],
            "candidate",
        );
    }
    assert_eq!(v["accuracies"]["flow_sigma_pct"], 1.0);
    let best = &v["best"];
    assert_eq!(best["k"], 2);
    assert_eq!(best["additions"].as_array().unwrap().len(), 2);
    assert!(["exhaustive", "greedy"].contains(&best["search"].as_str().unwrap()));
    assert!(best["method"].as_str().unwrap().contains("Bagajewicz"));
    for f in best["figures"].as_array().unwrap() {
        assert!(
            f["sigma_after"].as_f64().unwrap() <= f["sigma"].as_f64().unwrap() * (1.0 + 1e-9),
            "{f}"
        );
    }
    assert_eq!(best["figures"][1]["weight"], 0.5);
    assert!(v["caution"]
        .as_str()
        .unwrap()
        .contains("licensed engineering practice"));

    // A stricter analyser accuracy narrows an analyser candidate's σ with it added.
    let strict = meter_value(
        &model,
        &data,
        &[
            "--figure",
            "purge_fraction:purge",
            "--analyser-sigma",
            "0.02",
            "--period",
            "2026-06-01T00:30:00Z",
        ],
    );
    assert_eq!(strict.status.code(), Some(0), "{}", stderr(&strict));
    let w: Value = serde_json::from_slice(&strict.stdout).unwrap();
    assert_eq!(w["period"], "2026-06-01T00:00:00Z");
    assert_eq!(w["accuracies"]["analyser_sigma"], 0.02);
}

/// Bad input is named, exit 2: an unknown figure (the names there are listed), an unknown
/// subject, a figure not NAME:SUBJECT, a candidate accuracy that is not positive, a weight
/// that is not positive, more additions than candidates, a period without readings.
#[test]
fn meter_value_names_bad_input() {
    let dir = tempfile::tempdir().unwrap();
    let (model, data) = purge_design_files(dir.path());
    let cases: &[(&[&str], &[&str])] = &[
        (
            &["--figure", "purge_fractoin:purge"],
            &["purge_fractoin", "purge_fraction"],
        ),
        (
            &["--figure", "purge_fraction:nowhere"],
            &["nowhere", "purge"],
        ),
        (&["--figure", "molar_flow:nowhere"], &["nowhere"]),
        (&["--figure", "purge_fraction"], &["NAME:SUBJECT"]),
        (
            &["--figure", "purge_fraction:purge", "--flow-sigma-pct", "0"],
            &["flow meter accuracy", "0"],
        ),
        (
            &["--figure", "purge_fraction:purge", "--analyser-sigma=-1"],
            &["analyser accuracy", "-1"],
        ),
        (&["--figure", "purge_fraction:purge=-2"], &["weight", "-2"]),
        (
            &["--figure", "purge_fraction:purge", "--add-best", "9999"],
            &["9999", "candidate"],
        ),
        (
            &[
                "--figure",
                "purge_fraction:purge",
                "--period",
                "2027-01-01T00:00:00Z",
            ],
            &["no readings"],
        ),
    ];
    for (args, words) in cases {
        let out = meter_value(&model, &data, args);
        let err = stderr(&out);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {err}");
        for w in *words {
            assert!(err.contains(w), "{args:?}: {err} should name {w}");
        }
        assert!(out.stdout.is_empty(), "{args:?}");
    }
}
