//! `loopbal reconcile` on readings with a gross error: the biased meter named with its bias.

use super::*;

/// The whole chain on files: the simulator's readings of the purge-design loop, with one flow
/// meter reading high from the third hour, reconciled by the binary. The biased meter is a
/// suspect with its bias in the later hours, not in the earlier ones, and every report carries
/// figures and each redundant meter's detectable bias.
#[test]
fn a_biased_meter_in_the_readings_is_named_with_its_bias() {
    use reconcile::simulate::{steady_state, MeterFault, ReadingPlan};
    let dir = tempfile::tempdir().unwrap();
    let model_text = testkit::plants::PURGE_DESIGN;
    let plant = reconcile::parse_plant(model_text).unwrap();
    let z = steady_state(&plant, &testkit::purge_design::specs()).unwrap();
    // FI-4, the purge flow meter (σ 1 mol/s), reads 8 mol/s high from hour 2 on.
    let plan = ReadingPlan {
        start: chrono::DateTime::parse_from_rfc3339("2026-06-01T00:00:00Z")
            .unwrap()
            .with_timezone(&chrono::Utc),
        hours: 4,
        per_hour: 2,
        seed: 11,
        faults: vec![MeterFault::Bias {
            tag: "FI-4".into(),
            from_hour: 2,
            value: 8.0,
        }],
    };
    let csv = testkit::readings_csv(&plant, &z, &plan, &|_, _| false);
    let model = write(dir.path(), "purge-design.toml", model_text);
    let data = write(dir.path(), "readings.csv", csv);
    let out = reconcile(&model, &data);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let reports = reports(&out);
    assert_eq!(reports.len(), 4);
    for (hour, report) in reports.iter().enumerate() {
        let fi4 = report["meters"]
            .as_array()
            .unwrap()
            .iter()
            .find(|m| m["tag"] == "FI-4")
            .unwrap();
        assert!(fi4["detectable_bias"].as_f64().unwrap() > 0.0);
        assert!(!report["figures"].as_array().unwrap().is_empty());
        if hour < 2 {
            assert_eq!(fi4["suspect"], false, "hour {hour}");
        } else {
            assert_eq!(fi4["suspect"], true, "hour {hour}: {}", report["faults"]);
            let fault = report["faults"]
                .as_array()
                .unwrap()
                .iter()
                .find(|f| {
                    f["candidates"]
                        .as_array()
                        .unwrap()
                        .iter()
                        .any(|c| c == "FI-4")
                })
                .unwrap();
            let member = fault["members"]
                .as_array()
                .unwrap()
                .iter()
                .find(|m| m["id"] == "FI-4")
                .unwrap();
            let (b, sb) = (
                member["magnitude"].as_f64().unwrap(),
                member["magnitude_sigma"].as_f64().unwrap(),
            );
            assert!((b - 8.0).abs() <= 3.0 * sb, "bias {b} ± {sb}");
        }
    }
}
