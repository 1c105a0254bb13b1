//! The service over HTTP: new readings, identical resends and changed resends POSTed as CSV
//! batches, and the service's own check of the same bodies without the store.

use std::time::{Duration, Instant};

use loopbal_server::api::{AppState, Limits};
use loopbal_server::ingest::{self, Catalogue};
use loopbal_server::readings::Format;
use loopbal_server::store::Store;
use testkit::bench::{refuse_unless, Db, InProcess};

use crate::figures::Figure;
use crate::{Data, BATCH, TIME_LIMIT};

#[derive(Debug, serde::Deserialize)]
struct Answer {
    accepted: usize,
    replaced: usize,
    unchanged: usize,
    rejected: usize,
}

/// POST one CSV batch: the service's answer.
async fn post(served: &InProcess, body: String) -> Answer {
    let (status, text) = served.post_csv(body).await;
    refuse_unless(
        status.is_success(),
        "tests/api/readings.rs a_historians_life",
        || format!("POST readings answered {status}: {text}"),
    );
    serde_json::from_str(&text).expect("answer is an IngestAnswer")
}

/// Post every body in turn; check each answer against `expect` (accepted, replaced,
/// unchanged) per batch. Stops after `limit` when given.
async fn post_all(
    served: &InProcess,
    bodies: &[String],
    expect: (usize, usize, usize),
    limit: Option<Duration>,
    case: &'static str,
    what: &'static str,
) -> Figure {
    let mut elapsed = Duration::ZERO;
    let mut slowest = Duration::ZERO;
    let mut rows = 0;
    for body in bodies {
        // The copy is the client's work, not the service's: made before the clock starts.
        let body = body.clone();
        let t = Instant::now();
        let a = post(served, body).await;
        let dt = t.elapsed();
        refuse_unless(
            (a.accepted, a.replaced, a.unchanged, a.rejected) == (expect.0, expect.1, expect.2, 0),
            "tests/api/readings.rs a_historians_life",
            || format!("{case}: unexpected answer"),
        );
        elapsed += dt;
        slowest = slowest.max(dt);
        rows += BATCH;
        if limit.is_some_and(|l| elapsed >= l) {
            break;
        }
    }
    Figure {
        case,
        what,
        rows,
        elapsed,
        slowest: Some(slowest),
    }
}

/// The HTTP cases and the check without the store, on the service in-process on a fresh
/// database of `db`; answers their figures and how many batches the first pass posted within
/// [`TIME_LIMIT`] (the later passes and cases use as many).
pub async fn http_cases(db: Db<'_>, data: &Data) -> (Vec<Figure>, usize) {
    let plant_name = data.spec.name.clone();
    let url = db.fresh("http").await;
    let store = Store::open(&url).await.expect("open store");
    let served = InProcess::start(
        AppState::new(store.clone(), Limits::default()),
        &data.model_text,
        &plant_name,
        None,
    )
    .await;
    let mut figures = Vec::new();
    let first = post_all(
        &served,
        &data.new_csv,
        (BATCH, 0, 0),
        Some(TIME_LIMIT),
        "HTTP, new",
        "POST text/csv, every reading new",
    )
    .await;
    let done = first.rows / BATCH;
    figures.push(first);
    figures.push(
        post_all(
            &served,
            &data.new_csv[..done],
            (0, 0, BATCH),
            None,
            "HTTP, unchanged",
            "the same batches again: identical resends",
        )
        .await,
    );
    figures.push(
        post_all(
            &served,
            &data.changed_csv[..done],
            (0, BATCH, 0),
            None,
            "HTTP, replaced",
            "the same (tag, time), every value changed",
        )
        .await,
    );

    // Where the HTTP time goes: checking the body (parse, tag, time, value, quality, repeats)
    // without the store, on the service's own catalogue.
    let row = store
        .plant(&plant_name)
        .await
        .expect("plant")
        .expect("plant exists");
    let catalogue = Catalogue::load(&store, &row)
        .await
        .expect("catalogue")
        .expect("a model");
    let t = Instant::now();
    for body in &data.new_csv[..done] {
        let checked = ingest::check_batch(body.as_bytes(), Format::Csv, &catalogue).expect("check");
        refuse_unless(
            checked.good.len() == BATCH,
            "tests/api/readings.rs a_historians_life",
            || format!("check_batch found {} good of {BATCH}", checked.good.len()),
        );
    }
    figures.push(Figure {
        case: "check only",
        what: "ingest::check_batch on the CSV bodies (no store, no HTTP)",
        rows: done * BATCH,
        elapsed: t.elapsed(),
        slowest: None,
    });
    served.stop().await;
    (figures, done)
}
