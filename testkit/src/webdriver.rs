//! A real browser for the workspace's tests: headless Chromium driven by ChromeDriver over the
//! W3C WebDriver protocol (plain JSON over HTTP on loopback, <https://www.w3.org/TR/webdriver2/>).
//! The driver is found at `LOOPBAL_CHROMEDRIVER` (default `/usr/bin/chromedriver`) and the
//! browser at `LOOPBAL_CHROMIUM` (default `/usr/bin/chromium`); `.ci/run` installs both.

use std::net::TcpListener;
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use serde_json::{json, Value};

/// The W3C key of an element reference in WebDriver answers.
const ELEMENT: &str = "element-6066-11e4-a52e-4f735466cecf";

/// One browser session; the driver is stopped when it is dropped.
pub struct Browser {
    http: reqwest::Client,
    session: String,
    base: String,
    driver: Child,
}

/// An element of the page, by its WebDriver reference.
#[derive(Debug, Clone)]
pub struct Element(pub String);

fn free_port() -> u16 {
    TcpListener::bind("127.0.0.1:0")
        .and_then(|l| l.local_addr())
        .expect("a free loopback port")
        .port()
}

impl Browser {
    /// A headless browser with a window of `width` × `height` CSS pixels.
    pub async fn start(width: u32, height: u32) -> Browser {
        let driver_path = std::env::var("LOOPBAL_CHROMEDRIVER")
            .unwrap_or_else(|_| "/usr/bin/chromedriver".into());
        let chromium =
            std::env::var("LOOPBAL_CHROMIUM").unwrap_or_else(|_| "/usr/bin/chromium".into());
        let port = free_port();
        let driver = Command::new(&driver_path)
            .arg(format!("--port={port}"))
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap_or_else(|e| {
                panic!(
                    "start {driver_path}: {e} (install Debian's chromium and chromium-driver, or \
                     set LOOPBAL_CHROMEDRIVER and LOOPBAL_CHROMIUM)"
                )
            });
        let base = format!("http://127.0.0.1:{port}");
        let http = reqwest::Client::builder()
            .timeout(Duration::from_secs(60))
            .build()
            .expect("an HTTP client");
        let deadline = Instant::now() + Duration::from_secs(20);
        while http.get(format!("{base}/status")).send().await.is_err() {
            assert!(Instant::now() < deadline, "chromedriver did not answer");
            tokio::time::sleep(Duration::from_millis(100)).await;
        }
        let caps = json!({"capabilities": {"alwaysMatch": {
            "browserName": "chrome",
            "goog:chromeOptions": {
                "binary": chromium,
                "args": ["--headless=new", "--no-sandbox", "--disable-gpu",
                         "--disable-dev-shm-usage", "--no-first-run",
                         format!("--window-size={width},{height}")],
            },
        }}});
        let answer: Value = http
            .post(format!("{base}/session"))
            .json(&caps)
            .send()
            .await
            .expect("new session")
            .json()
            .await
            .expect("a JSON answer");
        let session = answer["value"]["sessionId"]
            .as_str()
            .unwrap_or_else(|| panic!("no session: {answer}"))
            .to_string();
        Browser {
            http,
            session,
            base,
            driver,
        }
    }

    /// A WebDriver command on the session; its `value`, or the error it answered.
    async fn command(&self, method: &str, path: &str, body: Value) -> Result<Value, Value> {
        let url = format!("{}/session/{}{path}", self.base, self.session);
        let req = match method {
            "GET" => self.http.get(url),
            "DELETE" => self.http.delete(url),
            _ => self.http.post(url).json(&body),
        };
        let r = req.send().await.expect("the driver answers");
        let ok = r.status().is_success();
        let answer: Value = r.json().await.expect("a JSON answer");
        let value = answer["value"].clone();
        if ok {
            Ok(value)
        } else {
            Err(value)
        }
    }

    async fn must(&self, method: &str, path: &str, body: Value) -> Value {
        self.command(method, path, body)
            .await
            .unwrap_or_else(|e| panic!("{method} {path}: {e}"))
    }

    pub async fn goto(&self, url: &str) {
        self.must("POST", "/url", json!({ "url": url })).await;
    }

    /// The first element matching the CSS selector, if any.
    pub async fn find(&self, css: &str) -> Option<Element> {
        let body = json!({"using": "css selector", "value": css});
        self.command("POST", "/element", body)
            .await
            .ok()
            .and_then(|v| v[ELEMENT].as_str().map(|id| Element(id.to_string())))
    }

    /// Every element matching the CSS selector.
    pub async fn find_all(&self, css: &str) -> Vec<Element> {
        let body = json!({"using": "css selector", "value": css});
        let found = self.must("POST", "/elements", body).await;
        found
            .as_array()
            .into_iter()
            .flatten()
            .filter_map(|v| v[ELEMENT].as_str().map(|id| Element(id.to_string())))
            .collect()
    }

    /// The first element matching `css`, waited for up to `seconds`.
    pub async fn wait_for(&self, css: &str, seconds: u64) -> Element {
        let deadline = Instant::now() + Duration::from_secs(seconds);
        loop {
            if let Some(e) = self.find(css).await {
                return e;
            }
            assert!(
                Instant::now() < deadline,
                "no {css} after {seconds} s; the page says: {}",
                self.page_text().await
            );
            tokio::time::sleep(Duration::from_millis(100)).await;
        }
    }

    /// Wait until the script returns true (up to `seconds`).
    pub async fn wait_until(&self, script: &str, seconds: u64) {
        let deadline = Instant::now() + Duration::from_secs(seconds);
        while self.run(script, json!([])).await != json!(true) {
            assert!(
                Instant::now() < deadline,
                "{script} not true after {seconds} s; the page says: {}",
                self.page_text().await
            );
            tokio::time::sleep(Duration::from_millis(100)).await;
        }
    }

    pub async fn click(&self, e: &Element) {
        self.must("POST", &format!("/element/{}/click", e.0), json!({}))
            .await;
    }

    pub async fn type_into(&self, e: &Element, text: &str) {
        self.must(
            "POST",
            &format!("/element/{}/value", e.0),
            json!({ "text": text }),
        )
        .await;
    }

    /// The element's rendered text.
    pub async fn text(&self, e: &Element) -> String {
        let v = self
            .must("GET", &format!("/element/{}/text", e.0), json!({}))
            .await;
        v.as_str().unwrap_or_default().to_string()
    }

    pub async fn attribute(&self, e: &Element, name: &str) -> Option<String> {
        let v = self
            .must(
                "GET",
                &format!("/element/{}/attribute/{name}", e.0),
                json!({}),
            )
            .await;
        v.as_str().map(str::to_string)
    }

    /// Run a script in the page (`arguments` are its arguments); what it returns.
    pub async fn run(&self, script: &str, arguments: Value) -> Value {
        self.must(
            "POST",
            "/execute/sync",
            json!({"script": script, "args": arguments}),
        )
        .await
    }

    /// The page's whole text, for messages.
    pub async fn page_text(&self) -> String {
        let v = self
            .command(
                "POST",
                "/execute/sync",
                json!({"script": "return document.body ? document.body.innerText : ''", "args": []}),
            )
            .await
            .unwrap_or_default();
        let text = v.as_str().unwrap_or_default();
        text.chars().take(2000).collect()
    }

    /// Press keys (W3C key codes, e.g. "\u{E007}" for Enter) on the focused element.
    pub async fn keys(&self, keys: &str) {
        let actions: Vec<Value> = keys
            .chars()
            .flat_map(|k| {
                [
                    json!({"type": "keyDown", "value": k.to_string()}),
                    json!({"type": "keyUp", "value": k.to_string()}),
                ]
            })
            .collect();
        self.must(
            "POST",
            "/actions",
            json!({"actions": [{"type": "key", "id": "keyboard", "actions": actions}]}),
        )
        .await;
    }

    /// Lay the page out for a CSS media type (`print`, `screen`), through ChromeDriver's
    /// DevTools command `Emulation.setEmulatedMedia`.
    pub async fn media(&self, media: &str) {
        self.must(
            "POST",
            "/goog/cdp/execute",
            json!({"cmd": "Emulation.setEmulatedMedia", "params": {"media": media}}),
        )
        .await;
    }

    /// The page printed to PDF (W3C WebDriver "Print Page"), A4.
    pub async fn print_pdf(&self) -> Vec<u8> {
        let v = self
            .must(
                "POST",
                "/print",
                json!({"page": {"width": 21.0, "height": 29.7}, "background": true}),
            )
            .await;
        decode_base64(v.as_str().expect("base64 PDF"))
    }

    pub async fn set_window(&self, width: u32, height: u32) {
        self.must(
            "POST",
            "/window/rect",
            json!({"width": width, "height": height}),
        )
        .await;
    }

    /// A PNG of the viewport written to `path`.
    pub async fn screenshot(&self, path: &std::path::Path) {
        let v = self.must("GET", "/screenshot", json!({})).await;
        let png = decode_base64(v.as_str().expect("base64 PNG"));
        if let Some(dir) = path.parent() {
            std::fs::create_dir_all(dir).expect("screenshot folder");
        }
        std::fs::write(path, png).expect("write the screenshot");
    }
}

impl Drop for Browser {
    fn drop(&mut self) {
        let _ = self.driver.kill();
        let _ = self.driver.wait();
    }
}

/// Standard base64 (RFC 4648, section 4) decoded; the screenshot is the only user.
fn decode_base64(text: &str) -> Vec<u8> {
    let value = |c: u8| match c {
        b'A'..=b'Z' => Some(c - b'A'),
        b'a'..=b'z' => Some(c - b'a' + 26),
        b'0'..=b'9' => Some(c - b'0' + 52),
        b'+' => Some(62),
        b'/' => Some(63),
        _ => None,
    };
    let mut out = Vec::with_capacity(text.len() * 3 / 4);
    let (mut acc, mut bits) = (0u32, 0u32);
    for v in text.bytes().filter_map(value) {
        acc = (acc << 6) | u32::from(v);
        bits += 6;
        if bits >= 8 {
            bits -= 8;
            out.push((acc >> bits) as u8);
        }
    }
    out
}

#[cfg(test)]
mod tests {
    #[test]
    fn base64_decodes_the_rfc_4648_test_vectors() {
        // RFC 4648, section 10.
        for (plain, coded) in [
            ("", ""),
            ("f", "Zg=="),
            ("fo", "Zm8="),
            ("foo", "Zm9v"),
            ("foob", "Zm9vYg=="),
            ("fooba", "Zm9vYmE="),
            ("foobar", "Zm9vYmFy"),
        ] {
            assert_eq!(super::decode_base64(coded), plain.as_bytes(), "{coded}");
        }
    }
}
