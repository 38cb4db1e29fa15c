//! The OpenAPI 3 document of the HTTP API, built from the same limits the server enforces.

use serde_json::{Value, json};

use super::config::Limits;

fn error_responses() -> Value {
    let error = json!({"$ref": "#/components/schemas/Error"});
    let content = json!({"application/json": {"schema": error}});
    json!({
        "400": {"description": "Bad input", "content": content},
        "404": {"description": "Unknown model or route", "content": content},
        "413": {"description": "Body over the limit", "content": content},
        "429": {"description": "Too many requests in flight (load shedding)", "content": content},
        "503": {"description": "No model loaded yet, or shutting down", "content": content},
        "504": {"description": "Deadline exceeded", "content": content},
    })
}

pub fn document(limits: &Limits) -> Value {
    let token_string = json!({"type": "string", "minLength": 1});
    let tokens = json!({"type": "array", "items": token_string, "minItems": 1, "maxItems": limits.max_tokens});
    let decoder = json!({"type": "string", "enum": ["projective", "non-projective"]});
    let mut ok_parse = json!({"description": "Parsed", "content": {"application/json": {"schema": {"$ref": "#/components/schemas/ParseResponse"}}}});
    let mut responses = error_responses();
    responses["200"] = ok_parse.take();
    let mut batch_responses = error_responses();
    batch_responses["200"] = json!({"description": "Parsed, in input order", "content": {"application/json": {"schema": {"$ref": "#/components/schemas/BatchResponse"}}}});
    let mut activate_responses = error_responses();
    activate_responses["200"] = json!({"description": "Activated", "content": {"application/json": {"schema": {"type": "object"}}}});
    activate_responses["401"] = json!({"description": "Missing or wrong admin token", "content": {"application/json": {"schema": {"$ref": "#/components/schemas/Error"}}}});
    activate_responses["403"] = json!({"description": "Admin routes are off", "content": {"application/json": {"schema": {"$ref": "#/components/schemas/Error"}}}});
    activate_responses["500"] = json!({"description": "Alias moved but this replica could not load the version", "content": {"application/json": {"schema": {"$ref": "#/components/schemas/Error"}}}});
    json!({
        "openapi": "3.0.3",
        "info": {"title": "arcwright parsing service", "version": env!("CARGO_PKG_VERSION"),
                 "description": "Dependency parsing over HTTP/JSON. Every reply names the model version that made it."},
        "paths": {
            "/v1/parse": {"post": {
                "summary": "Parse one text (one or more sentences) or one tokenized sentence",
                "requestBody": {"required": true, "content": {"application/json": {"schema": {"$ref": "#/components/schemas/ParseRequest"}}}},
                "responses": responses,
            }},
            "/v1/parse/batch": {"post": {
                "summary": "Parse several inputs; results keep input order",
                "requestBody": {"required": true, "content": {"application/json": {"schema": {"$ref": "#/components/schemas/BatchRequest"}}}},
                "responses": batch_responses,
            }},
            "/v1/models": {"get": {
                "summary": "Models, versions, aliases and the version being served",
                "responses": {"200": {"description": "Models", "content": {"application/json": {"schema": {"type": "object", "required": ["models"], "properties": {"models": {"type": "array", "items": {"type": "object"}}}}}}},
                              "503": {"description": "Store unavailable", "content": {"application/json": {"schema": {"$ref": "#/components/schemas/Error"}}}}},
            }},
            "/v1/models/{name}/activate": {"post": {
                "summary": "Point the store's live alias at a version and swap this replica (admin)",
                "security": [{"adminToken": []}],
                "parameters": [{"name": "name", "in": "path", "required": true, "schema": {"type": "string"}}],
                "requestBody": {"required": true, "content": {"application/json": {"schema": {"type": "object", "required": ["version"], "additionalProperties": false, "properties": {"version": {"type": "string"}}}}}},
                "responses": activate_responses,
            }},
            "/healthz": {"get": {"summary": "Liveness", "responses": {"200": {"description": "Alive", "content": {"text/plain": {"schema": {"type": "string"}}}}}}},
            "/readyz": {"get": {"summary": "Readiness: a model is loaded", "responses": {
                "200": {"description": "Ready", "content": {"text/plain": {"schema": {"type": "string"}}}},
                "503": {"description": "Not ready", "content": {"application/json": {"schema": {"$ref": "#/components/schemas/Error"}}}}}}},
            "/metrics": {"get": {"summary": "Prometheus text exposition", "responses": {"200": {"description": "Metrics", "content": {"text/plain": {"schema": {"type": "string"}}}}}}},
        },
        "components": {
            "securitySchemes": {"adminToken": {"type": "http", "scheme": "bearer"}},
            "schemas": {
                "Error": {"type": "object", "required": ["error"], "properties": {"error": {"type": "object", "required": ["code", "message"], "properties": {"code": {"type": "string"}, "message": {"type": "string"}}}}},
                "ParseRequest": {"type": "object", "additionalProperties": false, "properties": {
                    "model": {"type": "string"}, "decoder": decoder, "confidence": {"type": "boolean"},
                    "text": {"type": "string", "minLength": 1}, "tokens": tokens, "tags": tokens}},
                "SentenceInput": {"type": "object", "additionalProperties": false, "properties": {
                    "text": {"type": "string", "minLength": 1}, "tokens": tokens, "tags": tokens}},
                "BatchRequest": {"type": "object", "additionalProperties": false, "required": ["sentences"], "properties": {
                    "model": {"type": "string"}, "decoder": decoder, "confidence": {"type": "boolean"},
                    "sentences": {"type": "array", "minItems": 1, "maxItems": limits.max_sentences, "items": {"$ref": "#/components/schemas/SentenceInput"}}}},
                "Token": {"type": "object", "required": ["id", "form", "tag", "head", "label"], "properties": {
                    "id": {"type": "integer", "minimum": 1}, "form": {"type": "string"}, "tag": {"type": "string"},
                    "head": {"type": "integer", "minimum": 0}, "label": {"type": "string"},
                    "confidence": {"type": "number", "minimum": 0, "maximum": 1}}},
                "Sentence": {"type": "object", "required": ["tokens"], "properties": {"tokens": {"type": "array", "items": {"$ref": "#/components/schemas/Token"}}}},
                "ModelRef": {"type": "object", "required": ["name", "version"], "properties": {"name": {"type": "string"}, "version": {"type": "string"}}},
                "ParseResponse": {"type": "object", "required": ["model", "sentences"], "properties": {
                    "model": {"$ref": "#/components/schemas/ModelRef"}, "sentences": {"type": "array", "items": {"$ref": "#/components/schemas/Sentence"}}}},
                "BatchResponse": {"type": "object", "required": ["model", "results"], "properties": {
                    "model": {"$ref": "#/components/schemas/ModelRef"},
                    "results": {"type": "array", "items": {"type": "object", "required": ["sentences"], "properties": {"sentences": {"type": "array", "items": {"$ref": "#/components/schemas/Sentence"}}}}}}},
            },
        },
    })
}
