//! Hourly runs: a background worker reconciles every period whose inputs changed (its dirty
//! mark) once the period is closed — its end plus a grace delay has passed, so the historian's
//! late readings of the hour are in — and again whenever a reading of it is added or replaced.
//! The solve itself runs on a blocking thread so requests keep flowing.
//!
//! Several instances may share one database: each period is claimed before it runs (see
//! `store::claims`), for a lease the instance renews while the run goes on, and its run is
//! recorded only while the claim is held. No period runs on two instances at once, and the
//! claims of an instance that dies lapse, so its periods are taken by another.
//!
//! A run is: the model revision in effect at the period's start, the period's stored readings,
//! each meter's mean of good and uncertain readings, the steadiness screen, the engine, and the
//! whole report stored as a new current run (earlier runs stay as history).

use std::sync::Arc;
use std::time::{Duration, Instant};

use chrono::{DateTime, TimeDelta, Utc};
use std::collections::{BTreeMap, HashMap};

use reconcile::{Analysis, PeriodInput, Plant, Quality, Reading, Report};
use serde::Serialize;
use tokio::sync::{watch, Notify};

use crate::api::AppState;
use crate::health::MeterPeriod;
use crate::ingest::in_effect;
use crate::store::{Claim, NewRun, PlantRow, Store, StoreError};

/// When the worker runs periods.
#[derive(Debug, Clone, Copy)]
pub struct Schedule {
    /// A period is closed this long after its end.
    pub grace: Duration,
    /// How often the worker looks for due periods (it also wakes on every stored batch).
    pub tick: Duration,
    /// Periods run at once (each solve on its own blocking thread).
    pub workers: usize,
}

/// Who claims periods, and for how long: this instance among those sharing the database.
#[derive(Debug, Clone)]
pub struct Claimant {
    /// This instance's name in its claims: unique among the instances sharing the database.
    pub instance: String,
    /// How long a claim lasts unless renewed; a run renews it every third of this.
    pub lease: Duration,
}

impl Default for Claimant {
    fn default() -> Claimant {
        Claimant {
            instance: instance_name(None),
            lease: Duration::from_secs(60),
        }
    }
}

impl Default for Schedule {
    fn default() -> Schedule {
        Schedule {
            grace: Duration::from_secs(300),
            tick: Duration::from_secs(30),
            workers: default_workers(),
        }
    }
}

/// An instance name for claims: `label` (the host's name when absent or blank), the process id
/// and a random suffix, so that two instances never share one even when given the same label.
pub fn instance_name(label: Option<&str>) -> String {
    let host = || {
        std::fs::read_to_string("/proc/sys/kernel/hostname")
            .ok()
            .or_else(|| std::env::var("HOSTNAME").ok())
            .map(|h| h.trim().to_string())
            .filter(|h| !h.is_empty())
            .unwrap_or_else(|| "loopbal".into())
    };
    let label = label
        .map(str::trim)
        .filter(|l| !l.is_empty())
        .map_or_else(host, str::to_string);
    format!(
        "{label}/{}/{:08x}",
        std::process::id(),
        rand::random::<u32>()
    )
}

/// One worker per core.
pub fn default_workers() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

/// A meter whose readings within one period spread over more than this many σ makes the
/// period unsteady. The range of n independent normal readings exceeds 8σ with probability
/// well below 10⁻³ for n up to 100 (mean range of 100 readings about 5.0σ, sd near 0.4σ; from
/// memory), so a wider spread means the process moved within the period, not noise.
pub const UNSTEADY_SPREAD_SIGMAS: f64 = 8.0;

/// The period's inputs as the engine saw them, stored with every run.
#[derive(Debug, Clone, Serialize)]
pub struct RunInputs {
    pub revision: i64,
    /// Readings found in the period, of any quality.
    pub readings: usize,
    pub meters: Vec<MeterInput>,
    /// Tags of the revision with no usable reading in the period (unmeasured this period).
    pub missing: Vec<String>,
    /// Tags whose readings spread beyond the steadiness screen.
    pub unsteady: Vec<String>,
}

#[derive(Debug, Clone, Serialize)]
pub struct MeterInput {
    pub tag: String,
    /// Mean of the good and uncertain readings, in the meter's uom.
    pub value: f64,
    pub readings: usize,
    pub used_uncertain: bool,
    pub spread: f64,
}

/// Why a period could not be run.
#[derive(Debug, thiserror::Error)]
pub enum RunError {
    #[error("plant \"{0}\" has no model")]
    NoModel(String),
    #[error(transparent)]
    Store(#[from] StoreError),
    #[error("the engine stopped unexpectedly: {0}")]
    Engine(String),
}

/// The outcome of one run.
#[derive(Debug, Clone)]
pub struct RunOutcome {
    pub run_id: i64,
    pub report: Report,
    pub inputs: RunInputs,
}

/// Run one period now and store the run as its current one. If the period is dirty and no
/// other instance holds it, it is claimed first and the run settles its mark; if another
/// instance is running it, this run is recorded as well, and whichever is recorded last is
/// current.
pub async fn run_period(
    state: &AppState,
    plant: &PlantRow,
    start: DateTime<Utc>,
) -> Result<RunOutcome, RunError> {
    let claimant = &state.claimant;
    let claim = state
        .store
        .claim_due(plant, &claimant.instance, start..=start, claimant.lease, 1)
        .await?
        .pop();
    match claim {
        Some(claim) => {
            let models = Models::load(&state.store, plant).await?;
            run_claimed(state, plant, &models, &claim, claimant.lease).await
        }
        None => {
            let (model, revision) = model_at(&state.store, plant, start).await?;
            run_period_with(state, plant, start, model, revision, None).await
        }
    }
}

/// [`run_period`] with the model already resolved; with a claim, the run is recorded only
/// while the claim is held, and settles it.
async fn run_period_with(
    state: &AppState,
    plant: &PlantRow,
    start: DateTime<Utc>,
    model: Arc<Plant>,
    revision: i64,
    claim: Option<&Claim>,
) -> Result<RunOutcome, RunError> {
    let began = Instant::now();
    let end = start + TimeDelta::seconds(model.period_seconds);
    let stored = state.store.readings_in(plant, start, end).await?;
    // Per tag: (bad readings, readings outside the instrument range), for the health screens.
    let mut screens: HashMap<String, (i64, i64)> = HashMap::new();
    for s in &stored {
        let e = screens.entry(s.reading.tag.clone()).or_default();
        e.0 += i64::from(s.reading.quality == Quality::Bad);
        e.1 += i64::from(s.out_of_range);
    }
    let readings: Vec<Reading> = stored.into_iter().map(|s| s.reading).collect();
    let engine_model = Arc::clone(&model);
    let (report, inputs, correlations) = tokio::task::spawn_blocking(move || {
        let input = period_input(&engine_model, &readings, start);
        let (unsteady, warnings) = steadiness(&engine_model, &input);
        let analysis = reconcile::analyse_period(&engine_model, &input);
        let correlations = correlations_by_tag(&engine_model, &analysis);
        let mut report = analysis.report;
        report.warnings.extend(warnings);
        let inputs = run_inputs(&engine_model, &input, revision, readings.len(), unsteady);
        (report, inputs, correlations)
    })
    .await
    .map_err(|e| RunError::Engine(e.to_string()))?;
    let status = serde_json::to_value(report.status)
        .ok()
        .and_then(|v| v.as_str().map(str::to_string))
        .unwrap_or_else(|| "unknown".into());
    let meters = meter_rows(&report, start, &screens, correlations);
    let run = NewRun {
        meters,
        period_start: start,
        revision,
        engine_version: reconcile::ENGINE_VERSION.to_string(),
        status: status.clone(),
        report: serde_json::to_value(&report)
            .map_err(|e| RunError::Engine(format!("report does not serialise: {e}")))?,
        inputs: serde_json::to_value(&inputs)
            .map_err(|e| RunError::Engine(format!("inputs do not serialise: {e}")))?,
    };
    let run_id = match claim {
        Some(claim) => state.store.record_claimed_run(plant, &run, claim).await?.0,
        None => state.store.record_run(plant, &run).await?,
    };
    state.metrics.run(&status, began.elapsed());
    tracing::info!(plant = %plant.name, period = %start, status = %status, "period run");
    Ok(RunOutcome {
        run_id,
        report,
        inputs,
    })
}

/// Each meter's figures of a report, for its health record.
fn meter_rows(
    report: &Report,
    start: DateTime<Utc>,
    screens: &HashMap<String, (i64, i64)>,
    mut correlations: HashMap<String, BTreeMap<String, f64>>,
) -> Vec<(String, MeterPeriod)> {
    report
        .meters
        .iter()
        .map(|m| {
            let (bad, out) = screens.get(&m.tag).copied().unwrap_or_default();
            (
                m.tag.clone(),
                MeterPeriod {
                    period_start: start,
                    measured: m.measured,
                    reconciled: m.reconciled,
                    sigma: m.sigma,
                    adjustment: m.adjustment,
                    adjustment_sigma: m.adjustment_sigma,
                    normalized: m.normalized_adjustment,
                    redundant: m.redundant,
                    flagged: m.suspect || m.measurement_test_failed,
                    readings: m.readings as i64,
                    bad_readings: bad,
                    out_of_range_readings: out,
                    correlations: correlations.remove(&m.tag).unwrap_or_default(),
                },
            )
        })
        .collect()
}

/// Smallest |ρ| kept in a meter's record.
const KEPT_CORRELATION: f64 = 0.2;

/// Each measured meter's adjustment correlations this period, by tag (see
/// `reconcile::Estimate::adjustment_correlations`): how a bias in it would show elsewhere,
/// which is how meter health tells the biased meter from those its balances drag along.
fn correlations_by_tag(
    plant: &Plant,
    analysis: &Analysis,
) -> HashMap<String, BTreeMap<String, f64>> {
    let mut out: HashMap<String, BTreeMap<String, f64>> = HashMap::new();
    let Some(est) = &analysis.estimate else {
        return out;
    };
    let tag = |k: usize| plant.meters[est.measured[k].meter].tag.clone();
    for (i, j, rho) in est.adjustment_correlations(KEPT_CORRELATION) {
        out.entry(tag(i)).or_default().insert(tag(j), rho);
    }
    out
}

/// A plant's model revisions, each validated once: which one applies at a time.
pub struct Models {
    plant: String,
    /// (effective_from, revision number, validated model).
    revisions: Vec<(DateTime<Utc>, i64, Arc<Plant>)>,
}

impl Models {
    pub async fn load(store: &Store, plant: &PlantRow) -> Result<Models, RunError> {
        let revisions = store
            .list_revisions(plant)
            .await?
            .into_iter()
            .map(|rev| {
                let model = Plant::new(rev.spec).map_err(|e| {
                    StoreError::Corrupt(format!(
                        "revision {} of plant {} no longer validates: {e}",
                        rev.revision, plant.name
                    ))
                })?;
                Ok((rev.effective_from, rev.revision, Arc::new(model)))
            })
            .collect::<Result<_, StoreError>>()?;
        Ok(Models {
            plant: plant.name.clone(),
            revisions,
        })
    }

    /// The model in effect at `t` (see `ingest::in_effect`) and its revision number.
    pub fn at(&self, t: DateTime<Utc>) -> Result<(Arc<Plant>, i64), RunError> {
        let keys: Vec<_> = self.revisions.iter().map(|(f, n, _)| (*f, *n)).collect();
        let i = in_effect(&keys, t).ok_or_else(|| RunError::NoModel(self.plant.clone()))?;
        let (_, revision, model) = &self.revisions[i];
        Ok((Arc::clone(model), *revision))
    }
}

/// The validated model of the revision in effect at `t`, and its number.
pub async fn model_at(
    store: &Store,
    plant: &PlantRow,
    t: DateTime<Utc>,
) -> Result<(Arc<Plant>, i64), RunError> {
    Models::load(store, plant).await?.at(t)
}

/// The period's input: each meter's mean of its good and uncertain readings.
fn period_input(plant: &Plant, readings: &[Reading], start: DateTime<Utc>) -> PeriodInput {
    reconcile::group_readings(plant, readings)
        .into_iter()
        .find(|p| p.start == start)
        .unwrap_or_else(|| PeriodInput {
            start,
            end: start + TimeDelta::seconds(plant.period_seconds),
            values: Vec::new(),
        })
}

/// Tags whose readings within the period spread beyond the screen, with a warning for each.
fn steadiness(plant: &Plant, input: &PeriodInput) -> (Vec<String>, Vec<String>) {
    let mut unsteady = Vec::new();
    let mut warnings = Vec::new();
    for v in &input.values {
        let meter = &plant.meters[v.meter];
        let Some(sigma) = meter.sigma_for(v.value) else {
            continue;
        };
        if v.readings >= 2 && v.spread > UNSTEADY_SPREAD_SIGMAS * sigma {
            warnings.push(format!(
                "unsteady: meter \"{}\" spread {:.4} {} within the period, {:.1} σ (screen {} σ); \
                 the period is reconciled on its mean, but the loop was moving",
                meter.tag,
                v.spread,
                meter.uom,
                v.spread / sigma,
                UNSTEADY_SPREAD_SIGMAS
            ));
            unsteady.push(meter.tag.clone());
        }
    }
    (unsteady, warnings)
}

fn run_inputs(
    plant: &Plant,
    input: &PeriodInput,
    revision: i64,
    readings: usize,
    unsteady: Vec<String>,
) -> RunInputs {
    let meters: Vec<MeterInput> = input
        .values
        .iter()
        .map(|v| MeterInput {
            tag: plant.meters[v.meter].tag.clone(),
            value: v.value,
            readings: v.readings,
            used_uncertain: v.used_uncertain,
            spread: v.spread,
        })
        .collect();
    let missing = plant
        .meters
        .iter()
        .filter(|m| !meters.iter().any(|v| v.tag == m.tag))
        .map(|m| m.tag.clone())
        .collect();
    RunInputs {
        revision,
        readings,
        meters,
        missing,
        unsteady,
    }
}

/// A plant with dirty periods in this pass: its models and the latest period start that is
/// closed.
struct Plan {
    plant: PlantRow,
    models: Arc<Models>,
    starts_up_to: DateTime<Utc>,
}

/// Claim and run every closed dirty period of every plant that no other instance holds, oldest
/// first per plant, the plants taking turns, up to `schedule.workers` at a time; returns how
/// many ran. A period is claimed only when a worker is free to run it, so no claim waits in a
/// queue while its lease runs down.
pub async fn run_due(state: &AppState, schedule: &Schedule) -> Result<usize, RunError> {
    let mut plans = plans(state, schedule).await?;
    let workers = schedule.workers.max(1);
    let claimant = &state.claimant;
    let mut ran = 0;
    let mut failure: Option<RunError> = None;
    let mut running = tokio::task::JoinSet::new();
    loop {
        while running.len() < workers && failure.is_none() {
            let Some(plan) = plans.front() else { break };
            let wanted = workers - running.len();
            let claims = match state
                .store
                .claim_due(
                    &plan.plant,
                    &claimant.instance,
                    DateTime::<Utc>::MIN_UTC..=plan.starts_up_to,
                    claimant.lease,
                    wanted,
                )
                .await
            {
                Ok(claims) => claims,
                Err(e) => {
                    failure = Some(e.into());
                    break;
                }
            };
            if claims.len() < wanted {
                // Nothing more of this plant is free this pass.
                let plan = plans.pop_front().expect("a plan");
                spawn_runs(&mut running, state, &plan, claims, claimant.lease);
            } else {
                spawn_runs(&mut running, state, plan, claims, claimant.lease);
                plans.rotate_left(1);
            }
        }
        let Some(joined) = running.join_next().await else {
            break;
        };
        match joined.map_err(|e| RunError::Engine(e.to_string())) {
            Ok((_, _, Ok(_))) => ran += 1,
            Ok((plant, start, Err(RunError::Store(StoreError::ClaimLost(_))))) => {
                tracing::warn!(plant = %plant, period = %start,
                    "period run outlived its claim; another instance ran the period, this result was dropped");
            }
            Ok((_, _, Err(RunError::Store(e)))) => {
                failure.get_or_insert(e.into());
            }
            Ok((plant, start, Err(e))) => {
                tracing::error!(plant = %plant, period = %start, error = %e, "period run failed");
            }
            Err(e) => {
                failure.get_or_insert(e);
            }
        }
    }
    match failure {
        Some(e) => Err(e),
        None => Ok(ran),
    }
}

/// The plants with dirty periods, each with its validated models and closing time.
async fn plans(
    state: &AppState,
    schedule: &Schedule,
) -> Result<std::collections::VecDeque<Plan>, RunError> {
    let now = Utc::now();
    let grace = TimeDelta::from_std(schedule.grace).unwrap_or(TimeDelta::zero());
    let mut plans = std::collections::VecDeque::new();
    for plant in state.store.plants().await? {
        if !state.store.has_dirty_periods(&plant).await? {
            continue;
        }
        // Revisions are read and validated once per plant and pass, not once per period.
        let models = match Models::load(&state.store, &plant).await {
            Ok(models) => models,
            Err(RunError::Store(e)) => return Err(e.into()),
            Err(_) => continue,
        };
        let Ok((current, _)) = models.at(now) else {
            continue;
        };
        let starts_up_to = now - TimeDelta::seconds(current.period_seconds) - grace;
        plans.push_back(Plan {
            plant,
            models: Arc::new(models),
            starts_up_to,
        });
    }
    Ok(plans)
}

type Joined = (String, DateTime<Utc>, Result<RunOutcome, RunError>);

fn spawn_runs(
    running: &mut tokio::task::JoinSet<Joined>,
    state: &AppState,
    plan: &Plan,
    claims: Vec<Claim>,
    lease: Duration,
) {
    for claim in claims {
        let state = state.clone();
        let plant = plan.plant.clone();
        let models = Arc::clone(&plan.models);
        running.spawn(async move {
            let start = claim.period_start;
            let outcome = run_claimed(&state, &plant, &models, &claim, lease).await;
            (plant.name, start, outcome)
        });
    }
}

/// Run a claimed period, renewing the claim every third of its lease until the run is
/// recorded; a run that fails gives its claim up, so the period stays dirty and runs again.
async fn run_claimed(
    state: &AppState,
    plant: &PlantRow,
    models: &Models,
    claim: &Claim,
    lease: Duration,
) -> Result<RunOutcome, RunError> {
    let start = claim.period_start;
    let outcome = match models.at(start) {
        Ok((model, revision)) => {
            let run = run_period_with(state, plant, start, model, revision, Some(claim));
            tokio::pin!(run);
            let mut beat = tokio::time::interval((lease / 3).max(Duration::from_millis(1)));
            beat.tick().await; // the first tick is immediate: the claim is fresh
            loop {
                tokio::select! {
                    outcome = &mut run => break outcome,
                    _ = beat.tick() => match state.store.renew_claim(plant, claim, lease).await {
                        Ok(true) => {}
                        Ok(false) => tracing::warn!(plant = %plant.name, period = %start,
                            "the claim on this period lapsed during its run; its result will be refused"),
                        Err(e) => tracing::warn!(plant = %plant.name, period = %start, error = %e,
                            "could not renew the claim on this period"),
                    },
                }
            }
        }
        Err(e) => Err(e),
    };
    if let Err(e) = &outcome {
        if !matches!(e, RunError::Store(StoreError::ClaimLost(_))) {
            if let Err(release) = state.store.release_claim(plant, claim).await {
                tracing::warn!(plant = %plant.name, period = %start, error = %release,
                    "could not give up the claim of a failed run; it lapses with its lease");
            }
        }
    }
    outcome
}

/// The background worker: runs due periods on every tick and whenever `wake` is notified,
/// until `stop` turns true. A run in progress is finished before it stops.
pub async fn worker(
    state: AppState,
    schedule: Schedule,
    wake: Arc<Notify>,
    mut stop: watch::Receiver<bool>,
) {
    loop {
        if *stop.borrow() {
            break;
        }
        if let Err(e) = run_due(&state, &schedule).await {
            tracing::error!(error = %e, "scheduler pass failed; retrying on the next tick");
        }
        tokio::select! {
            _ = tokio::time::sleep(schedule.tick) => {}
            _ = wake.notified() => {}
            _ = stop.changed() => {}
        }
    }
    tracing::info!("scheduler stopped");
}

#[cfg(test)]
mod tests {
    use reconcile::period::MeterValue;

    use super::*;

    const MODEL: &str = r#"
name = "tee"
[[component]]
id = "A"
molar_mass = 2.0
[[unit]]
id = "n"
kind = "node"
[[stream]]
id = "in"
from = "outside"
to = "n"
[[stream]]
id = "out"
from = "n"
to = "outside"
[[meter]]
tag = "F-1"
stream = "in"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
[[meter]]
tag = "F-2"
stream = "out"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
"#;

    #[test]
    fn instance_names_never_collide_and_keep_their_label() {
        let a = instance_name(Some("unit-7"));
        let b = instance_name(Some("unit-7"));
        assert!(a.starts_with("unit-7/"), "{a}");
        assert_ne!(a, b, "the same label twice still makes two names");
        assert!(a.contains(&format!("/{}/", std::process::id())), "{a}");
        // A blank label is no label: the host's name (never an empty one) stands in.
        let blank = instance_name(Some("  "));
        assert!(!blank.starts_with('/'), "{blank}");
    }

    #[test]
    fn a_spread_beyond_eight_sigma_makes_the_period_unsteady() {
        let plant = reconcile::parse_plant(MODEL).unwrap();
        let value = |meter, spread| MeterValue {
            meter,
            value: 100.0,
            readings: 4,
            used_uncertain: false,
            spread,
        };
        let start = Utc::now();
        let input = PeriodInput {
            start,
            end: start,
            values: vec![value(0, 7.9), value(1, 8.1)],
        };
        let (unsteady, warnings) = steadiness(&plant, &input);
        assert_eq!(unsteady, ["F-2"]);
        assert!(
            warnings[0].contains("F-2") && warnings[0].contains("8.1 σ"),
            "{warnings:?}"
        );
        // One reading has no spread to judge.
        let input = PeriodInput {
            start,
            end: start,
            values: vec![MeterValue {
                readings: 1,
                ..value(0, 50.0)
            }],
        };
        assert!(steadiness(&plant, &input).0.is_empty());
    }

    #[test]
    fn run_inputs_list_the_missing_tags() {
        let plant = reconcile::parse_plant(MODEL).unwrap();
        let start = Utc::now();
        let input = PeriodInput {
            start,
            end: start,
            values: vec![MeterValue {
                meter: 1,
                value: 3.0,
                readings: 2,
                used_uncertain: true,
                spread: 0.1,
            }],
        };
        let inputs = run_inputs(&plant, &input, 4, 3, vec![]);
        assert_eq!(inputs.missing, ["F-1"]);
        assert_eq!(inputs.meters[0].tag, "F-2");
        assert_eq!(inputs.revision, 4);
    }
}
