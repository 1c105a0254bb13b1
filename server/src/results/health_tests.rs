//! Meter health kept as running states: over a simulated month with re-runs, late periods and
//! notes, every meter's health read from the states equals the health assessed from scratch
//! over the whole stored record; and stray periods decades before the plant's other data stay
//! out of the evidence.

use chrono::TimeDelta;
use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use reconcile::ReportStatus;

use std::collections::BTreeMap;

use chrono::{DateTime, Utc};
use reconcile::ModelSpec;

use super::meters::{assessed, attributed, record_start, resets};
use crate::health::{assess, tests::same, Health, MeterPeriod, Status};
use crate::service::Service;
use crate::store::tests::{on_both_backends, Scratch};
use crate::store::{MeterNote, NewRun, NoteDraft, NoteKind, NoteOutcome, PlantRow, Store};

on_both_backends!(
    a_month_with_reruns_late_periods_and_notes_reads_as_from_scratch,
    stray_periods_decades_earlier_stay_out_of_the_evidence,
);

fn t(text: &str) -> DateTime<Utc> {
    DateTime::parse_from_rfc3339(text)
        .expect("test time")
        .with_timezone(&Utc)
}

fn stored(outcome: NoteOutcome) -> MeterNote {
    match outcome {
        NoteOutcome::Stored { note, .. } => note,
        NoteOutcome::Refused(why) => panic!("note refused: {why}"),
    }
}

const TAGS: [&str; 4] = ["FT-1", "FT-2", "FT-3", "FT-4"];

/// The tee with two meters on each stream (FT-1 and FT-3 on the feed, FT-2 and FT-4 on the
/// outlet), in effect from 1990 so that stray periods have a model.
async fn plant_with_four_meters(store: &Store) -> (PlantRow, i64) {
    use crate::test_plants::{tee, FlowMeter};
    let model = tee(&[
        FlowMeter("FT-1", "in", None),
        FlowMeter("FT-2", "out", None),
        FlowMeter("FT-3", "in", None),
        FlowMeter("FT-4", "out", None),
    ]);
    let plant = store.create_plant("west").await.unwrap();
    let spec = ModelSpec::from_toml(&model).unwrap();
    let revision = store
        .put_model_revision(&plant, &spec, &model, t("1990-01-01T00:00:00Z"))
        .await
        .unwrap();
    (plant, revision)
}

fn hour(h: i64) -> DateTime<Utc> {
    t("2026-03-01T00:00:00Z") + TimeDelta::hours(h)
}

/// The meter rows of one period: σ 1, σ_a 0.7, noise from `rng`; FT-1 and FT-3 (correlated at
/// 0.6) read high from hour 150, FT-1 more; FT-2 is frozen in hours 300-310; now and then a
/// missing value, an out-of-range or bad reading, a period whose own test flagged the meter.
fn rows_of(h: i64, rng: &mut rand_chacha::ChaCha8Rng) -> Vec<(String, MeterPeriod)> {
    TAGS.iter()
        .map(|&tag| {
            let sa = 0.7;
            let noise: f64 = StandardNormal.sample(rng);
            let bias = match tag {
                "FT-1" if h >= 150 => 1.6,
                "FT-3" if h >= 150 => 1.1,
                _ => 0.0,
            };
            let a = noise * sa - bias * sa * sa;
            let missing = rng.gen_bool(0.02);
            let frozen = tag == "FT-2" && (300..=310).contains(&h);
            let partner = match tag {
                "FT-1" => "FT-3",
                "FT-3" => "FT-1",
                "FT-2" => "FT-4",
                _ => "FT-2",
            };
            let rho = if tag == "FT-1" || tag == "FT-3" {
                0.6
            } else {
                0.5
            };
            let period = MeterPeriod {
                period_start: hour(h),
                measured: if missing {
                    None
                } else if frozen {
                    Some(42.0)
                } else {
                    Some(100.0 - a)
                },
                reconciled: Some(100.0),
                sigma: Some(1.0),
                adjustment: (!missing).then_some(a),
                adjustment_sigma: (!missing).then_some(sa),
                normalized: (!missing).then_some(a / sa),
                redundant: !missing,
                flagged: rng.gen_bool(0.03),
                readings: 1,
                bad_readings: i64::from(rng.gen_bool(0.02)),
                out_of_range_readings: i64::from(rng.gen_bool(0.01)),
                correlations: BTreeMap::from([(partner.to_string(), rho)]),
            };
            (tag.to_string(), period)
        })
        .collect()
}

async fn record(store: &Store, plant: &PlantRow, revision: i64, rows: Vec<(String, MeterPeriod)>) {
    let run = NewRun {
        period_start: rows[0].1.period_start,
        revision,
        engine_version: reconcile::ENGINE_VERSION.to_string(),
        status: ReportStatus::parse("solved").unwrap(),
        report: serde_json::json!({ "status": "solved" }),
        inputs: serde_json::json!([]),
        meters: rows,
    };
    store.record_run(plant, &run).await.unwrap();
}

/// Every meter's health from scratch: each record read whole from the store, cut at its start
/// ([`record_start`]) and assessed, then attributed over the suspects' rows.
async fn from_scratch(
    svc: &Service,
    plant: &PlantRow,
    notes: &[MeterNote],
) -> (Vec<Health>, Vec<Option<DateTime<Utc>>>) {
    let all = svc
        .store
        .meter_periods(
            plant,
            None,
            DateTime::<Utc>::MIN_UTC,
            DateTime::<Utc>::MAX_UTC,
        )
        .await
        .unwrap();
    let latest = all.iter().map(|(_, p)| p.period_start).max();
    let tags: Vec<String> = TAGS.iter().map(|t| t.to_string()).collect();
    let mut healths = Vec::new();
    let mut firsts = Vec::new();
    for tag in &tags {
        let since = record_start(resets(notes, tag), latest, svc.health_window);
        let record: Vec<MeterPeriod> = all
            .iter()
            .filter(|(t, p)| t == tag && p.period_start >= since)
            .map(|(_, p)| p.clone())
            .collect();
        firsts.push(record.first().map(|p| p.period_start));
        healths.push(assess(&record));
    }
    let suspects: Vec<usize> = (0..4)
        .filter(|&i| healths[i].status == Status::Suspect)
        .collect();
    let from = suspects
        .iter()
        .filter_map(|&i| healths[i].evidence_since)
        .min();
    let records: Vec<(String, MeterPeriod)> = all
        .into_iter()
        .filter(|(t, p)| {
            suspects.len() >= 2
                && suspects.iter().any(|&i| &tags[i] == t)
                && from.is_some_and(|f| p.period_start >= f)
        })
        .collect();
    (attributed(&tags, healths, &records), firsts)
}

/// The health the service answers (from the running states) against the health from scratch.
async fn compare(svc: &Service, plant: &PlantRow, at: &str) -> Vec<Health> {
    let notes = svc.store.notes(plant, None).await.unwrap();
    let tags = TAGS.iter().map(|t| t.to_string()).collect();
    let kept = assessed(svc, plant, tags, &notes).await.unwrap();
    let (scratch, firsts) = from_scratch(svc, plant, &notes).await;
    for (i, tag) in TAGS.iter().enumerate() {
        assert!(
            same(&kept.healths[i], &scratch[i]),
            "{at}, {tag}:\n running {:?}\n scratch {:?}",
            kept.healths[i],
            scratch[i]
        );
        assert_eq!(kept.first[i], firsts[i], "{at}, {tag}: first period");
    }
    scratch
}

async fn month(db: &Scratch, window_days: i64) -> Vec<Status> {
    let store = &db.store;
    let (plant, revision) = plant_with_four_meters(store).await;
    let svc = Service::new(store.clone()).with_health_window(TimeDelta::days(window_days));
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(16);
    let mut late = Vec::new();
    let mut statuses = Vec::new();
    let note = |tag: &'static str, kind: NoteKind, at: i64| NoteDraft {
        tag,
        kind,
        text: "",
        effective_at: hour(at),
        as_found: None,
        token_id: None,
    };
    for h in 0..720 {
        // Every 37th period arrives a day late.
        if h % 37 == 11 {
            late.push((h + 24, h));
        } else {
            record(store, &plant, revision, rows_of(h, &mut rng)).await;
        }
        for (_, p) in late.iter().filter(|(due, _)| *due == h) {
            record(store, &plant, revision, rows_of(*p, &mut rng)).await;
        }
        // Every 50 hours, the period of 10 hours ago is run again with changed rows.
        if h % 50 == 49 {
            record(store, &plant, revision, rows_of(h - 10, &mut rng)).await;
        }
        let notes = [
            (260, note("FT-1", NoteKind::Recalibrated, 255)),
            (400, note("FT-3", NoteKind::Replaced, 390)),
            (450, note("FT-2", NoteKind::OutOfService, 440)),
            (470, note("FT-2", NoteKind::BackInService, 465)),
            (600, note("FT-4", NoteKind::Checked, 600)),
        ];
        for (_, draft) in notes.iter().filter(|(at, _)| *at == h) {
            stored(store.add_note(&plant, draft, &|_| Ok(None)).await.unwrap());
            compare(&svc, &plant, &format!("after a note at hour {h}")).await;
        }
        if h % 12 == 0 || (145..=260).contains(&h) || (300..=312).contains(&h) {
            let scratch = compare(&svc, &plant, &format!("hour {h}")).await;
            statuses.extend(scratch.iter().map(|h| h.status));
        }
    }
    statuses
}

async fn a_month_with_reruns_late_periods_and_notes_reads_as_from_scratch(db: Scratch) {
    // Over the month the meters pass through each state the data makes: suspects (two of
    // them correlated), frozen, missing, out of range.
    let statuses = month(&db, 90).await;
    for status in [
        Status::Suspect,
        Status::Watch,
        Status::Frozen,
        Status::Ok,
        Status::Missing,
        Status::OutOfRange,
    ] {
        assert!(statuses.contains(&status), "{status:?} never seen");
    }
    // A window shorter than the month: the records' starts move with every period, dropping
    // the oldest (and rebuilding when an excursion began before the new start).
    let short = Scratch::sqlite().await;
    let statuses = month(&short, 5).await;
    assert!(statuses.contains(&Status::Suspect));
}

async fn stray_periods_decades_earlier_stay_out_of_the_evidence(db: Scratch) {
    let store = &db.store;
    let (plant, revision) = plant_with_four_meters(store).await;
    let svc = Service::new(store.clone());
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
    let stray = t("1996-05-01T00:00:00Z");
    let mut rows = rows_of(0, &mut rng);
    for (_, p) in &mut rows {
        p.period_start = stray;
        // Far off the meter's other data: alone it would lean the CUSUM.
        p.normalized = Some(-4.0);
        p.adjustment = Some(-2.8);
    }
    record(store, &plant, revision, rows).await;
    for h in 0..48 {
        record(store, &plant, revision, rows_of(h, &mut rng)).await;
    }
    // A stray period recorded after the others as well (a late one).
    let mut rows = rows_of(0, &mut rng);
    for (_, p) in &mut rows {
        p.period_start = stray - TimeDelta::days(1);
    }
    record(store, &plant, revision, rows).await;
    let scratch = compare(&svc, &plant, "with stray periods").await;
    for h in &scratch {
        assert_eq!(h.periods, 48);
        assert!(h.evidence_since.is_none_or(|s| s >= hour(0)), "{h:?}");
    }
    let notes = svc.store.notes(&plant, None).await.unwrap();
    let kept = assessed(&svc, &plant, TAGS.map(String::from).to_vec(), &notes)
        .await
        .unwrap();
    assert!(kept.first.iter().all(|f| *f == Some(hour(0))));
    assert!(kept
        .since
        .iter()
        .all(|s| *s == hour(47) - TimeDelta::days(90)));
}
