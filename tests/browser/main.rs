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

/// A database the demo filled (two days, reconciled), served; its folder and tokens.
struct Served {
    _dir: tempfile::TempDir,
    server: Server,
    read: String,
    maintain: String,
    admin: String,
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
    let server = LOOPBAL.serve(&db, &[]);
    Served {
        _dir: dir,
        server,
        read,
        maintain,
        admin,
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

    // The maintain role sees the form and records a note through it.
    let b2 = Browser::start(1280, 800).await;
    let role = sign_in(&b2, &s.server, &s.admin).await;
    assert!(role.contains("admin"), "{role}");
    open(&b2, &s.server, &format!("/plant/{PLANT_NAME}/meters/{tag}")).await;
    let form_text = b2.wait_for("#note-text", 10).await;
    b2.type_into(&form_text, "zero checked against the portable standard")
        .await;
    let submit = b2.wait_for("#note-submit", 5).await;
    b2.click(&submit).await;
    b2.wait_until(
        "return document.querySelector('#notes').textContent.includes('portable standard')",
        10,
    )
    .await;
    let detail: Value = json_ok(
        c.get(
            s.server
                .url(&format!("/api/v1/plants/{PLANT_NAME}/meters/{tag}")),
        )
        .bearer_auth(&s.read)
        .send()
        .await
        .unwrap(),
    )
    .await;
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
