//! The web workspace: its page at `/` and its scripts, styles and pictures at `/app/...`, all
//! embedded in the binary at build time (build.rs), and the security headers every answer
//! of the service carries.

use std::collections::HashMap;
use std::sync::OnceLock;

use axum::extract::{Path, Request};
use axum::http::{header, HeaderMap, HeaderValue, StatusCode};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use sha2::{Digest, Sha256};

use super::problem::Problem;

include!(concat!(env!("OUT_DIR"), "/web_assets.rs"));

/// What the pages may load and run: only the service's own scripts, styles and pictures (and
/// `data:` pictures), no inline script or style, no framing by another site.
pub const CONTENT_SECURITY_POLICY: &str = "default-src 'self'; script-src 'self'; \
     style-src 'self'; img-src 'self' data:; connect-src 'self'; font-src 'self'; \
     object-src 'none'; frame-ancestors 'none'; base-uri 'none'; form-action 'none'";

/// An embedded file with its media type and entity tag.
struct Asset {
    bytes: &'static [u8],
    media_type: &'static str,
    etag: String,
}

fn assets() -> &'static HashMap<&'static str, Asset> {
    static ASSETS: OnceLock<HashMap<&'static str, Asset>> = OnceLock::new();
    ASSETS.get_or_init(|| {
        WEB_ASSETS
            .iter()
            .map(|&(path, bytes)| {
                let digest = Sha256::digest(bytes);
                let hex: String = digest[..12].iter().map(|b| format!("{b:02x}")).collect();
                let asset = Asset {
                    bytes,
                    media_type: media_type(path),
                    etag: format!("\"{hex}\""),
                };
                (path, asset)
            })
            .collect()
    })
}

/// The media type of a file by its extension.
fn media_type(path: &str) -> &'static str {
    match path.rsplit_once('.').map(|(_, ext)| ext) {
        Some("html") => "text/html; charset=utf-8",
        Some("js" | "mjs") => "text/javascript; charset=utf-8",
        Some("css") => "text/css; charset=utf-8",
        Some("svg") => "image/svg+xml",
        Some("png") => "image/png",
        Some("ico") => "image/x-icon",
        Some("json") => "application/json",
        Some("txt" | "md") => "text/plain; charset=utf-8",
        _ => "application/octet-stream",
    }
}

/// The embedded file `path` (below `web/`), 304 when the client holds this very version.
fn serve(path: &str, headers: &HeaderMap) -> Response {
    let Some(asset) = assets().get(path) else {
        return Problem::not_found(format!(
            "no workspace file {}",
            reconcile::text::quote(path)
        ))
        .into_response();
    };
    let etag = HeaderValue::from_str(&asset.etag).expect("hex in quotes is a header value");
    let fresh = headers
        .get(header::IF_NONE_MATCH)
        .is_some_and(|v| v.as_bytes() == asset.etag.as_bytes());
    let mut answer = match fresh {
        true => StatusCode::NOT_MODIFIED.into_response(),
        false => (
            [(
                header::CONTENT_TYPE,
                HeaderValue::from_static(asset.media_type),
            )],
            asset.bytes,
        )
            .into_response(),
    };
    let h = answer.headers_mut();
    h.insert(header::ETAG, etag);
    // Always asked again (a 304 costs little), so a new binary's workspace is seen at once.
    h.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-cache"));
    answer
}

/// The web workspace for engineers and technicians: sign in with a token, then the plants, the
/// loop drawn with its reconciled flows, balances, figures, meters, the purge what-if and the
/// monthly report (docs/workspace.md). The page itself needs no token; every request it makes
/// does.
#[utoipa::path(
    get,
    path = "/",
    tag = "service",
    responses(
        (status = 200, description = "The workspace's page", body = String, content_type = "text/html"),
        (status = 304, description = "The client holds this version (If-None-Match)"),
    )
)]
pub async fn index(headers: HeaderMap) -> Response {
    serve("index.html", &headers)
}

/// A script, style sheet or picture of the workspace (`/app/...`).
pub async fn asset(Path(path): Path<String>, headers: HeaderMap) -> Response {
    serve(&format!("app/{path}"), &headers)
}

/// Headers on every answer: the content security policy, no sniffing of media types, no
/// framing, no referrer sent on.
pub async fn security_headers(req: Request, next: Next) -> Response {
    let mut answer = next.run(req).await;
    let h = answer.headers_mut();
    h.insert(
        header::CONTENT_SECURITY_POLICY,
        HeaderValue::from_static(CONTENT_SECURITY_POLICY),
    );
    h.insert(
        header::X_CONTENT_TYPE_OPTIONS,
        HeaderValue::from_static("nosniff"),
    );
    h.insert(header::X_FRAME_OPTIONS, HeaderValue::from_static("DENY"));
    h.insert(
        header::REFERRER_POLICY,
        HeaderValue::from_static("no-referrer"),
    );
    answer
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn media_types_follow_the_extension() {
        assert_eq!(media_type("app/main.js"), "text/javascript; charset=utf-8");
        assert_eq!(media_type("index.html"), "text/html; charset=utf-8");
        assert_eq!(media_type("app/style.css"), "text/css; charset=utf-8");
        assert_eq!(media_type("app/x"), "application/octet-stream");
    }

    #[test]
    fn the_policy_allows_no_inline_script_and_no_framing() {
        let policy = CONTENT_SECURITY_POLICY;
        assert!(policy.contains("default-src 'self'"));
        assert!(policy.contains("frame-ancestors 'none'"));
        assert!(!policy.contains("unsafe-inline"));
        assert!(!policy.contains("unsafe-eval"));
    }
}
