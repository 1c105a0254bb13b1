//! The web workspace in a real browser: headless Chromium driven over WebDriver
//! (testkit::webdriver) against `loopbal serve` on a database the demo filled with two days of
//! the invented Tarn Hollow loop. These tests need Debian's `chromium` and `chromium-driver`;
//! `.ci/run` installs them and runs this suite with `--include-ignored`.

mod support {
    testkit::e2e_support!();
}

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use loopbal_server::demo::scenario::{self, PLANT_NAME};
use serde_json::{json, Value};
use support::{client, json_ok, token, Server, BIN, LOOPBAL};
use testkit::webdriver::Browser;

mod other_plants;

/// A database the demo filled (two days, reconciled), served; its folder and tokens.
struct Served {
    _dir: tempfile::TempDir,
    server: Server,
    read: String,
    maintain: String,
    admin: String,
    ingest: String,
}

fn served() -> Served {
    let dir = tempfile::tempdir().expect("temp dir");
    let db = dir.path().join("demo.sqlite");
    let out = Command::new(BIN)
        .args([
            "demo",
            "--no-serve",
            "--days",
            "2",
            "--listen",
            "127.0.0.1:0",
            "--database",
        ])
        .arg(&db)
        .output()
        .expect("run the demo");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let read = token(&db, "read", None);
    let maintain = token(&db, "maintain", None);
    let admin = token(&db, "admin", None);
    let ingest = token(&db, "ingest", None);
    let server = LOOPBAL.serve(&db, &[]);
    Served {
        _dir: dir,
        server,
        read,
        maintain,
        admin,
        ingest,
    }
}

/// Where screenshots go, for a person to look at.
fn shot(name: &str) -> PathBuf {
    Path::new(env!("CARGO_TARGET_TMPDIR"))
        .join("workspace")
        .join(name)
}

/// Sign in at the page with `tok`; the role the page then shows.
async fn sign_in(b: &Browser, s: &Server, tok: &str) -> String {
    b.goto(&s.url("/")).await;
    let field = b.wait_for("#token", 10).await;
    b.type_into(&field, tok).await;
    let button = b.wait_for("#sign-in", 5).await;
    b.click(&button).await;
    b.wait_until("return !!document.querySelector('#role') && document.querySelector('#role').textContent.trim().length > 0", 10).await;
    let role = b.wait_for("#role", 5).await;
    b.text(&role).await
}

/// Open a page of the workspace by its hash and wait until it says it is ready.
async fn open(b: &Browser, s: &Server, hash: &str) -> f64 {
    let started = Instant::now();
    b.goto(&s.url(&format!("/#{hash}"))).await;
    b.wait_until("return document.body.dataset.ready === '1'", 20)
        .await;
    started.elapsed().as_secs_f64() * 1e3
}

async fn csp_violations(b: &Browser) -> String {
    let v = b
        .run(
            "const e = document.querySelector('#csp-violations'); return e ? e.textContent : ''",
            json!([]),
        )
        .await;
    v.as_str().unwrap_or_default().trim().to_string()
}

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (run by .ci/run)"]
async fn the_loop_is_drawn_from_the_model_with_reconciled_flows_and_meter_states() {
    let s = served();
    let b = Browser::start(1280, 800).await;
    let role = sign_in(&b, &s.server, &s.read).await;
    assert!(role.contains("read"), "{role}");
    // The token is in the tab's session storage, never in the address.
    let url = b.run("return location.href", json!([])).await;
    assert!(!url.as_str().unwrap().contains(&s.read[3..]), "{url}");
    let stored = b
        .run("return Object.values(sessionStorage).join(' ')", json!([]))
        .await;
    assert!(
        stored.as_str().unwrap().contains(&s.read),
        "the token is kept for the tab"
    );
    let local = b
        .run("return Object.values(localStorage).join(' ')", json!([]))
        .await;
    assert!(
        !local.as_str().unwrap().contains(&s.read),
        "never in local storage"
    );

    open(&b, &s.server, "/plants").await;
    let rows = b.find_all("[data-plant]").await;
    assert_eq!(rows.len(), 1);
    assert!(b.text(&rows[0]).await.contains(PLANT_NAME));

    let ms = open(&b, &s.server, &format!("/plant/{PLANT_NAME}/loop")).await;
    eprintln!("workspace: the loop page drawn in {ms:.0} ms (navigation to ready)");
    let plant = scenario::plant();
    assert_eq!(
        b.find_all("svg#flowsheet [data-unit]").await.len(),
        plant.units.len()
    );
    assert_eq!(
        b.find_all("svg#flowsheet [data-stream]").await.len(),
        plant.streams.len()
    );
    let meters = b.find_all("svg#flowsheet [data-meter]").await;
    assert_eq!(meters.len(), plant.spec.meters.len());
    let mut states = Vec::new();
    for m in &meters {
        states.push(b.attribute(m, "data-state").await.unwrap_or_default());
    }
    assert!(states.iter().all(|s| !s.is_empty()), "{states:?}");
    assert!(
        states.iter().any(|s| s == "suspect"),
        "the biased meter is flagged: {states:?}"
    );
    let labels = b.find_all("[data-stream-label]").await;
    assert_eq!(labels.len(), plant.streams.len());
    let mut reconciled = 0;
    for l in &labels {
        let text = b.text(l).await;
        if text.contains('±') && text.contains("kmol/h") {
            reconciled += 1;
        }
    }
    assert!(
        reconciled >= plant.streams.len() - 1,
        "labels carry flow ± σ with the unit"
    );
    b.screenshot(&shot("loop-1280.png")).await;

    // Clicking a stream opens its panel with its flows and composition.
    let stream = b.wait_for("svg#flowsheet [data-stream='purge']", 5).await;
    b.click(&stream).await;
    let panel = b.wait_for("#stream-panel", 5).await;
    b.wait_until(
        "return document.querySelector('#stream-panel').textContent.includes('purge')",
        5,
    )
    .await;
    let text = b.text(&panel).await;
    assert!(text.contains("kmol/h"), "{text}");
    assert_eq!(
        csp_violations(&b).await,
        "",
        "no content security policy violation"
    );
}

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (run by .ci/run)"]
async fn markup_in_a_note_is_shown_as_text_and_the_read_role_gets_no_note_form() {
    let s = served();
    let c = client();
    let tag = scenario::BIASED;
    let hostile = "<img src=x onerror=\"document.title='owned'\"><b>bold</b>";
    let r = c
        .post(
            s.server
                .url(&format!("/api/v1/plants/{PLANT_NAME}/meters/{tag}/notes")),
        )
        .bearer_auth(&s.maintain)
        .json(&json!({"kind": "checked", "text": hostile}))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status().as_u16(), 201);

    let b = Browser::start(1280, 800).await;
    sign_in(&b, &s.server, &s.read).await;
    open(&b, &s.server, &format!("/plant/{PLANT_NAME}/meters/{tag}")).await;
    let notes = b.wait_for("#notes", 10).await;
    let text = b.text(&notes).await;
    assert!(
        text.contains("<img src=x"),
        "the note's markup is shown as text: {text}"
    );
    assert_eq!(
        b.find_all("#notes img, #notes b").await.len(),
        0,
        "no element made of it"
    );
    let title = b.run("return document.title", json!([])).await;
    assert_ne!(title, json!("owned"));
    assert!(
        b.find("#note-form").await.is_none(),
        "read may not write notes"
    );
    b.screenshot(&shot("meter-read.png")).await;

    // The normalised adjustment's critical lines are the latest period's measurement test.
    let meter = read_json(&s, &format!("/api/v1/plants/{PLANT_NAME}/meters/{tag}")).await;
    let last = meter["history"].as_array().unwrap().last().unwrap()["period_start"]
        .as_str()
        .unwrap()
        .to_string();
    let run = read_json(&s, &format!("/api/v1/plants/{PLANT_NAME}/periods/{last}")).await;
    let tests = run["report"]["measurement_test"]["tests"].as_u64().unwrap();
    let drawn = b
        .run(
            "return document.querySelector('main').textContent",
            json!([]),
        )
        .await;
    assert!(
        drawn
            .as_str()
            .unwrap_or_default()
            .contains(&format!("Šidák over {tests} redundant meters")),
        "{drawn}"
    );

    // The maintain role sees the form and records a note through it.
    let b2 = Browser::start(1280, 800).await;
    let role = sign_in(&b2, &s.server, &s.admin).await;
    assert!(role.contains("admin"), "{role}");
    open(&b2, &s.server, &format!("/plant/{PLANT_NAME}/meters/{tag}")).await;
    b2.wait_for("#note-text", 10).await;
    post_note(&b2, "zero checked against the portable standard", "#notes").await;
    let detail = read_json(&s, &format!("/api/v1/plants/{PLANT_NAME}/meters/{tag}")).await;
    let stored = detail["notes"].as_array().unwrap();
    assert!(stored
        .iter()
        .any(|n| n["text"] == "zero checked against the portable standard"));
    assert_eq!(csp_violations(&b).await, "");
}

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (run by .ci/run)"]
async fn every_page_loads_without_errors_and_fits_a_tablet() {
    let s = served();
    let b = Browser::start(1280, 800).await;
    sign_in(&b, &s.server, &s.read).await;
    let pages = [
        "plants".to_string(),
        format!("plant/{PLANT_NAME}/loop"),
        format!("plant/{PLANT_NAME}/balances"),
        format!("plant/{PLANT_NAME}/figures"),
        format!("plant/{PLANT_NAME}/meters"),
        format!("plant/{PLANT_NAME}/what-if"),
        format!("plant/{PLANT_NAME}/report"),
    ];
    for (width, height) in [(1280, 800), (768, 1024)] {
        b.set_window(width, height).await;
        for page in &pages {
            let ms = open(&b, &s.server, &format!("/{page}")).await;
            eprintln!("workspace: {page} at {width} px ready in {ms:.0} ms");
            let alerts = b.find_all("[role=alert]").await;
            for a in &alerts {
                let text = b.text(a).await;
                assert!(text.trim().is_empty(), "{page}: {text}");
            }
            let overflow = b
                .run(
                    "return document.documentElement.scrollWidth - window.innerWidth",
                    json!([]),
                )
                .await;
            assert!(
                overflow.as_f64().unwrap() <= 1.0,
                "{page} at {width} px scrolls sideways: {overflow}"
            );
            // Every control has a name a screen reader can say.
            let unlabelled = b
                .run(
                    "return [...document.querySelectorAll('input, select, textarea, button')]
                        .filter(e => e.type !== 'hidden')
                        .filter(e => !(e.labels && e.labels.length) && !e.getAttribute('aria-label')
                                     && !e.getAttribute('aria-labelledby') && !e.textContent.trim())
                        .map(e => e.outerHTML.slice(0, 80))",
                    json!([]),
                )
                .await;
            assert_eq!(unlabelled, json!([]), "{page}: controls without a label");
            let name = format!("{}-{width}.png", page.replace('/', "_"));
            b.screenshot(&shot(&name)).await;
        }
    }
    assert_eq!(csp_violations(&b).await, "");
}

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (run by .ci/run)"]
async fn the_monthly_report_prints_without_the_controls_and_with_the_caution() {
    let s = served();
    let b = Browser::start(1280, 800).await;
    sign_in(&b, &s.server, &s.read).await;
    // The demo's two days are in September 2026.
    open(
        &b,
        &s.server,
        &format!("/plant/{PLANT_NAME}/report?month=2026-09"),
    )
    .await;
    for words in ["licensed engineering practice", "revision"] {
        let script = format!("return document.body.innerText.includes({words:?})");
        assert_eq!(
            b.run(&script, json!([])).await,
            json!(true),
            "the report says {words}"
        );
    }
    // As the print stylesheet lays it out: navigation and buttons gone, the caution kept.
    b.media("print").await;
    let hidden = b
        .run(
            "const shown = e => e && getComputedStyle(e).display !== 'none';
             return { nav: shown(document.querySelector('nav')),
                      buttons: [...document.querySelectorAll('main button')].some(shown),
                      caution: [...document.querySelectorAll('*')].some(e => shown(e)
                          && e.children.length === 0
                          && e.textContent.includes('licensed engineering practice')) }",
            json!([]),
        )
        .await;
    assert_eq!(
        hidden,
        json!({"nav": false, "buttons": false, "caution": true})
    );
    b.screenshot(&shot("report-print.png")).await;
    let pdf = b.print_pdf().await;
    assert!(pdf.starts_with(b"%PDF"), "a PDF");
    assert!(pdf.len() > 10_000, "{} bytes", pdf.len());
    std::fs::write(shot("report.pdf"), &pdf).expect("write the PDF");
}

/// `GET path` (with its query) on the served database with the read token: the answer, which
/// must be a success.
async fn read_json(s: &Served, path: &str) -> Value {
    let r = client()
        .get(s.server.url(path))
        .bearer_auth(&s.read)
        .send()
        .await
        .unwrap();
    json_ok(r).await
}

/// The text of the page's main view.
async fn main_text(b: &Browser) -> String {
    let v = b
        .run("return document.querySelector('main').innerText", json!([]))
        .await;
    v.as_str().unwrap_or_default().to_string()
}

/// Every alert on the page is empty (a page shows its errors in `[role=alert]`).
async fn no_alerts(b: &Browser, page: &str) {
    for a in &b.find_all("[role=alert]").await {
        let text = b.text(a).await;
        assert!(text.trim().is_empty(), "{page}: {text}");
    }
}

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (run by .ci/run)"]
async fn each_role_is_shown_what_it_may_do_and_maintain_writes_a_note() {
    let s = served();
    let tag = scenario::BIASED;
    let b = Browser::start(1280, 800).await;

    // ingest: posts readings only; the workspace says so and shows no results.
    let role = sign_in(&b, &s.server, &s.ingest).await;
    assert!(role.contains("ingest"), "{role}");
    open(&b, &s.server, "/plants").await;
    let text = main_text(&b).await;
    assert!(text.contains("cannot read results"), "{text}");
    assert!(
        text.contains("ingest token posts historian readings"),
        "{text}"
    );
    assert!(
        b.find("#go-meter").await.is_none(),
        "ingest writes no notes"
    );
    assert_eq!(b.find_all("[data-plant]").await.len(), 0);
    b.screenshot(&shot("role-ingest.png")).await;

    // maintain: no results, but the way to a meter's note form, and the note is stored.
    b.run("sessionStorage.clear()", json!([])).await;
    let role = sign_in(&b, &s.server, &s.maintain).await;
    assert!(role.contains("maintain"), "{role}");
    open(&b, &s.server, "/plants").await;
    let plant_field = b.wait_for("#go-plant", 10).await;
    b.run(
        "document.querySelector('#go-plant').value = arguments[0]",
        json!([PLANT_NAME]),
    )
    .await;
    let tag_field = b.wait_for("#go-tag", 5).await;
    b.type_into(&tag_field, tag).await;
    let _ = plant_field;
    let go = b.wait_for("#go-meter", 5).await;
    b.click(&go).await;
    b.wait_until("return !!document.querySelector('#note-text')", 10)
        .await;
    let text = main_text(&b).await;
    assert!(text.contains("history is not shown"), "{text}");
    post_note(&b, "transmitter zero trimmed by the maintain role", "main").await;
    b.screenshot(&shot("role-maintain.png")).await;
    let detail = read_json(&s, &format!("/api/v1/plants/{PLANT_NAME}/meters/{tag}")).await;
    assert!(
        detail["notes"]
            .as_array()
            .unwrap()
            .iter()
            .any(|n| n["text"] == "transmitter zero trimmed by the maintain role"),
        "{detail}"
    );

    // read and admin: every page; only admin has the note form.
    for (tok, word, form) in [(&s.read, "read", false), (&s.admin, "admin", true)] {
        b.run("sessionStorage.clear()", json!([])).await;
        let role = sign_in(&b, &s.server, tok).await;
        assert!(role.contains(word), "{role}");
        open(&b, &s.server, &format!("/plant/{PLANT_NAME}/meters/{tag}")).await;
        b.wait_for("#notes", 10).await;
        assert_eq!(b.find("#note-form").await.is_some(), form, "{word}");
        assert!(
            main_text(&b).await.contains("zero trimmed"),
            "{word} sees the note"
        );
    }
    assert_eq!(csp_violations(&b).await, "");
}

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (run by .ci/run)"]
async fn a_trend_draws_every_period_and_the_what_if_follows_its_base_range() {
    let s = served();
    let b = Browser::start(1280, 800).await;
    sign_in(&b, &s.server, &s.read).await;

    // The figures page: the line has one vertex per period with a value, as the service
    // answers the same figure over the same range.
    open(&b, &s.server, &format!("/plant/{PLANT_NAME}/figures")).await;
    let shown = b
        .run(
            "const q = new URLSearchParams(location.hash.split('?')[1]);
             const line = document.querySelector('#trend [data-series] path.line');
             return { from: q.get('from'), to: q.get('to'), name: q.get('name'),
                      subject: q.get('subject'),
                      vertices: line ? (line.getAttribute('d').match(/[ML]/g) || []).length : 0 }",
            json!([]),
        )
        .await;
    let get = |k: &str| shown[k].as_str().unwrap_or_default().to_string();
    let answer: Value = json_ok(
        client()
            .get(
                s.server
                    .url(&format!("/api/v1/plants/{PLANT_NAME}/figures")),
            )
            .query(&[
                ("from", get("from")),
                ("to", get("to")),
                ("name", get("name")),
                ("subject", get("subject")),
            ])
            .bearer_auth(&s.read)
            .send()
            .await
            .unwrap(),
    )
    .await;
    let series = &answer["series"][0];
    let valued = series["points"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|p| p["value"].is_number())
        .count();
    assert!(valued > 20, "the demo's two days give a series: {answer}");
    assert_eq!(
        shown["vertices"].as_u64(),
        Some(valued as u64),
        "the chart draws every period's value: {shown}"
    );
    b.screenshot(&shot("figures-trend.png")).await;

    // The what-if: one base period, then a base range ending there; the curve moves.
    open(&b, &s.server, &format!("/plant/{PLANT_NAME}/what-if")).await;
    b.run(
        "document.querySelector('#wi-points').value = '5'",
        json!([]),
    )
    .await;
    let run = b.wait_for("#wi-run", 5).await;
    b.click(&run).await;
    let single = what_if_table(&b).await;
    assert!(
        single.contains("solved") || single.contains('±'),
        "{single}"
    );
    // The base range: the twelve hours before the base period, to it.
    b.run(
        "const p = document.querySelector('#wi-period');
         const end = p.value;
         const start = new Date(new Date(end + ':00Z').getTime() - 12 * 3600e3)
             .toISOString().slice(0, 16);
         p.value = start;
         document.querySelector('#wi-period-to').value = end;
         document.querySelector('#wi-table').remove();",
        json!([]),
    )
    .await;
    b.click(&run).await;
    let ranged = what_if_table(&b).await;
    assert_ne!(single, ranged, "the curve follows the base range");
    let said = main_text(&b).await;
    assert!(said.contains("periods combined"), "{said}");
    no_alerts(&b, "what-if").await;
    // The curves, not the form, in the picture.
    b.run(
        "document.querySelector('svg.chart').closest('section, div').scrollIntoView()",
        json!([]),
    )
    .await;
    b.screenshot(&shot("what-if-range.png")).await;
    assert_eq!(csp_violations(&b).await, "");
}

/// The what-if page's table of points, once the sweep is drawn.
async fn what_if_table(b: &Browser) -> String {
    b.wait_until(
        "return document.body.dataset.ready === '1' && !!document.querySelector('#wi-table')",
        60,
    )
    .await;
    // The table sits in a closed <details>: read its text content, not its rendered text.
    let t = b
        .run(
            "return document.querySelector('#wi-table').textContent",
            json!([]),
        )
        .await;
    t.as_str().unwrap_or_default().to_string()
}

/// Type `text` into the open meter page's note form, submit it, and wait until the element
/// `shown_in` (a CSS selector) shows it.
async fn post_note(b: &Browser, text: &str, shown_in: &str) {
    let field = b.wait_for("#note-text", 5).await;
    b.type_into(&field, text).await;
    let submit = b.wait_for("#note-submit", 5).await;
    b.click(&submit).await;
    // JSON strings are JavaScript string literals.
    let script = format!(
        "return document.querySelector({}).textContent.includes({})",
        json!(shown_in),
        json!(text)
    );
    b.wait_until(&script, 10).await;
}
