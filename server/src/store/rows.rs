//! The store's row types, the same whichever backend holds them, and how each is decoded from a
//! result row: one function per type, generic over [`StoreRow`], serves both backends.

use std::collections::BTreeMap;
use std::fmt;

use chrono::{DateTime, Utc};
use reconcile::{ModelSpec, Quality, Reading, ReportStatus};
use sqlx::types::Json;

use super::values::{JsonText, StoreRow};
use super::{Result, StoreError};
use crate::health::MeterPeriod;

#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PlantRow {
    pub id: i64,
    pub name: String,
    pub created_at: DateTime<Utc>,
}

#[derive(Debug, Clone, PartialEq)]
pub struct ModelRevision {
    pub revision: i64,
    pub effective_from: DateTime<Utc>,
    pub spec: ModelSpec,
    /// The model as the user sent it (TOML or JSON).
    pub source: String,
    pub created_at: DateTime<Utc>,
}

/// One meter of one revision, as the service queries them by tag.
#[derive(Debug, Clone, PartialEq)]
pub struct MeterRow {
    pub tag: String,
    pub stream: String,
    pub quantity: String,
    pub component: Option<String>,
    pub uom: String,
    pub range: Option<[f64; 2]>,
}

/// What one batch did: `accepted` readings were new, `replaced` changed the value or quality
/// of a stored one, `unchanged` were identical resends.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct IngestCounts {
    pub accepted: usize,
    pub replaced: usize,
    pub unchanged: usize,
}

/// A reading as stored, with what the store knows about it.
#[derive(Debug, Clone, PartialEq)]
pub struct StoredReading {
    pub reading: Reading,
    pub received_at: DateTime<Utc>,
    /// Outside the meter's instrument range when it was stored.
    pub out_of_range: bool,
}

/// A run to record: what it ran on and what it answered.
#[derive(Debug, Clone, PartialEq)]
pub struct NewRun {
    pub period_start: DateTime<Utc>,
    /// The model revision it used.
    pub revision: i64,
    pub engine_version: String,
    /// The report's status.
    pub status: ReportStatus,
    pub report: serde_json::Value,
    /// The period's meter values as the engine saw them, so a run can be explained and
    /// repeated after later readings replaced them.
    pub inputs: serde_json::Value,
    /// Each meter's figures in this run, for its health record (replacing the period's
    /// earlier rows).
    pub meters: Vec<(String, MeterPeriod)>,
}

impl NewRun {
    /// The run as the store writes it: report and inputs as JSON text, and the report's loop
    /// figures and whether it passed the global test (none without a test), which the store
    /// keeps in columns beside the report. A report without figures (no data) has none.
    pub fn prepare(&self) -> Result<PreparedRun> {
        let figures = match self.report.get("figures") {
            None | Some(serde_json::Value::Null) => Vec::new(),
            // Read in place, not from a copy of the list.
            Some(list) => <Vec<reconcile::report::Figure> as serde::Deserialize>::deserialize(list)
                .map_err(|e| {
                    StoreError::Corrupt(format!("a report's figures do not read back: {e}"))
                })?,
        };
        let global_test_passed = self
            .report
            .get("global_test")
            .and_then(|t| t.get("passed"))
            .and_then(serde_json::Value::as_bool);
        Ok(PreparedRun {
            period_start: self.period_start,
            revision: self.revision,
            engine_version: self.engine_version.clone(),
            status: self.status,
            report: JsonText::of(&self.report)?,
            inputs: JsonText::of(&self.inputs)?,
            figures,
            global_test_passed,
            meters: self.meters.clone(),
        })
    }
}

/// A run ready to write: everything the store writes, already serialised, so that the
/// transaction recording it holds the database only for its statements. Made with
/// [`PreparedRun::from_report`] or [`NewRun::prepare`].
#[derive(Debug, Clone, PartialEq)]
pub struct PreparedRun {
    pub(super) period_start: DateTime<Utc>,
    pub(super) revision: i64,
    pub(super) engine_version: String,
    pub(super) status: ReportStatus,
    pub(super) report: JsonText,
    pub(super) inputs: JsonText,
    /// The report's loop figures, kept in columns beside it.
    pub(super) figures: Vec<reconcile::report::Figure>,
    /// Whether the report passed its global test; none without a test.
    pub(super) global_test_passed: Option<bool>,
    pub(super) meters: Vec<(String, MeterPeriod)>,
}

impl PreparedRun {
    /// The run of a period from the engine's typed report and the inputs it ran on, serialised
    /// once (no intermediate JSON tree).
    pub fn from_report<I: serde::Serialize>(
        period_start: DateTime<Utc>,
        revision: i64,
        report: &reconcile::Report,
        inputs: &I,
        meters: Vec<(String, MeterPeriod)>,
    ) -> Result<PreparedRun> {
        Ok(PreparedRun {
            period_start,
            revision,
            engine_version: reconcile::ENGINE_VERSION.to_string(),
            status: report.status,
            report: JsonText::of(report)?,
            inputs: JsonText::of(inputs)?,
            figures: report.figures.clone(),
            global_test_passed: report.global_test.as_ref().map(|t| t.passed),
            meters,
        })
    }
}

/// A current run without its report and inputs, for listings.
#[derive(Debug, Clone, PartialEq)]
pub struct RunSummary {
    pub id: i64,
    pub period_start: DateTime<Utc>,
    pub revision: i64,
    pub status: ReportStatus,
    pub created_at: DateTime<Utc>,
    /// How many runs the period has had, this one included.
    pub runs: i64,
}

#[derive(Debug, Clone, PartialEq)]
pub struct RunRow {
    pub id: i64,
    pub run: NewRun,
    pub created_at: DateTime<Utc>,
    pub current: bool,
}

/// A technician's note on a meter.
#[derive(Debug, Clone, PartialEq)]
pub struct MeterNote {
    pub id: i64,
    pub tag: String,
    pub kind: NoteKind,
    pub text: String,
    pub effective_at: DateTime<Utc>,
    pub created_at: DateTime<Utc>,
    /// The error the technician measured before recalibrating, in the meter's uom (positive:
    /// read high); only on a `recalibrated` note.
    pub as_found: Option<f64>,
}

/// A note to record.
#[derive(Debug, Clone, PartialEq)]
pub struct NoteDraft<'a> {
    pub tag: &'a str,
    pub kind: NoteKind,
    pub text: &'a str,
    pub effective_at: DateTime<Utc>,
    pub as_found: Option<f64>,
    pub token_id: Option<i64>,
}

/// What became of a note offered to [`Store::add_note`](super::Store::add_note).
#[derive(Debug, Clone, PartialEq)]
pub enum NoteOutcome {
    /// Recorded, and this many periods already run marked to run again.
    Stored { note: MeterNote, marked: u64 },
    /// The check refused it against the tag's notes (the sentence says why); nothing stored.
    Refused(String),
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NoteKind {
    Checked,
    Recalibrated,
    Replaced,
    OutOfService,
    BackInService,
}

impl NoteKind {
    /// Every kind, in the order the API lists them.
    pub const ALL: [NoteKind; 5] = [
        NoteKind::Checked,
        NoteKind::Recalibrated,
        NoteKind::Replaced,
        NoteKind::OutOfService,
        NoteKind::BackInService,
    ];

    pub fn as_str(self) -> &'static str {
        match self {
            NoteKind::Checked => "checked",
            NoteKind::Recalibrated => "recalibrated",
            NoteKind::Replaced => "replaced",
            NoteKind::OutOfService => "out_of_service",
            NoteKind::BackInService => "back_in_service",
        }
    }

    pub fn parse(text: &str) -> Option<NoteKind> {
        NoteKind::ALL.into_iter().find(|k| k.as_str() == text)
    }

    /// Does this note start a fresh history?
    pub fn resets(self) -> bool {
        matches!(self, NoteKind::Recalibrated | NoteKind::Replaced)
    }
}

/// A held claim on one dirty period.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Claim {
    /// The instance that holds it.
    pub instance: String,
    pub period_start: DateTime<Utc>,
    /// The period's dirty mark when it was claimed: a later mark means readings changed
    /// during the run, and the period must run again.
    pub marked_at: DateTime<Utc>,
}

/// How a recorded run settled its claim.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Settled {
    /// The period's mark was deleted: its current run is up to date.
    Cleared,
    /// Readings changed the period during the run: the mark stays, unclaimed, and the period
    /// runs again.
    StillDirty,
}

/// A period whose run was abandoned (migrations/0006_run_failures.sql): why, how often since
/// its last recorded run, and when it may be claimed again.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RunFailure {
    pub period_start: DateTime<Utc>,
    /// Abandoned runs since the period's last recorded one (at least 1).
    pub failures: i64,
    /// Why the last one was abandoned.
    pub reason: String,
    pub failed_at: DateTime<Utc>,
    /// Claims skip the period until then.
    pub retry_after: DateTime<Utc>,
}

/// The roles of docs/api.md ("Tokens and roles"); `admin` may do everything.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Role {
    Ingest,
    Read,
    Maintain,
    Admin,
}

impl Role {
    pub fn as_str(self) -> &'static str {
        match self {
            Role::Ingest => "ingest",
            Role::Read => "read",
            Role::Maintain => "maintain",
            Role::Admin => "admin",
        }
    }

    pub fn parse(text: &str) -> Option<Role> {
        match text {
            "ingest" => Some(Role::Ingest),
            "read" => Some(Role::Read),
            "maintain" => Some(Role::Maintain),
            "admin" => Some(Role::Admin),
            _ => None,
        }
    }
}

impl fmt::Display for Role {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A token just made. `token` is the only copy of the plaintext: show it once.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct NewToken {
    pub id: i64,
    pub token: String,
    pub role: Role,
    pub plant: Option<String>,
}

/// What a verified token allows.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Grant {
    pub token_id: i64,
    pub role: Role,
    /// The one plant it may touch; every plant when `None`.
    pub plant: Option<String>,
}

impl Grant {
    /// May this token do what `needed` may, on `plant`?
    pub fn permits(&self, needed: Role, plant: &str) -> bool {
        let role_ok = self.role == Role::Admin || self.role == needed;
        let plant_ok = self.plant.as_deref().is_none_or(|p| p == plant);
        role_ok && plant_ok
    }
}

pub(super) fn quality_str(q: Quality) -> &'static str {
    match q {
        Quality::Good => "good",
        Quality::Uncertain => "uncertain",
        Quality::Bad => "bad",
    }
}

/// A text column that must hold one of an enumeration's names (`what` names it in the error).
fn named<R: StoreRow, T>(
    r: &R,
    column: &str,
    what: &str,
    parse: fn(&str) -> Option<T>,
) -> Result<T> {
    let text: String = r.read(column)?;
    parse(&text).ok_or_else(|| StoreError::Corrupt(format!("{what} \"{text}\"")))
}

// Each decoder reads the columns of the SELECTs that name it (by name, so their order there
// does not matter).

/// `id, name, created_at` of `plants`.
pub(super) fn plant<R: StoreRow>(r: &R) -> Result<PlantRow> {
    Ok(PlantRow {
        id: r.read("id")?,
        name: r.read("name")?,
        created_at: r.instant("created_at")?,
    })
}

/// `revision, effective_from, model_json, source, created_at` of `model_revisions`.
pub(super) fn revision<R: StoreRow>(r: &R) -> Result<ModelRevision> {
    let revision: i64 = r.read("revision")?;
    let json: String = r.read("model_json")?;
    let spec = serde_json::from_str(&json).map_err(|e| {
        StoreError::Corrupt(format!("model revision {revision} does not parse: {e}"))
    })?;
    Ok(ModelRevision {
        revision,
        effective_from: r.instant("effective_from")?,
        spec,
        source: r.read("source")?,
        created_at: r.instant("created_at")?,
    })
}

/// `tag, stream, quantity, component, uom, range_lo, range_hi` of `meters`.
pub(super) fn meter<R: StoreRow>(r: &R) -> Result<MeterRow> {
    let lo: Option<f64> = r.read("range_lo")?;
    let hi: Option<f64> = r.read("range_hi")?;
    Ok(MeterRow {
        tag: r.read("tag")?,
        stream: r.read("stream")?,
        quantity: r.read("quantity")?,
        component: r.read("component")?,
        uom: r.read("uom")?,
        range: lo.zip(hi).map(|(lo, hi)| [lo, hi]),
    })
}

/// `tag, time, value, quality, received_at, out_of_range` of `readings`.
pub(super) fn stored_reading<R: StoreRow>(r: &R) -> Result<StoredReading> {
    Ok(StoredReading {
        reading: Reading {
            tag: r.read("tag")?,
            time: r.instant("time")?,
            value: r.read("value")?,
            quality: named(r, "quality", "quality", Quality::parse)?,
        },
        received_at: r.instant("received_at")?,
        out_of_range: r.read("out_of_range")?,
    })
}

/// `period_start, marked_at` of `dirty_periods`.
pub(super) fn dirty_period<R: StoreRow>(r: &R) -> Result<(DateTime<Utc>, DateTime<Utc>)> {
    Ok((r.instant("period_start")?, r.instant("marked_at")?))
}

/// Every column of `run_failures` but the plant.
pub(super) fn run_failure<R: StoreRow>(r: &R) -> Result<RunFailure> {
    Ok(RunFailure {
        period_start: r.instant("period_start")?,
        failures: r.read("failures")?,
        reason: r.read("reason")?,
        failed_at: r.instant("failed_at")?,
        retry_after: r.instant("retry_after")?,
    })
}

/// `period_start, marked_at` of `dirty_periods`, as claims of `instance`, oldest first.
pub(super) fn claims<R: StoreRow>(instance: &str, rows: &[R]) -> Result<Vec<Claim>> {
    let mut claims = rows
        .iter()
        .map(|r| {
            let (period_start, marked_at) = dirty_period(r)?;
            Ok(Claim {
                instance: instance.to_string(),
                period_start,
                marked_at,
            })
        })
        .collect::<Result<Vec<_>>>()?;
    claims.sort_by_key(|c| c.period_start);
    Ok(claims)
}

/// `id, role, plant` of `api_tokens`.
pub(super) fn grant<R: StoreRow>(r: &R) -> Result<Grant> {
    Ok(Grant {
        token_id: r.read("id")?,
        role: named(r, "role", "token role", Role::parse)?,
        plant: r.read("plant")?,
    })
}

/// The columns of `runs` but `plant_id` (`runs::COLUMNS`); a run's meter rows are not read
/// with it.
pub(super) fn run<R: StoreRow>(r: &R) -> Result<RunRow> {
    let Json(report) = r.read("report_json")?;
    let Json(inputs) = r.read("inputs_json")?;
    Ok(RunRow {
        id: r.read("id")?,
        run: NewRun {
            period_start: r.instant("period_start")?,
            revision: r.read("revision")?,
            engine_version: r.read("engine_version")?,
            status: named(r, "status", "run status", ReportStatus::parse)?,
            report,
            inputs,
            meters: Vec::new(),
        },
        created_at: r.instant("created_at")?,
        current: r.read("current")?,
    })
}

/// `id, period_start, revision, status, created_at` of `runs` and their count as `runs`.
pub(super) fn run_summary<R: StoreRow>(r: &R) -> Result<RunSummary> {
    Ok(RunSummary {
        id: r.read("id")?,
        period_start: r.instant("period_start")?,
        revision: r.read("revision")?,
        status: named(r, "status", "run status", ReportStatus::parse)?,
        created_at: r.instant("created_at")?,
        runs: r.read("runs")?,
    })
}

/// `period_start` and the JSON object `part` of a current report.
pub(super) fn report_part<R: StoreRow>(r: &R) -> Result<(DateTime<Utc>, serde_json::Value)> {
    let Json(part) = r.read("part")?;
    Ok((r.instant("period_start")?, part))
}

/// Every column of `meter_periods`.
pub(super) fn meter_period<R: StoreRow>(r: &R) -> Result<(String, MeterPeriod)> {
    let Json(correlations): Json<BTreeMap<String, f64>> = r.read("correlations")?;
    let mut period = meter_period_narrow(r)?;
    period.correlations = correlations;
    Ok((r.read("tag")?, period))
}

/// The columns of `meter_periods` but its tag and correlations (left empty).
pub(super) fn meter_period_narrow<R: StoreRow>(r: &R) -> Result<MeterPeriod> {
    Ok(MeterPeriod {
        period_start: r.instant("period_start")?,
        measured: r.read("measured")?,
        reconciled: r.read("reconciled")?,
        sigma: r.read("sigma")?,
        adjustment: r.read("adjustment")?,
        adjustment_sigma: r.read("adjustment_sigma")?,
        normalized: r.read("normalized_adjustment")?,
        redundant: r.read("redundant")?,
        flagged: r.read("flagged")?,
        readings: r.read("readings")?,
        bad_readings: r.read("bad_readings")?,
        out_of_range_readings: r.read("out_of_range_readings")?,
        correlations: BTreeMap::new(),
    })
}

/// `id, tag, kind, text, effective_at, created_at, as_found` of `meter_notes`.
pub(super) fn note<R: StoreRow>(r: &R) -> Result<MeterNote> {
    Ok(MeterNote {
        id: r.read("id")?,
        tag: r.read("tag")?,
        kind: named(r, "kind", "note kind", NoteKind::parse)?,
        text: r.read("text")?,
        effective_at: r.instant("effective_at")?,
        created_at: r.instant("created_at")?,
        as_found: r.read("as_found")?,
    })
}

/// A period's current run as a series of figures needs it: its status and whether it passed
/// the global test (none without a test).
#[derive(Debug, Clone, PartialEq)]
pub struct PeriodOutcome {
    pub period_start: DateTime<Utc>,
    pub status: ReportStatus,
    pub global_test_passed: Option<bool>,
}

/// A loop figure's identity: its name, what it is of, and its unit.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct FigureKey {
    pub name: String,
    pub subject: String,
    pub uom: String,
}

/// One figure of one period's current run.
#[derive(Debug, Clone, PartialEq)]
pub struct FigureCell {
    pub period_start: DateTime<Utc>,
    pub key: FigureKey,
    pub value: Option<f64>,
    pub sigma: Option<f64>,
}

/// `period_start, status, global_test_passed` of `runs`.
pub(super) fn period_outcome<R: StoreRow>(r: &R) -> Result<PeriodOutcome> {
    Ok(PeriodOutcome {
        period_start: r.instant("period_start")?,
        status: named(r, "status", "run status", ReportStatus::parse)?,
        global_test_passed: r.read("global_test_passed")?,
    })
}

/// `name, subject, uom` of `period_figures`.
pub(super) fn figure_key<R: StoreRow>(r: &R) -> Result<FigureKey> {
    Ok(FigureKey {
        name: r.read("name")?,
        subject: r.read("subject")?,
        uom: r.read("uom")?,
    })
}

/// `period_start, name, subject, uom, value, sigma` of `period_figures`.
pub(super) fn figure_cell<R: StoreRow>(r: &R) -> Result<FigureCell> {
    Ok(FigureCell {
        period_start: r.instant("period_start")?,
        key: figure_key(r)?,
        value: r.read("value")?,
        sigma: r.read("sigma")?,
    })
}
