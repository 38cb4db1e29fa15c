//! The operator console: a static page (HTML, CSS, JavaScript compiled into the binary) at
//! `/ui` that talks only to this service's own JSON API.
//!
//! The Content-Security-Policy below lets the page load and connect to nothing but its own
//! origin, so it works without outside network and cannot leak parsed text elsewhere. The admin
//! token typed into the page stays in the page's memory (never stored, never sent anywhere but
//! the activate route).

use axum::Router;
use axum::http::header;
use axum::response::{IntoResponse, Redirect};
use axum::routing::get;

const INDEX: &str = include_str!("../../ui/index.html");
const STYLE: &str = include_str!("../../ui/console.css");
const SCRIPT: &str = include_str!("../../ui/console.js");

const POLICY: &str = "default-src 'none'; script-src 'self'; style-src 'self'; \
    img-src 'self' data:; connect-src 'self'; form-action 'none'; base-uri 'none'; \
    frame-ancestors 'none'";

fn asset(content_type: &'static str, body: &'static str) -> impl IntoResponse {
    (
        [
            (header::CONTENT_TYPE, content_type),
            (header::CONTENT_SECURITY_POLICY, POLICY),
            (header::X_CONTENT_TYPE_OPTIONS, "nosniff"),
            (header::REFERRER_POLICY, "no-referrer"),
            // Assets change with the binary: revalidate rather than serve a stale script after
            // an upgrade.
            (header::CACHE_CONTROL, "no-cache"),
        ],
        body,
    )
}

/// Routes of the console, merged into the HTTP router.
pub fn routes<S: Clone + Send + Sync + 'static>() -> Router<S> {
    Router::new()
        .route(
            "/ui",
            get(|| async { asset("text/html; charset=utf-8", INDEX) }),
        )
        .route("/ui/", get(|| async { Redirect::permanent("/ui") }))
        // A person who opens the service's address in a browser lands on the console.
        .route("/", get(|| async { Redirect::temporary("/ui") }))
        .route(
            "/ui/console.css",
            get(|| async { asset("text/css; charset=utf-8", STYLE) }),
        )
        .route(
            "/ui/console.js",
            get(|| async { asset("text/javascript; charset=utf-8", SCRIPT) }),
        )
}
