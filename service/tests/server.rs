//! The service built in-process (no sockets): every kind of bad input gets a 4xx with a message
//! naming the problem, and the service keeps answering; plus a gRPC round trip on a
//! real port 0 with the client generated from `proto/`.

use std::sync::Arc;
use std::time::Duration;

use arcwright::server::config::{Config, Limits};
use arcwright::server::{self, AppState};
use axum::body::Body;
use axum::http::{Request, StatusCode};
use http_body_util::BodyExt;
use tower::ServiceExt;

const TOKEN: &str = "test-admin-token-0123456789";

/// (method, path, body, bearer token, expected status, expected error code, message fragment)
type Case<'a> = (
    &'a str,
    &'a str,
    Vec<u8>,
    Option<&'a str>,
    u16,
    &'a str,
    &'a str,
);

fn config(store: &std::path::Path, cache: &std::path::Path, deadline: Duration) -> Config {
    Config {
        store: store.display().to_string(),
        bootstrap_demo: true,
        http: "127.0.0.1:0".parse().expect("addr"),
        grpc: "127.0.0.1:0".parse().expect("addr"),
        default_model: None,
        poll: Duration::from_secs(5),
        cache_dir: cache.to_path_buf(),
        admin_token: Some(TOKEN.to_string()),
        limits: Limits {
            max_tokens: 40,
            max_sentences: 4,
            max_body_bytes: 4096,
            deadline,
            max_in_flight: 8,
        },
        threads: 2,
        grace: Duration::from_secs(5),
        probe: arcwright::server::probe::ProbeSettings {
            interval: Duration::ZERO,
            slowed: false,
        },
        rollout: arcwright::server::rollout::RolloutSettings::default(),
    }
}

async fn call(
    state: &Arc<AppState>,
    method: &str,
    uri: &str,
    body: Vec<u8>,
    auth: Option<&str>,
) -> (StatusCode, serde_json::Value) {
    let mut request = Request::builder()
        .method(method)
        .uri(uri)
        .header("content-type", "application/json");
    if let Some(token) = auth {
        request = request.header("authorization", format!("Bearer {token}"));
    }
    let response = server::http::router(state.clone())
        .oneshot(request.body(Body::from(body)).expect("request"))
        .await
        .expect("response");
    let status = response.status();
    let bytes = response
        .into_body()
        .collect()
        .await
        .expect("body")
        .to_bytes();
    (
        status,
        serde_json::from_slice(&bytes).unwrap_or(serde_json::Value::Null),
    )
}

/// The service with the demo model in a store under `dir` and a 10 s deadline.
async fn demo_state(dir: &std::path::Path) -> Arc<AppState> {
    server::build_state(&config(
        &dir.join("store"),
        &dir.join("cache"),
        Duration::from_secs(10),
    ))
    .await
    .expect("state")
}

/// The router's whole reply (status and headers) to a bodyless GET.
async fn get_response(state: &Arc<AppState>, uri: &str) -> axum::response::Response {
    server::http::router(state.clone())
        .oneshot(Request::get(uri).body(Body::empty()).expect("request"))
        .await
        .expect("response")
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn bad_input_table_and_a_good_parse() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let state = demo_state(tmp.path()).await;
    let long_sentence = serde_json::json!({"tokens": vec!["w"; 41]}).to_string();
    let big_batch =
        serde_json::json!({"sentences": vec![serde_json::json!({"text": "a b"}); 5]}).to_string();
    let huge = format!("{{\"text\": \"{}\"}}", "a ".repeat(3000));
    // (method, path, body, auth, expected status, expected error code, message fragment)
    let cases: Vec<Case> = vec![
        (
            "POST",
            "/v1/parse",
            b"".to_vec(),
            None,
            400,
            "empty_body",
            "body is empty",
        ),
        (
            "POST",
            "/v1/parse",
            b"{\"text\": ".to_vec(),
            None,
            400,
            "malformed_json",
            "invalid JSON",
        ),
        (
            "POST",
            "/v1/parse",
            br#"{"text": "a", "tokens": ["a"]}"#.to_vec(),
            None,
            400,
            "text_and_tokens",
            "not both",
        ),
        (
            "POST",
            "/v1/parse",
            br#"{}"#.to_vec(),
            None,
            400,
            "no_input",
            "give text or tokens",
        ),
        (
            "POST",
            "/v1/parse",
            br#"{"tokens": ["a", " "]}"#.to_vec(),
            None,
            400,
            "empty_token",
            "token 1 is empty",
        ),
        (
            "POST",
            "/v1/parse",
            br#"{"tokens": ["a", "b"], "tags": ["X"]}"#.to_vec(),
            None,
            400,
            "tags_mismatch",
            "1 tags for 2 tokens",
        ),
        (
            "POST",
            "/v1/parse",
            br#"{"model": "nope", "text": "a b"}"#.to_vec(),
            None,
            404,
            "unknown_model",
            "unknown model \"nope\"",
        ),
        (
            "POST",
            "/v1/parse",
            br#"{"decoder": "cky", "text": "a b"}"#.to_vec(),
            None,
            400,
            "unknown_decoder",
            "unknown decoder \"cky\"",
        ),
        (
            "POST",
            "/v1/parse",
            long_sentence.into_bytes(),
            None,
            400,
            "sentence_too_long",
            "41 tokens; the limit is 40",
        ),
        (
            "POST",
            "/v1/parse/batch",
            big_batch.into_bytes(),
            None,
            400,
            "batch_too_large",
            "5 sentences in the batch; the limit is 4",
        ),
        (
            "POST",
            "/v1/parse",
            huge.into_bytes(),
            None,
            413,
            "body_too_large",
            "the limit is 4096",
        ),
        (
            "POST",
            "/v1/parse",
            b"{\"text\": \"a \xff b\"}".to_vec(),
            None,
            400,
            "invalid_utf8",
            "not valid UTF-8",
        ),
        (
            "POST",
            "/v1/parse",
            "{\"text\": \"a \\u0007 b\"}".as_bytes().to_vec(),
            None,
            400,
            "control_character",
            "control character",
        ),
        (
            "POST",
            "/v1/parse",
            br#"{"text": "a", "extra": 1}"#.to_vec(),
            None,
            400,
            "malformed_json",
            "unknown field `extra`",
        ),
        (
            "POST",
            "/v1/models/demo/activate",
            br#"{"version": "x"}"#.to_vec(),
            Some("wrong"),
            401,
            "unauthenticated",
            "wrong admin token",
        ),
        (
            "POST",
            "/v1/models/demo/activate",
            br#"{"version": "x"}"#.to_vec(),
            None,
            401,
            "unauthenticated",
            "admin token",
        ),
        (
            "POST",
            "/v1/models/demo/activate",
            br#"{"version": "nope"}"#.to_vec(),
            Some(TOKEN),
            400,
            "invalid_name",
            "invalid version name",
        ),
        (
            "GET",
            "/v1/nothing",
            Vec::new(),
            None,
            404,
            "no_route",
            "no such route",
        ),
        (
            "GET",
            "/v1/parse",
            Vec::new(),
            None,
            405,
            "method_not_allowed",
            "does not take GET",
        ),
        (
            "GET",
            "/v1/scaling?tokens=abc",
            Vec::new(),
            None,
            400,
            "bad_query",
            "expected a whole number from 1 to 4096",
        ),
        (
            "GET",
            "/v1/scaling?size=3",
            Vec::new(),
            None,
            400,
            "bad_query",
            "unknown query parameter",
        ),
        (
            "DELETE",
            "/v1/models",
            Vec::new(),
            None,
            405,
            "method_not_allowed",
            "does not take DELETE",
        ),
    ];
    for (method, path, body, auth, status, code, fragment) in cases {
        let (got, json) = call(&state, method, path, body, auth).await;
        assert_eq!(got.as_u16(), status, "{path} {code}: {json}");
        assert_eq!(json["error"]["code"], code, "{json}");
        let message = json["error"]["message"].as_str().unwrap_or_default();
        assert!(
            message.contains(fragment),
            "{code}: {message:?} lacks {fragment:?}"
        );
    }
    // Still serving after all of that; the reply names the model version.
    let (status, json) = call(
        &state,
        "POST",
        "/v1/parse",
        br#"{"text": "The pilot signed the manifest.", "confidence": true}"#.to_vec(),
        None,
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{json}");
    assert_eq!(json["model"]["name"], "demo");
    let tokens = json["sentences"][0]["tokens"].as_array().expect("tokens");
    assert_eq!(tokens.len(), 6);
    let roots = tokens.iter().filter(|t| t["head"] == 0).count();
    assert_eq!(roots, 1, "single root: {json}");
    for token in tokens {
        let p = token["confidence"].as_f64().expect("confidence");
        let text = token["confidence"].to_string();
        let decimals = text.split('.').nth(1).map_or(0, str::len);
        assert!(
            (0.0..=1.0).contains(&p) && decimals <= 6,
            "confidence {text}: six decimals at most"
        );
    }
    // Sentences of several lengths, then the cost model predicts any length.
    for words in [3usize, 9, 20, 40] {
        let tokens: Vec<String> = (0..words).map(|i| format!("w{i}")).collect();
        let body = serde_json::json!({ "tokens": tokens })
            .to_string()
            .into_bytes();
        let (status, _) = call(&state, "POST", "/v1/parse", body, None).await;
        assert_eq!(status, StatusCode::OK);
    }
    let (status, scaling) = call(&state, "GET", "/v1/scaling?tokens=100", Vec::new(), None).await;
    assert_eq!(status, StatusCode::OK, "{scaling}");
    let predictions = scaling["prediction"]["predictions"]
        .as_array()
        .expect("predictions");
    assert!(
        predictions
            .iter()
            .any(|p| p["stage"] == "decode" && p["seconds"].as_f64().is_some_and(|s| s > 0.0)),
        "{scaling}"
    );
    assert!(
        scaling["cost_models"]
            .as_array()
            .is_some_and(|m| !m.is_empty())
    );
    // A browser pointed at the service's address lands on the console.
    let response = get_response(&state, "/").await;
    assert_eq!(response.status(), StatusCode::TEMPORARY_REDIRECT);
    assert_eq!(response.headers()["location"], "/ui");
    // A wrong method keeps the Allow header beside the JSON body.
    let response = server::http::router(state.clone())
        .oneshot(
            Request::get("/v1/parse")
                .body(Body::empty())
                .expect("request"),
        )
        .await
        .expect("response");
    assert_eq!(response.status(), StatusCode::METHOD_NOT_ALLOWED);
    assert_eq!(response.headers()["allow"], "POST");
    let (status, batch) = call(&state, "POST", "/v1/parse/batch", br#"{"sentences": [{"text": "A tug moved."}, {"tokens": ["the", "clerk", "signed"], "tags": ["DET", "NOUN", "VERB"]}]}"#.to_vec(), None).await;
    assert_eq!(status, StatusCode::OK, "{batch}");
    assert_eq!(
        batch["results"][1]["sentences"][0]["tokens"][1]["form"], "clerk",
        "input order kept"
    );
    assert_eq!(
        batch["results"][1]["sentences"][0]["tokens"][2]["tag"], "VERB",
        "given tags used"
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn deadline_exceeded_is_a_clear_error() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let state = server::build_state(&config(
        &tmp.path().join("store"),
        &tmp.path().join("cache"),
        Duration::from_nanos(1),
    ))
    .await
    .expect("state");
    let (status, json) = call(
        &state,
        "POST",
        "/v1/parse",
        br#"{"text": "The pilot signed the manifest."}"#.to_vec(),
        None,
    )
    .await;
    assert_eq!(status, StatusCode::GATEWAY_TIMEOUT, "{json}");
    assert_eq!(json["error"]["code"], "deadline_exceeded");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn console_is_served_with_a_same_origin_only_policy() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let state = server::build_state(&config(
        &tmp.path().join("store"),
        &tmp.path().join("cache"),
        Duration::from_secs(5),
    ))
    .await
    .expect("state");
    for (path, content_type) in [
        ("/ui", "text/html"),
        ("/ui/console.css", "text/css"),
        ("/ui/console.js", "text/javascript"),
    ] {
        let response = server::http::router(state.clone())
            .oneshot(Request::get(path).body(Body::empty()).expect("request"))
            .await
            .expect("response");
        assert_eq!(response.status(), StatusCode::OK, "{path}");
        let header = |name: &str| {
            response
                .headers()
                .get(name)
                .and_then(|v| v.to_str().ok())
                .unwrap_or_default()
                .to_string()
        };
        assert!(header("content-type").starts_with(content_type), "{path}");
        let policy = header("content-security-policy");
        assert!(policy.contains("default-src 'none'"), "{path}: {policy}");
        assert!(policy.contains("connect-src 'self'"), "{path}: {policy}");
        let body = response
            .into_body()
            .collect()
            .await
            .expect("body")
            .to_bytes();
        // Nothing in the page points outside the service (the SVG namespace is a name, not a
        // request).
        let text = String::from_utf8_lossy(&body).replace("http://www.w3.org/2000/svg", "");
        assert!(
            !text.contains("http://") && !text.contains("https://"),
            "{path}"
        );
    }
}

/// The sentences the README and the console show, as the demo model parses them: tags, heads
/// and labels written out by hand for each (the demo data's own annotation scheme), decoded
/// with the demo model's default decoder, which is projective because the demo data is.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_shown_sentences_parse_sensibly_with_the_demo_model() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let state = demo_state(tmp.path()).await;
    let (status, models) = call(&state, "GET", "/v1/models", Vec::new(), None).await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!(
        models["models"][0]["serving"]["default_decoder"], "projective",
        "{models}"
    );
    assert_eq!(models["admin_routes"], true, "an admin token is configured");
    // (form, tag, head, label) per word.
    let shown: [&[(&str, &str, u64, &str)]; 4] = [
        &[
            ("The", "DET", 3, "det"),
            ("crane", "NOUN", 3, "compound"),
            ("operator", "NOUN", 4, "nsubj"),
            ("moved", "VERB", 0, "root"),
            ("a", "DET", 7, "det"),
            ("blue", "ADJ", 7, "amod"),
            ("container", "NOUN", 4, "obj"),
            (".", "PUNCT", 4, "punct"),
        ],
        &[
            ("A", "DET", 2, "det"),
            ("tug", "NOUN", 3, "nsubj"),
            ("moved", "VERB", 0, "root"),
            (".", "PUNCT", 3, "punct"),
        ],
        &[
            ("The", "DET", 2, "det"),
            ("pilot", "NOUN", 3, "nsubj"),
            ("signed", "VERB", 0, "root"),
            ("the", "DET", 5, "det"),
            ("manifest", "NOUN", 3, "obj"),
            (".", "PUNCT", 3, "punct"),
        ],
        &[
            ("The", "DET", 3, "det"),
            ("crane", "NOUN", 3, "compound"),
            ("operator", "NOUN", 4, "nsubj"),
            ("moved", "VERB", 0, "root"),
            ("the", "DET", 7, "det"),
            ("blue", "ADJ", 7, "amod"),
            ("container", "NOUN", 4, "obj"),
            ("to", "ADP", 10, "case"),
            ("the", "DET", 10, "det"),
            ("quay", "NOUN", 4, "obl"),
            ("before", "ADP", 13, "case"),
            ("the", "DET", 13, "det"),
            ("storm", "NOUN", 4, "obl"),
            (".", "PUNCT", 4, "punct"),
        ],
    ];
    for expected in shown {
        let text = expected
            .iter()
            .map(|w| w.0)
            .collect::<Vec<_>>()
            .join(" ")
            .replace(" .", ".");
        let body = serde_json::json!({ "text": text }).to_string().into_bytes();
        let (status, json) = call(&state, "POST", "/v1/parse", body, None).await;
        assert_eq!(status, StatusCode::OK, "{json}");
        let got: Vec<(String, String, u64, String)> = json["sentences"][0]["tokens"]
            .as_array()
            .expect("tokens")
            .iter()
            .map(|t| {
                (
                    t["form"].as_str().unwrap_or_default().to_string(),
                    t["tag"].as_str().unwrap_or_default().to_string(),
                    t["head"].as_u64().unwrap_or(u64::MAX),
                    t["label"].as_str().unwrap_or_default().to_string(),
                )
            })
            .collect();
        let want: Vec<(String, String, u64, String)> = expected
            .iter()
            .map(|&(f, t, h, l)| (f.to_string(), t.to_string(), h, l.to_string()))
            .collect();
        assert_eq!(got, want, "{text}");
    }
}

/// A candidate identical to live (the same files published again) is shadowed on every
/// request, agrees on every word, and is promoted automatically once enough sentences were
/// compared: the `live` alias moves by compare-and-swap, this replica swaps, and the audit log
/// holds one entry naming the replica and the evidence. Replies never depended on it.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_candidate_is_shadowed_and_promoted_once_its_gates_pass() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let mut settings = config(
        &tmp.path().join("store"),
        &tmp.path().join("cache"),
        Duration::from_secs(10),
    );
    settings.rollout = arcwright::server::rollout::RolloutSettings {
        sample: 1.0,
        automatic: true,
        min_sentences: 24,
        min_agreement: 0.99,
        max_latency_ratio: 5.0,
        replica: "in-process".to_string(),
        ..Default::default()
    };
    let state = server::build_state(&settings).await.expect("state");
    let registry = state.engine.registry.clone();
    let store = registry.store().clone();
    let live = store
        .alias("demo", "live")
        .await
        .expect("alias")
        .expect("live")
        .version;
    let (files, _) = store
        .fetch("demo", &live, &tmp.path().join("fetched"))
        .await
        .expect("fetch");
    let candidate = store
        .publish("demo", &files, arcwright_store::ArtifactInfo::default())
        .await
        .expect("publish")
        .version;
    store
        .set_alias("demo", "candidate", &candidate)
        .await
        .expect("candidate alias");
    registry.follow_once().await;
    assert_eq!(
        registry.candidate("demo").map(|c| c.version.clone()),
        Some(candidate.clone())
    );
    state.engine.rollout.start(registry.clone());
    for i in 0..30 {
        let text = format!(
            "The crane operator moved {} blue containers to berth {i}.",
            i + 2
        );
        let (status, body) = call(
            &state,
            "POST",
            "/v1/parse",
            serde_json::json!({ "text": text }).to_string().into_bytes(),
            None,
        )
        .await;
        assert_eq!(status, StatusCode::OK, "{body}");
    }
    let mut rollout = serde_json::Value::Null;
    for _ in 0..200 {
        rollout = call(&state, "GET", "/v1/models/demo/rollout", Vec::new(), None)
            .await
            .1;
        if rollout["shadow"]["decision"] == "promoted" {
            break;
        }
        tokio::time::sleep(Duration::from_millis(100)).await;
    }
    assert_eq!(rollout["shadow"]["decision"], "promoted", "{rollout:#}");
    assert_eq!(
        rollout["shadow"]["total"]["head_agreement"], 1.0,
        "{rollout:#}"
    );
    assert_eq!(rollout["shadow"]["total"]["errors"], 0);
    assert_eq!(
        store
            .alias("demo", "live")
            .await
            .expect("alias")
            .map(|r| r.version),
        Some(candidate.clone())
    );
    assert_eq!(
        registry.snapshot(Some("demo")).expect("served").version,
        candidate
    );
    let log = store.history("demo").await.expect("history");
    let promotes: Vec<_> = log
        .iter()
        .filter(|e| e.action == arcwright_store::Action::Promote && e.to == candidate)
        .collect();
    assert_eq!(promotes.len(), 1, "{log:?}");
    assert_eq!(promotes[0].actor, "replica:in-process");
    assert_eq!(promotes[0].from.as_deref(), Some(live.as_str()));
    assert!(promotes[0].evidence["shadow"]["buckets"].is_object());
    // Live and candidate are now the same version: nothing is shadowed any more.
    let after = call(&state, "GET", "/v1/models/demo/rollout", Vec::new(), None)
        .await
        .1;
    assert_eq!(after["shadowing"], false, "{after:#}");
}
