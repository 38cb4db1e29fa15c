//! `arcwright serve`: the long-running parsing service.
//!
//! Startup reads like a story: tracing; validated configuration; the store (building the demo
//! model into it only when asked: `--demo`, or the default local store); the first load of every model with a `live` alias; the
//! compute pool; both listeners bound and logged with a ready-to-paste example; the store
//! follower (hot-swap); serving until SIGTERM/SIGINT; then stop accepting, drain in-flight
//! requests within the grace period, exit 0.

pub mod config;
pub mod cpu_clock;
mod demo_model;
pub mod errors;
pub mod grpc;
pub mod http;
pub mod metrics;
mod openapi;
pub mod probe;
pub mod registry;
pub mod request;
pub mod rollout;
pub mod scaling;
mod ui;

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};

use arcwright_store::Store;
use tokio::sync::Semaphore;

use errors::{ApiError, ErrorCode};
use registry::Registry;
use request::Engine;

/// Why the service could not start. Each names what the operator must fix.
#[derive(Debug, thiserror::Error)]
pub enum StartupError {
    #[error(transparent)]
    Config(#[from] config::ConfigError),
    #[error("model store: {0}")]
    Store(#[from] arcwright_store::StoreError),
    #[error(
        "the store {store} has no model with a live alias; publish and promote one \
         (arcwright store publish --store {store} --name NAME DIR, then store promote), \
         or start with --demo to build the bundled demo model into it"
    )]
    EmptyStore { store: String },
    #[error("building the demo model: {0}")]
    Demo(String),
    #[error("no model could be loaded from {store} (see the log)")]
    NothingLoaded { store: String },
    #[error("--default-model: {0}")]
    DefaultModel(ApiError),
    #[error("cannot start the decoder probe's thread: {0}")]
    Probe(std::io::Error),
    #[error("cannot start the parsing threads: {0}")]
    Pool(#[from] rayon::ThreadPoolBuildError),
    #[error("cannot listen for {what} on {address}: {source}")]
    Bind {
        what: &'static str,
        address: std::net::SocketAddr,
        source: std::io::Error,
    },
    #[error("gRPC reflection: {0}")]
    Reflection(#[from] tonic_reflection::server::Error),
}

/// Everything the front doors share.
#[derive(Debug)]
pub struct AppState {
    pub engine: Engine,
    pub admin_token: Option<String>,
    pub draining: AtomicBool,
}

/// A short unique request id (process-unique counter plus time).
pub fn new_request_id() -> String {
    static COUNTER: AtomicU64 = AtomicU64::new(0);
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    let t = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_micros());
    format!("{:x}-{n:x}", t & 0xffff_ffff_ffff)
}

/// Every model: versions in the store, the `live` target, the version being served.
pub async fn models_status(state: &AppState) -> Result<serde_json::Value, ApiError> {
    let registry = &state.engine.registry;
    let store = registry.store();
    let unavailable =
        |e: arcwright_store::StoreError| ApiError::new(ErrorCode::StoreUnavailable, e.to_string());
    let mut names = store.names().await.map_err(unavailable)?;
    for (name, _) in registry.serving() {
        if !names.contains(&name) {
            names.push(name);
        }
    }
    let default = registry.default_name();
    let serving: std::collections::BTreeMap<String, Arc<registry::Served>> =
        registry.serving().into_iter().collect();
    let mut models = Vec::new();
    for name in names {
        let listed = store.list(&name).await.map_err(unavailable)?;
        let live = store
            .alias(&name, "live")
            .await
            .map_err(unavailable)?
            .map(|r| r.version);
        let aliases = store.aliases(&name).await.map_err(unavailable)?;
        let versions: Vec<serde_json::Value> = listed
            .iter()
            .map(|v| {
                serde_json::json!({
                    "version": v.manifest.version, "size_bytes": v.manifest.size(), "created": v.manifest.created,
                    "aliases": v.aliases, "scores": v.manifest.scores,
                    // Models published before there was a second kind record none: linear.
                    "kind": v.manifest.settings.get("kind").and_then(|k| k.as_str()).unwrap_or("linear"),
                })
            })
            .collect();
        let served = serving.get(&name).map(|s| {
            serde_json::json!({
                "version": s.version,
                "load_seconds": s.load_seconds,
                "loaded_at_unix_ms": s.loaded_at.duration_since(std::time::UNIX_EPOCH).map_or(0, |d| d.as_millis()),
                "default_decoder": s.model.default_decoder.name(),
                "kind": s.model.scorer.kind(),
            })
        });
        models.push(serde_json::json!({
            "name": name,
            "default": default.as_deref() == Some(name.as_str()),
            "live": live,
            "aliases": aliases.iter().map(|(a, r)| (a.clone(), serde_json::json!(r.version))).collect::<serde_json::Map<_, _>>(),
            "serving": served,
            "versions": versions,
            "swaps": registry.swaps().into_iter().filter(|e| e.name == name).collect::<Vec<_>>(),
        }));
    }
    Ok(serde_json::json!({ "models": models, "admin_routes": state.admin_token.is_some() }))
}

/// The rollout state of one model: its candidate, the shadow comparison with live per length
/// bucket, what the gates make of it, and the audit log's latest entries.
pub async fn rollout_status(state: &AppState, name: &str) -> Result<serde_json::Value, ApiError> {
    let engine = &state.engine;
    let live = engine.registry.snapshot(Some(name))?;
    let candidate = engine.registry.candidate(name);
    let settings = &engine.rollout.settings_for(name);
    let comparison = engine.rollout.comparison(name).filter(|c| {
        candidate
            .as_ref()
            .is_some_and(|v| v.version == c.candidate_version)
    });
    let row = |bucket: &str, c: &rollout::BucketCounts| {
        serde_json::json!({
            "length_bucket": bucket,
            "sentences": c.sentences,
            "words": c.words,
            "errors": c.errors,
            "head_agreement": c.head_agreement(),
            "label_agreement": c.label_agreement(),
            "latency_ratio": c.latency_ratio(),
            "live_cpu_seconds": c.live_cpu_seconds,
            "candidate_cpu_seconds": c.candidate_cpu_seconds,
        })
    };
    let shadow = comparison.as_ref().map(|c| {
        let judgement = match rollout::judge(c, settings) {
            rollout::Judgement::Waiting => serde_json::json!({"verdict": "waiting",
                "sentences_needed": settings.min_sentences.saturating_sub(c.total().sentences)}),
            rollout::Judgement::Promote(reason) => {
                serde_json::json!({"verdict": "promote", "reason": reason})
            }
            rollout::Judgement::Refuse(reason) => {
                serde_json::json!({"verdict": "refuse", "reason": reason})
            }
        };
        serde_json::json!({
            "live_version": c.live_version,
            "candidate_version": c.candidate_version,
            "started_unix_ms": c.started_unix_ms,
            "shed": c.shed,
            "total": row("all", &c.total()),
            "buckets": c.buckets.iter().map(|(b, counts)| row(b, counts)).collect::<Vec<_>>(),
            "gates": judgement,
            "decision": c.decision,
            "reason": c.reason,
        })
    });
    let store_error =
        |e: arcwright_store::StoreError| ApiError::new(ErrorCode::StoreUnavailable, e.to_string());
    let history = engine
        .registry
        .store()
        .history(name)
        .await
        .map_err(store_error)?;
    let recent: Vec<_> = history.iter().rev().take(10).collect();
    Ok(serde_json::json!({
        "model": name,
        "live_version": live.version,
        "candidate_version": candidate.as_ref().map(|c| c.version.clone()),
        "shadowing": candidate.as_ref().is_some_and(|c| c.version != live.version) && settings.sample > 0.0,
        "policy": {
            "mode": if settings.automatic { "automatic" } else { "manual" },
            "sample": settings.sample,
            "min_sentences": settings.min_sentences,
            "min_agreement": settings.min_agreement,
            "max_latency_ratio": settings.max_latency_ratio,
            "rollback_seconds": settings.rollback_hold.as_secs_f64(),
            "replica": settings.replica,
            "from_store": engine.registry.rollout_policy(name),
        },
        "shadow": shadow,
        "audit": recent,
    }))
}

/// Moves the store's `live` alias to `version` (all replicas follow) and swaps this replica at
/// once. Returns the new and the previous version.
pub async fn activate(
    state: &AppState,
    name: &str,
    version: &str,
) -> Result<(String, Option<String>), ApiError> {
    let registry = &state.engine.registry;
    let store_error = |e: arcwright_store::StoreError| match e {
        arcwright_store::StoreError::InvalidName { .. } => {
            ApiError::new(ErrorCode::InvalidName, e.to_string())
        }
        arcwright_store::StoreError::NotFound { .. } => {
            ApiError::new(ErrorCode::UnknownVersion, e.to_string())
        }
        arcwright_store::StoreError::Corrupt { .. }
        | arcwright_store::StoreError::UnknownSchema { .. } => {
            ApiError::new(ErrorCode::UnusableVersion, e.to_string())
        }
        other => ApiError::new(ErrorCode::StoreUnavailable, other.to_string()),
    };
    let decision = arcwright_store::Decision {
        actor: "admin-api".to_string(),
        reason: "promote requested through the admin API".to_string(),
        evidence: serde_json::Value::Null,
    };
    let record = registry
        .store()
        .promote(name, "live", version, decision)
        .await
        .map_err(store_error)?;
    registry.load_and_swap(name, version).await.map_err(|m| {
        ApiError::new(
            ErrorCode::LoadFailed,
            format!("the alias moved but this replica could not load it: {m}"),
        )
    })?;
    Ok((record.version, record.history.first().cloned()))
}

/// Builds the app state (no sockets): used by `run` and by tests.
pub async fn build_state(config: &config::Config) -> Result<Arc<AppState>, StartupError> {
    metrics::init();
    // Only a store the demo model may be built into is created when missing.
    let store = if config.bootstrap_demo {
        Store::open(&config.store)?
    } else {
        Store::open_existing(&config.store)?
    };
    if !demo_model::has_live_model(&store).await? {
        if !config.bootstrap_demo {
            return Err(StartupError::EmptyStore {
                store: config.store.clone(),
            });
        }
        demo_model::publish_demo_model(&store).await?;
    }
    let registry = Arc::new(Registry::new(
        store,
        config.cache_dir.clone(),
        config.default_model.clone(),
        config.poll,
    ));
    let serving = registry.follow_once().await;
    if serving == 0 {
        return Err(StartupError::NothingLoaded {
            store: config.store.clone(),
        });
    }
    if let Some(name) = &config.default_model {
        registry
            .snapshot(Some(name))
            .map_err(StartupError::DefaultModel)?;
    }
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(config.threads)
        .thread_name(|i| format!("parse-{i}"))
        .build()?;
    Ok(Arc::new(AppState {
        engine: Engine {
            rollout: Arc::new(rollout::Rollout::new(config.rollout.clone())),
            registry,
            pool,
            limits: config.limits.clone(),
            permits: Arc::new(Semaphore::new(config.limits.max_in_flight)),
        },
        admin_token: config.admin_token.clone(),
        draining: AtomicBool::new(false),
    }))
}

/// Logs to stderr: the filter from `ARCWRIGHT_LOG` (default `info`), colours only on a terminal
/// and never when `NO_COLOR` is set (no-color.org).
pub fn init_tracing(json: bool) {
    use std::io::IsTerminal;
    let filter = tracing_subscriber::EnvFilter::try_from_env("ARCWRIGHT_LOG")
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new("info"));
    let colour = std::io::stderr().is_terminal()
        && std::env::var_os("NO_COLOR").is_none_or(|v| v.is_empty());
    let builder = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_ansi(colour)
        .with_writer(std::io::stderr);
    let _ = if json {
        builder.json().try_init()
    } else {
        builder.try_init()
    };
}

/// Runs the service until SIGTERM/SIGINT, then drains and returns.
pub async fn run(config: config::Config) -> Result<(), StartupError> {
    let state = build_state(&config).await?;
    let registry = state.engine.registry.clone();
    for (name, served) in registry.serving() {
        tracing::info!(model = %name, version = %served.version, load_seconds = served.load_seconds, "serving model");
    }
    let bind = |what: &'static str, address: std::net::SocketAddr| async move {
        let listener = tokio::net::TcpListener::bind(address)
            .await
            .map_err(|source| StartupError::Bind {
                what,
                address,
                source,
            })?;
        let bound = listener.local_addr().map_err(|source| StartupError::Bind {
            what,
            address,
            source,
        })?;
        Ok::<_, StartupError>((listener, bound))
    };
    let (http_listener, http_addr) = bind("HTTP", config.http).await?;
    let (grpc_listener, grpc_addr) = bind("gRPC", config.grpc).await?;
    tracing::info!(%http_addr, %grpc_addr, console = %format!("http://{http_addr}/ui"), store = %config.store, threads = config.threads, "listening");
    eprintln!(
        "arcwright is serving: HTTP on http://{http_addr}, gRPC on {grpc_addr}\n  try: curl -s http://{http_addr}/v1/parse -d '{{\"text\": \"The crane operator moved a blue container.\"}}'\n  gRPC: arcwright query --grpc {grpc_addr} \"The pilot signed the manifest.\"\n  console: http://{http_addr}/ui"
    );
    let follower = tokio::spawn(registry.clone().follow());
    probe::start(config.probe).map_err(StartupError::Probe)?;
    state.engine.rollout.start(registry.clone());
    tokio::spawn(rollout::watch_for_rollback(
        registry.clone(),
        state.engine.rollout.clone(),
    ));

    let (shutdown_tx, shutdown_rx) = tokio::sync::watch::channel(false);
    let http_state = state.clone();
    let mut http_shutdown = shutdown_rx.clone();
    let http = tokio::spawn(async move {
        use axum::serve::ListenerExt;
        // TCP_NODELAY, as for gRPC below.
        let listener = http_listener.tap_io(|tcp| {
            let _ = tcp.set_nodelay(true);
        });
        axum::serve(listener, http::router(http_state))
            .with_graceful_shutdown(async move {
                let _ = http_shutdown.wait_for(|stop| *stop).await;
            })
            .await
    });
    let (health_reporter, health_service) = tonic_health::server::health_reporter();
    health_reporter
        .set_serving::<grpc::proto::parser_server::ParserServer<grpc::ParserService>>()
        .await;
    health_reporter
        .set_service_status("", tonic_health::ServingStatus::Serving)
        .await;
    // Server reflection, both protocol versions in use by clients (v1 and v1alpha).
    let reflection_builder = || {
        tonic_reflection::server::Builder::configure()
            .register_encoded_file_descriptor_set(grpc::proto::DESCRIPTOR)
            .register_encoded_file_descriptor_set(tonic_health::pb::FILE_DESCRIPTOR_SET)
    };
    let reflection = reflection_builder().build_v1()?;
    let reflection_alpha = reflection_builder().build_v1alpha()?;
    let max_message = config.limits.max_body_bytes;
    let parser_service = grpc::proto::parser_server::ParserServer::new(grpc::ParserService {
        state: state.clone(),
    })
    .max_decoding_message_size(max_message);
    let admin_service =
        grpc::proto::model_admin_server::ModelAdminServer::new(grpc::AdminService {
            state: state.clone(),
        })
        .max_decoding_message_size(max_message);
    let mut grpc_shutdown = shutdown_rx.clone();
    let grpc = tokio::spawn(async move {
        tonic::transport::Server::builder()
            .add_service(health_service)
            .add_service(reflection)
            .add_service(reflection_alpha)
            .add_service(parser_service)
            .add_service(admin_service)
            // TCP_NODELAY: without it small replies wait for the peer's delayed ACK (≈40 ms).
            .serve_with_incoming_shutdown(
                tonic::transport::server::TcpIncoming::from(grpc_listener).with_nodelay(Some(true)),
                async move {
                    let _ = grpc_shutdown.wait_for(|stop| *stop).await;
                },
            )
            .await
    });

    wait_for_signal().await;
    tracing::info!(
        grace_seconds = config.grace.as_secs_f64(),
        "shutting down: no new connections, draining in-flight requests"
    );
    state.draining.store(true, Ordering::Relaxed);
    health_reporter
        .set_service_status("", tonic_health::ServingStatus::NotServing)
        .await;
    let _ = shutdown_tx.send(true);
    follower.abort();
    let drained = tokio::time::timeout(config.grace, async {
        let _ = http.await;
        let _ = grpc.await;
    })
    .await;
    if drained.is_err() {
        tracing::warn!("grace period over; exiting with requests still open");
    } else {
        tracing::info!("drained; bye");
    }
    Ok(())
}

async fn wait_for_signal() {
    let ctrl_c = async {
        let _ = tokio::signal::ctrl_c().await;
    };
    #[cfg(unix)]
    let terminate = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut signal) => {
                signal.recv().await;
            }
            Err(_) => std::future::pending::<()>().await,
        }
    };
    #[cfg(not(unix))]
    let terminate = std::future::pending::<()>();
    tokio::select! {
        _ = ctrl_c => {},
        _ = terminate => {},
    }
}
