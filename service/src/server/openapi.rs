//! The OpenAPI document of the HTTP API, derived (utoipa) from the request and reply types and
//! the handlers' annotations in `http.rs`, so a route or a field cannot be served without being
//! documented. The server's configured limits are written into it at serving time.

use serde_json::{Value, json};
use utoipa::openapi::security::{HttpAuthScheme, HttpBuilder, SecurityScheme};
use utoipa::{Modify, OpenApi};

use super::config::Limits;
use super::http;

#[derive(OpenApi)]
#[openapi(
    info(
        title = "arcwright parsing service",
        description = "Dependency parsing over HTTP/JSON. Every reply names the model version that made it."
    ),
    paths(
        http::parse,
        http::parse_batch,
        http::models,
        http::activate,
        http::rollout,
        http::scaling,
        http::healthz,
        http::ready,
        http::prometheus_metrics,
        http::openapi,
    ),
    modifiers(&AdminToken)
)]
struct Document;

/// The bearer token of the admin routes.
struct AdminToken;

impl Modify for AdminToken {
    fn modify(&self, openapi: &mut utoipa::openapi::OpenApi) {
        let components = openapi.components.get_or_insert_with(Default::default);
        components.add_security_scheme(
            "admin_token",
            SecurityScheme::Http(HttpBuilder::new().scheme(HttpAuthScheme::Bearer).build()),
        );
    }
}

/// The document, with this server's limits on sentences and tokens.
pub fn document(limits: &Limits) -> Value {
    let mut document = serde_json::to_value(Document::openapi()).unwrap_or_else(|_| json!({}));
    let mut limit = |pointer: &str, key: &str, value: usize| {
        if let Some(Value::Object(schema)) = document.pointer_mut(pointer) {
            schema.insert(key.to_string(), json!(value));
        }
    };
    let schemas = "/components/schemas";
    for request in ["ParseRequest", "SentenceInput"] {
        for field in ["tokens", "tags"] {
            limit(
                &format!("{schemas}/{request}/properties/{field}"),
                "maxItems",
                limits.max_tokens,
            );
        }
    }
    limit(
        &format!("{schemas}/BatchRequest/properties/sentences"),
        "maxItems",
        limits.max_sentences,
    );
    document
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Every route the router serves is in the document, and nothing else.
    #[test]
    fn the_document_lists_every_route() {
        let limits = Limits {
            max_tokens: 40,
            max_sentences: 4,
            max_body_bytes: 4096,
            deadline: std::time::Duration::from_secs(1),
            max_in_flight: 8,
        };
        let document = document(&limits);
        let mut paths: Vec<&str> = document["paths"]
            .as_object()
            .expect("paths")
            .keys()
            .map(String::as_str)
            .collect();
        paths.sort();
        assert_eq!(
            paths,
            [
                "/healthz",
                "/metrics",
                "/readyz",
                "/v1/models",
                "/v1/models/{name}/activate",
                "/v1/models/{name}/rollout",
                "/v1/openapi.json",
                "/v1/parse",
                "/v1/parse/batch",
                "/v1/scaling",
            ]
        );
        let schemas = &document["components"]["schemas"];
        assert_eq!(
            schemas["BatchRequest"]["properties"]["sentences"]["maxItems"],
            4
        );
        assert_eq!(schemas["ParseRequest"]["additionalProperties"], false);
        assert_eq!(
            schemas["DecoderName"]["enum"],
            json!(["projective", "non-projective"])
        );
    }
}
