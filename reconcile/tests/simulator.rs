//! The simulator's readings: noise at each meter's σ, and every kind of meter fault, all
//! deterministic from the seed.

use chrono::{TimeZone, Utc};
use reconcile::period::Quality;
use reconcile::simulate::{exact_values, readings, steady_state, MeterFault, ReadingPlan, Spec};
use reconcile::{parse_plant, Plant, Reading};

use testkit::plants::PURGE_DESIGN as MODEL;

/// The purge-design loop at its design case (testkit::purge_design).
fn loop_state(plant: &Plant) -> Vec<f64> {
    steady_state(plant, &testkit::purge_design::specs()).unwrap()
}

fn plan(hours: usize, seed: u64, faults: Vec<MeterFault>) -> ReadingPlan {
    ReadingPlan {
        start: Utc.with_ymd_and_hms(2026, 6, 1, 0, 0, 0).unwrap(),
        hours,
        per_hour: 1,
        seed,
        faults,
    }
}

fn of<'a>(all: &'a [Reading], tag: &str) -> Vec<&'a Reading> {
    all.iter().filter(|r| r.tag == tag).collect()
}

#[test]
fn noise_has_the_meters_sigma_and_the_same_seed_gives_the_same_readings() {
    let plant = parse_plant(MODEL).unwrap();
    let z = loop_state(&plant);
    let exact = exact_values(&plant, &z);
    let hours = 4000;
    let a = readings(&plant, &z, &plan(hours, 5, vec![]));
    assert_eq!(a, readings(&plant, &z, &plan(hours, 5, vec![])));
    assert_ne!(a, readings(&plant, &z, &plan(hours, 6, vec![])));
    for (mi, meter) in plant.meters.iter().enumerate() {
        let sigma = meter.sigma_for(exact[mi]).unwrap();
        let e: Vec<f64> = of(&a, &meter.tag)
            .iter()
            .map(|r| (r.value - exact[mi]) / sigma)
            .collect();
        assert_eq!(e.len(), hours);
        let mean = e.iter().sum::<f64>() / hours as f64;
        let var = e.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / hours as f64;
        // Standard errors over 4,000 draws: 1/√4000 = 0.016 for the mean, √(2/4000) = 0.022
        // for the variance; checked at 4 of them.
        assert!(mean.abs() < 0.064, "{}: mean {mean}", meter.tag);
        assert!((var - 1.0).abs() < 0.09, "{}: variance {var}", meter.tag);
    }
}

#[test]
fn every_meter_fault_shows_in_the_readings() {
    let plant = parse_plant(MODEL).unwrap();
    let z = loop_state(&plant);
    let exact = exact_values(&plant, &z);
    let faults = vec![
        MeterFault::Bias {
            tag: "FI-1".into(),
            from_hour: 5,
            value: 40.0,
        },
        MeterFault::Drift {
            tag: "FI-2".into(),
            from_hour: 0,
            per_hour: 3.0,
        },
        MeterFault::Frozen {
            tag: "FI-4".into(),
            from_hour: 3,
        },
        MeterFault::Dropout {
            tag: "FI-5".into(),
            from_hour: 2,
            to_hour: 6,
        },
        MeterFault::BadQuality {
            tag: "AI-4".into(),
            from_hour: 1,
            to_hour: 3,
        },
    ];
    let clean = readings(&plant, &z, &plan(10, 9, vec![]));
    let faulty = readings(&plant, &z, &plan(10, 9, faults));
    let ix = |tag: &str| plant.meter_index(tag).unwrap();
    // Bias: exactly +40 from hour 5, the same noise as without the fault.
    for (h, (c, f)) in of(&clean, "FI-1")
        .iter()
        .zip(of(&faulty, "FI-1"))
        .enumerate()
    {
        let expected = if h >= 5 { 40.0 } else { 0.0 };
        assert!((f.value - c.value - expected).abs() < 1e-9, "hour {h}");
    }
    // Drift: 3 per hour.
    for (h, (c, f)) in of(&clean, "FI-2")
        .iter()
        .zip(of(&faulty, "FI-2"))
        .enumerate()
    {
        assert!(
            (f.value - c.value - 3.0 * h as f64).abs() < 1e-9,
            "hour {h}"
        );
    }
    // Frozen: the value of hour 3 repeats.
    let frozen = of(&faulty, "FI-4");
    assert!(frozen[3..].iter().all(|r| r.value == frozen[3].value));
    assert!(frozen[..3].windows(2).all(|w| w[0].value != w[1].value));
    // Dropout: nothing in hours 2–5.
    let sent: Vec<i64> = of(&faulty, "FI-5")
        .iter()
        .map(|r| (r.time - plan(1, 0, vec![]).start).num_hours())
        .collect();
    assert_eq!(sent, vec![0, 1, 6, 7, 8, 9]);
    // Bad quality in hours 1–2, good elsewhere; values still near the truth.
    let quality: Vec<Quality> = of(&faulty, "AI-4").iter().map(|r| r.quality).collect();
    assert_eq!(quality[1..3], [Quality::Bad, Quality::Bad]);
    assert!(quality
        .iter()
        .enumerate()
        .all(|(h, q)| (1..3).contains(&h) || *q == Quality::Good));
    let sigma = plant.meters[ix("AI-4")]
        .sigma_for(exact[ix("AI-4")])
        .unwrap();
    assert!(of(&faulty, "AI-4")
        .iter()
        .all(|r| (r.value - exact[ix("AI-4")]).abs() < 6.0 * sigma));
}

#[test]
fn bad_specifications_are_refused_naming_the_item() {
    let plant = parse_plant(MODEL).unwrap();
    let err = steady_state(
        &plant,
        &[Spec::Extent {
            reaction: "cracking".into(),
            value: 1.0,
        }],
    )
    .unwrap_err();
    assert!(
        err.to_string().contains("unknown reaction \"cracking\""),
        "{err}"
    );
    let err = steady_state(
        &plant,
        &[Spec::ComponentFlow {
            stream: "product".into(),
            component: "Ar".into(),
            value: 1.0,
        }],
    )
    .unwrap_err();
    assert!(err.to_string().contains("does not carry"), "{err}");
    let err = steady_state(
        &plant,
        &[Spec::SplitFraction {
            stream: "purge".into(),
            value: 0.1,
        }],
    )
    .unwrap_err();
    assert!(err.to_string().contains("degrees of freedom"), "{err}");
}

/// The simulator's readings of `hours` hours group into one hourly period an hour, in order,
/// each holding every meter with the hour's readings (what the period-run benchmark relies on
/// when it gives the engine a month of readings: server/benches/runs/month.rs).
#[test]
fn hourly_readings_group_into_one_period_an_hour() {
    let plant = parse_plant(MODEL).unwrap();
    let z = loop_state(&plant);
    let hours = 48;
    let plan = ReadingPlan {
        per_hour: 3,
        ..plan(hours, 11, vec![])
    };
    let all = readings(&plant, &z, &plan);
    assert_eq!(all.len(), hours * 3 * plant.meters.len());
    let periods = reconcile::group_readings(&plant, &all);
    assert_eq!(periods.len(), hours);
    for (h, p) in periods.iter().enumerate() {
        assert_eq!(
            p.start,
            plan.start + chrono::TimeDelta::hours(h as i64),
            "period {h}"
        );
        assert_eq!(p.end - p.start, chrono::TimeDelta::hours(1), "period {h}");
        assert_eq!(p.values.len(), plant.meters.len(), "period {h}");
        assert!(p.values.iter().all(|v| v.readings == 3), "period {h}");
    }
}
