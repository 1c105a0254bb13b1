//! The service's life: acknowledged data survives a restart, and shutdown finishes the
//! requests in flight.

use super::*;

#[tokio::test]
async fn acknowledged_data_survives_a_restart_and_shutdown_finishes_requests_in_flight() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    create_ombrask(&c, &s, &t.admin).await;
    post_ok(
        &c,
        &s,
        &t.ingest,
        &csv(&day_rows("2026-03-02", 1.0)),
        "text/csv",
    )
    .await;
    let (from, to) = ("2026-03-01T00:00:00Z", "2026-04-01T00:00:00Z");
    let before = readings(&c, &s, &t.read, from, to).await;
    assert_eq!(before.len(), 264);

    let s = s.restart();
    assert_eq!(readings(&c, &s, &t.read, from, to).await, before);
    let model = get_ok(&c, &s, &t.read, "/model").await;
    assert_eq!(model["revision"], 1);

    // A batch of 20 days is in flight when SIGTERM arrives: the server finishes it, answers,
    // and only then exits; after a restart the whole batch is there.
    let mut rows = Vec::new();
    for d in 3..23 {
        rows.extend(day_rows(&format!("2026-03-{d:02}"), 1.0));
    }
    let big = csv(&rows);
    let url = s.url(&format!("/api/v1/plants/{PLANT}/readings"));
    let ingest = t.ingest.clone();
    let c2 = c.clone();
    let in_flight = tokio::spawn(async move {
        c2.post(url)
            .bearer_auth(ingest)
            .header("content-type", "text/csv")
            .body(big)
            .send()
            .await
    });
    tokio::time::sleep(Duration::from_millis(30)).await;
    let database = s.database.clone();
    let stopped = tokio::task::spawn_blocking(move || s.stop()).await.unwrap();
    assert!(stopped, "exit status 0 after SIGTERM");
    let answer = json_ok(in_flight.await.unwrap().expect("the batch is answered")).await;
    assert_eq!(answer["accepted"], rows.len(), "{answer}");
    let s = support::LOOPBAL.serve(&database, &[]);
    assert_eq!(
        readings(&c, &s, &t.read, from, to).await.len(),
        264 + rows.len()
    );
}
