//! Valid models: the base model, the fixture, the defaults, every period accepted (and
//! grouping readings).

use super::*;

#[test]
fn base_model_is_valid() {
    let plant = parse_plant(BASE).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(plant.name, "gull-rock");
    assert_eq!(
        (
            plant.components.len(),
            plant.units.len(),
            plant.streams.len()
        ),
        (5, 4, 7)
    );
    assert_eq!((plant.reactions.len(), plant.meters.len()), (1, 4));
}

#[test]
fn the_fixture_passes() {
    let plant = parse_plant(FIXTURE).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(plant.name, "ombrask-ob2");
    assert_eq!(plant.period_seconds, 3600);
    assert_eq!(plant.alpha, 0.05);
    // As many items as the file has tables of each kind.
    let count = |table: &str| FIXTURE.lines().filter(|l| l.trim() == table).count();
    assert_eq!(plant.components.len(), count("[[component]]"));
    assert_eq!(plant.units.len(), count("[[unit]]"));
    assert_eq!(plant.reactions.len(), count("[[reaction]]"));
    assert_eq!(plant.streams.len(), count("[[stream]]"));
    assert_eq!(plant.meters.len(), count("[[meter]]"));
    assert_eq!(
        (
            plant.components.len(),
            plant.units.len(),
            plant.streams.len()
        ),
        (5, 4, 7)
    );
    // References resolved: the purge leaves the splitter for the outside, carrying everything.
    let purge = &plant.streams[plant.stream_index("purge").unwrap()];
    assert_eq!(plant.units[purge.from.unwrap()].id, "purge-split");
    assert_eq!(purge.to, None);
    assert_eq!(purge.components, (0..5).collect::<Vec<_>>());
    let product = &plant.streams[plant.stream_index("product").unwrap()];
    let names: Vec<&str> = product
        .components
        .iter()
        .map(|&c| plant.components[c].id.as_str())
        .collect();
    assert_eq!(names, ["NH3", "CH4"]);
    let synthesis = &plant.reactions[0];
    assert_eq!(plant.units[synthesis.unit].id, "conv");
    assert_eq!(synthesis.key, plant.component_index("N2"));
    assert_eq!(
        synthesis.coefficient(plant.component_index("H2").unwrap()),
        -3.0
    );
    assert_eq!(
        synthesis.coefficient(plant.component_index("Ar").unwrap()),
        0.0
    );
}

#[test]
fn defaults_of_period_and_alpha() {
    let text = edit(&[("period = \"1h\"\n", ""), ("alpha = 0.05\n", "")]);
    let plant = parse_plant(&text).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!((plant.period_seconds, plant.alpha), (3600, 0.05));
}

#[test]
fn good_periods_are_accepted() {
    for (period, seconds) in [
        ("15m", 900),
        ("1h", 3600),
        ("30s", 30),
        ("1d", 86_400),
        ("2d", 172_800),
        ("8h", 28_800),
    ] {
        let text = edit(&[("period = \"1h\"", &format!("period = \"{period}\""))]);
        let plant = parse_plant(&text).unwrap_or_else(|e| panic!("{period}: {e}"));
        assert_eq!(plant.period_seconds, seconds, "{period}");
    }
}

#[test]
fn every_accepted_period_groups_readings() {
    use chrono::{TimeZone, Utc};
    use reconcile::{group_readings, Quality, Reading};
    let time = Utc.with_ymd_and_hms(2026, 3, 2, 5, 30, 0).unwrap();
    for period in ["30s", "15m", "1h", "1d", "7d", "366d"] {
        let text = edit(&[("period = \"1h\"", &format!("period = \"{period}\""))]);
        let plant = parse_plant(&text).unwrap_or_else(|e| panic!("{period}: {e}"));
        let readings = [Reading {
            tag: "FI-1".into(),
            time,
            value: 100.0,
            quality: Quality::Good,
        }];
        let periods = group_readings(&plant, &readings);
        assert_eq!(periods.len(), 1, "{period}");
        assert!(
            periods[0].start <= time && time < periods[0].end,
            "{period}"
        );
        assert_eq!(
            (periods[0].end - periods[0].start).num_seconds(),
            plant.period_seconds
        );
    }
}
