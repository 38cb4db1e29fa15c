//! `arcwright serve` configuration: one struct of settings, filled from flags, `ARCWRIGHT_*`
//! environment variables (read here and nowhere else in the service) and an optional TOML file,
//! validated into [`Config`] before anything is built.
//!
//! The file is read with the same serde definition as the flags: its keys are the flag names
//! (`max-tokens = 256`), unknown keys are refused with their line, and a flag or an environment
//! variable wins over the file.

use std::net::SocketAddr;
use std::path::PathBuf;
use std::time::Duration;

use clap::Args;
use serde::{Deserialize, Serialize};

/// The store `serve` and `store` use when none is named: a directory beside the working
/// directory that is no source folder of the repository (and is git-ignored).
pub const DEFAULT_STORE: &str = "./arcwright-store";

/// A setting that cannot be used, naming the flag (or the file and line) and the reason.
#[derive(Debug, thiserror::Error)]
pub enum ConfigError {
    #[error("--config {path}: {source}")]
    File {
        path: String,
        source: std::io::Error,
    },
    #[error("{path}:{line}: {message}")]
    Syntax {
        path: String,
        line: usize,
        message: String,
    },
    #[error("{path}:{line}: unknown setting {key:?}")]
    UnknownSetting {
        path: String,
        line: usize,
        key: String,
    },
    #[error("{path}:{line}: {key} = {value}: {reason}")]
    FileValue {
        path: String,
        line: usize,
        key: String,
        value: String,
        reason: String,
    },
    #[error("--{flag} {value}: {reason}")]
    Value {
        flag: &'static str,
        value: String,
        reason: &'static str,
    },
    #[error("--admin-token-file {path}: {source}")]
    AdminTokenFile {
        path: String,
        source: std::io::Error,
    },
    #[error("the admin token must be at least 16 characters")]
    AdminTokenTooShort,
}

/// Flags of `arcwright serve`; each has an `ARCWRIGHT_*` environment variable and a key of the
/// same name in the settings file.
#[derive(Debug, Clone, Args, Serialize, Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
pub struct ServeArgs {
    /// Model store URL (path, file:///…, s3://bucket/prefix).
    #[arg(long, env = "ARCWRIGHT_STORE", default_value = DEFAULT_STORE)]
    pub store: String,
    /// Build the bundled demo model (an invented harbour-crew scenario; seconds) into the store
    /// when it has no live model. Without this flag only the default local store is bootstrapped;
    /// any other empty store is a startup error.
    #[arg(long, env = "ARCWRIGHT_DEMO")]
    pub demo: bool,
    /// HTTP/JSON listen address.
    #[arg(long, env = "ARCWRIGHT_HTTP", default_value = "127.0.0.1:8080")]
    pub http: SocketAddr,
    /// gRPC listen address.
    #[arg(long, env = "ARCWRIGHT_GRPC", default_value = "127.0.0.1:50051")]
    pub grpc: SocketAddr,
    /// Model used when a request names none (default: the only one, or the first by name).
    #[arg(long, env = "ARCWRIGHT_DEFAULT_MODEL")]
    pub default_model: Option<String>,
    /// Seconds between checks of each model's `live` alias.
    #[arg(long, env = "ARCWRIGHT_POLL_SECONDS", default_value_t = 5.0)]
    pub poll_seconds: f64,
    /// Local cache for fetched model versions.
    #[arg(long, env = "ARCWRIGHT_CACHE_DIR", default_value = ".cache/serving")]
    pub cache_dir: PathBuf,
    /// File holding the admin bearer token (admin routes are off without a token).
    #[arg(long, env = "ARCWRIGHT_ADMIN_TOKEN_FILE")]
    pub admin_token_file: Option<PathBuf>,
    /// Most tokens in one sentence.
    #[arg(long, env = "ARCWRIGHT_MAX_TOKENS", default_value_t = 256)]
    pub max_tokens: usize,
    /// Most sentences in one batch (and in one text).
    #[arg(long, env = "ARCWRIGHT_MAX_SENTENCES", default_value_t = 64)]
    pub max_sentences: usize,
    /// Largest request body in bytes.
    #[arg(long, env = "ARCWRIGHT_MAX_BODY_BYTES", default_value_t = 1 << 20)]
    pub max_body_bytes: usize,
    /// Per-request deadline in seconds (gRPC clients may ask for less with grpc-timeout).
    #[arg(long, env = "ARCWRIGHT_DEADLINE_SECONDS", default_value_t = 10.0)]
    pub deadline_seconds: f64,
    /// Requests parsed or queued at once; more are refused (HTTP 429 / RESOURCE_EXHAUSTED).
    #[arg(long, env = "ARCWRIGHT_MAX_IN_FLIGHT", default_value_t = 64)]
    pub max_in_flight: usize,
    /// Parsing threads (default: one per core).
    #[arg(long, env = "ARCWRIGHT_THREADS")]
    pub threads: Option<usize>,
    /// Seconds to finish in-flight requests after SIGTERM/SIGINT.
    #[arg(long, env = "ARCWRIGHT_GRACE_SECONDS", default_value_t = 20.0)]
    pub grace_seconds: f64,
    /// Log JSON lines instead of human-readable text.
    #[arg(long, env = "ARCWRIGHT_LOG_JSON")]
    pub log_json: bool,
    /// Seconds between runs of the decoder probe (both decoders timed on synthetic sentences of
    /// 32-512 words, on an idle-priority thread; the first run at start). 0 turns it off.
    #[arg(long, env = "ARCWRIGHT_PROBE_SECONDS", default_value_t = 300.0)]
    pub probe_seconds: f64,
    /// Test switch for the alerting path: the probe times the textbook decoders, run ⌈n/128⌉
    /// times per matrix, as a decoder one order too slow would be. Never for production.
    #[arg(long, env = "ARCWRIGHT_PROBE_SLOWED", hide = true)]
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub probe_slowed: bool,
    /// Share of requests to a model with a `candidate` version that the candidate also parses,
    /// off the reply path (0 = none).
    #[arg(long, env = "ARCWRIGHT_SHADOW_SAMPLE", default_value_t = 0.1)]
    pub shadow_sample: f64,
    /// Candidates are promoted by hand ("manual") or by this replica once its shadow parses
    /// pass the gates ("automatic").
    #[arg(long, env = "ARCWRIGHT_ROLLOUT", default_value = "manual", value_parser = ["manual", "automatic"])]
    pub rollout: String,
    /// Sentences a candidate must have been compared on before an automatic decision.
    #[arg(long, env = "ARCWRIGHT_ROLLOUT_MIN_SENTENCES", default_value_t = 500)]
    pub rollout_min_sentences: u64,
    /// Least share of words whose head the candidate chooses as live does.
    #[arg(long, env = "ARCWRIGHT_ROLLOUT_MIN_AGREEMENT", default_value_t = 0.9)]
    pub rollout_min_agreement: f64,
    /// Most candidate CPU time per live CPU time on the same sentences.
    #[arg(
        long,
        env = "ARCWRIGHT_ROLLOUT_MAX_LATENCY_RATIO",
        default_value_t = 1.5
    )]
    pub rollout_max_latency_ratio: f64,
    /// Seconds a newly promoted live version may stay outside its band (failure rate, or CPU
    /// time per sentence in a length bucket beyond the latency ratio, against the previous
    /// version) before this replica rolls it back. 0 = never.
    #[arg(long, env = "ARCWRIGHT_ROLLBACK_SECONDS", default_value_t = 60.0)]
    pub rollback_seconds: f64,
    /// Test switch: VERSION=SHARE makes that share of the requests served by VERSION fail, to
    /// exercise automatic rollback. Never for production.
    #[arg(long, env = "ARCWRIGHT_INJECT_FAILURES", hide = true)]
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub inject_failures: Option<String>,
    /// This replica's name in the store's audit log (default: the host name).
    #[arg(long, env = "ARCWRIGHT_REPLICA_ID")]
    pub replica_id: Option<String>,
    /// Optional settings file (TOML): the flag names above as keys, without `--`
    /// (`max-tokens = 256`, `store = "s3://bucket/prefix"`). A flag or an environment variable
    /// wins over the file.
    #[arg(long, env = "ARCWRIGHT_CONFIG")]
    #[serde(skip)]
    pub config: Option<PathBuf>,
    /// Check the settings (flags, variables, config file, admin token), print the resolved
    /// settings as a settings file and exit without serving: for deployment pipelines.
    #[arg(long)]
    #[serde(skip)]
    pub check_config: bool,
}

/// Validated settings. `Debug` shows whether an admin token is set, never the token.
#[derive(Clone)]
pub struct Config {
    pub store: String,
    /// Build the demo model into the store if it has no live model (`--demo`, or the default
    /// local store).
    pub bootstrap_demo: bool,
    pub http: SocketAddr,
    pub grpc: SocketAddr,
    pub default_model: Option<String>,
    pub poll: Duration,
    pub cache_dir: PathBuf,
    pub admin_token: Option<String>,
    pub limits: Limits,
    pub threads: usize,
    pub grace: Duration,
    pub probe: super::probe::ProbeSettings,
    pub rollout: super::rollout::RolloutSettings,
}

impl std::fmt::Debug for Config {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Config")
            .field("store", &self.store)
            .field("bootstrap_demo", &self.bootstrap_demo)
            .field("http", &self.http)
            .field("grpc", &self.grpc)
            .field("default_model", &self.default_model)
            .field("poll", &self.poll)
            .field("cache_dir", &self.cache_dir)
            .field(
                "admin_token",
                &self.admin_token.as_ref().map(|_| "<set, not shown>"),
            )
            .field("limits", &self.limits)
            .field("threads", &self.threads)
            .field("grace", &self.grace)
            .field("probe", &self.probe)
            .field("rollout", &self.rollout)
            .finish()
    }
}

/// Request limits.
#[derive(Debug, Clone)]
pub struct Limits {
    pub max_tokens: usize,
    pub max_sentences: usize,
    pub max_body_bytes: usize,
    pub deadline: Duration,
    pub max_in_flight: usize,
}

fn seconds(flag: &'static str, value: f64) -> Result<Duration, ConfigError> {
    if value.is_finite() && value > 0.0 && value < 86_400.0 {
        Ok(Duration::from_secs_f64(value))
    } else {
        Err(ConfigError::Value {
            flag,
            value: value.to_string(),
            reason: "must be a number of seconds between 0 and 86400",
        })
    }
}

fn share(flag: &'static str, value: f64) -> Result<f64, ConfigError> {
    if (0.0..=1.0).contains(&value) {
        Ok(value)
    } else {
        Err(ConfigError::Value {
            flag,
            value: value.to_string(),
            reason: "must be a share between 0 and 1",
        })
    }
}

/// The 1-based line of byte `offset` in `text`.
fn line_of(text: &str, offset: usize) -> usize {
    text[..offset.min(text.len())].matches('\n').count() + 1
}

/// The 1-based line where `key` is set (bare keys, as the settings file uses them).
fn line_of_key(text: &str, key: &str) -> usize {
    text.lines()
        .position(|line| {
            line.trim_start()
                .strip_prefix(key)
                .is_some_and(|rest| rest.trim_start().starts_with('='))
        })
        .map_or(1, |index| index + 1)
}

impl ServeArgs {
    /// Fills in settings from `--config FILE` where the user gave neither a flag nor an
    /// environment variable (`matches` says where each value came from).
    pub fn apply_config_file(&mut self, matches: &clap::ArgMatches) -> Result<(), ConfigError> {
        let Some(file) = self.config.clone() else {
            return Ok(());
        };
        let path = file.display().to_string();
        let text = std::fs::read_to_string(&file).map_err(|source| ConfigError::File {
            path: path.clone(),
            source,
        })?;
        let table: toml::Table =
            toml::from_str(&text).map_err(|e: toml::de::Error| ConfigError::Syntax {
                path: path.clone(),
                line: e.span().map_or(1, |span| line_of(&text, span.start)),
                message: e.message().to_string(),
            })?;
        let mut merged = match serde_json::to_value(&*self) {
            Ok(serde_json::Value::Object(map)) => map,
            _ => unreachable!("ServeArgs serializes to an object"),
        };
        for (key, value) in table {
            let line = line_of_key(&text, &key);
            if !merged.contains_key(&key) {
                return Err(ConfigError::UnknownSetting { path, line, key });
            }
            let user_set = !matches!(
                matches.value_source(&key.replace('-', "_")),
                None | Some(clap::parser::ValueSource::DefaultValue)
            );
            if user_set {
                continue; // a flag or an environment variable wins
            }
            let shown = value.to_string();
            let json = serde_json::to_value(&value).unwrap_or(serde_json::Value::Null);
            let mut trial = merged.clone();
            trial.insert(key.clone(), json.clone());
            // Checked one key at a time, so a wrong type names its key and line.
            serde_json::from_value::<ServeArgs>(serde_json::Value::Object(trial)).map_err(|e| {
                ConfigError::FileValue {
                    path: path.clone(),
                    line,
                    key: key.clone(),
                    value: shown,
                    reason: e.to_string(),
                }
            })?;
            merged.insert(key, json);
        }
        let mut resolved: ServeArgs = serde_json::from_value(serde_json::Value::Object(merged))
            .expect("every key was checked on its own");
        resolved.config = self.config.take();
        resolved.check_config = self.check_config;
        *self = resolved;
        Ok(())
    }

    /// The resolved settings as a settings file (`--check-config`). The admin token itself is
    /// never part of it: only the file that holds it.
    pub fn to_settings_file(&self) -> String {
        toml::to_string(self).unwrap_or_else(|e| format!("# cannot render the settings: {e}\n"))
    }

    /// Checks the flags; reads the admin token (from its file, or `ARCWRIGHT_ADMIN_TOKEN`).
    pub fn validate(&self) -> Result<Config, ConfigError> {
        let positive = |flag: &'static str, v: usize| {
            if v == 0 {
                Err(ConfigError::Value {
                    flag,
                    value: v.to_string(),
                    reason: "must be at least 1",
                })
            } else {
                Ok(v)
            }
        };
        let admin_token = match &self.admin_token_file {
            Some(path) => Some(
                std::fs::read_to_string(path)
                    .map_err(|source| ConfigError::AdminTokenFile {
                        path: path.display().to_string(),
                        source,
                    })?
                    .trim()
                    .to_string(),
            ),
            None => std::env::var("ARCWRIGHT_ADMIN_TOKEN")
                .ok()
                .map(|t| t.trim().to_string()),
        };
        if admin_token.as_ref().is_some_and(|t| t.len() < 16) {
            return Err(ConfigError::AdminTokenTooShort);
        }
        Ok(Config {
            store: self.store.clone(),
            bootstrap_demo: self.demo || self.store == DEFAULT_STORE,
            http: self.http,
            grpc: self.grpc,
            default_model: self.default_model.clone(),
            poll: seconds("poll-seconds", self.poll_seconds)?,
            cache_dir: self.cache_dir.clone(),
            admin_token,
            limits: Limits {
                max_tokens: positive("max-tokens", self.max_tokens)?
                    .min(arcwright_parser::decode::MAX_WORDS),
                max_sentences: positive("max-sentences", self.max_sentences)?,
                max_body_bytes: positive("max-body-bytes", self.max_body_bytes)?,
                deadline: seconds("deadline-seconds", self.deadline_seconds)?,
                max_in_flight: positive("max-in-flight", self.max_in_flight)?,
            },
            threads: match self.threads {
                Some(t) => positive("threads", t)?,
                None => std::thread::available_parallelism().map_or(1, |n| n.get()),
            },
            grace: seconds("grace-seconds", self.grace_seconds)?,
            probe: super::probe::ProbeSettings {
                interval: if self.probe_seconds == 0.0 {
                    Duration::ZERO
                } else {
                    seconds("probe-seconds", self.probe_seconds)?
                },
                slowed: self.probe_slowed,
            },
            rollout: super::rollout::RolloutSettings {
                sample: share("shadow-sample", self.shadow_sample)?,
                automatic: match self.rollout.as_str() {
                    "manual" => false,
                    "automatic" => true,
                    other => {
                        return Err(ConfigError::Value {
                            flag: "rollout",
                            value: other.to_string(),
                            reason: "must be manual or automatic",
                        });
                    }
                },
                min_sentences: self.rollout_min_sentences.max(1),
                min_agreement: share("rollout-min-agreement", self.rollout_min_agreement)?,
                max_latency_ratio: if self.rollout_max_latency_ratio.is_finite()
                    && self.rollout_max_latency_ratio >= 1.0
                {
                    self.rollout_max_latency_ratio
                } else {
                    return Err(ConfigError::Value {
                        flag: "rollout-max-latency-ratio",
                        value: self.rollout_max_latency_ratio.to_string(),
                        reason: "must be a ratio of at least 1",
                    });
                },
                replica: match &self.replica_id {
                    Some(id) => {
                        arcwright_store::validate_name("replica id", id).map_err(|_| {
                            ConfigError::Value {
                                flag: "replica-id",
                                value: id.clone(),
                                reason: "must be 1-64 characters from a-z 0-9 . _ -",
                            }
                        })?;
                        id.clone()
                    }
                    None => std::fs::read_to_string("/proc/sys/kernel/hostname")
                        .map(|h| h.trim().to_string())
                        .ok()
                        .filter(|h| !h.is_empty())
                        .unwrap_or_else(|| format!("pid-{}", std::process::id())),
                },
                rollback_hold: if self.rollback_seconds == 0.0 {
                    Duration::ZERO
                } else {
                    seconds("rollback-seconds", self.rollback_seconds)?
                },
                inject_failures: match &self.inject_failures {
                    None => None,
                    Some(spec) => Some(
                        spec.split_once('=')
                            .and_then(|(v, share)| {
                                share
                                    .parse::<f64>()
                                    .ok()
                                    .filter(|s| (0.0..=1.0).contains(s))
                                    .map(|s| (v.to_string(), s))
                            })
                            .ok_or_else(|| ConfigError::Value {
                                flag: "inject-failures",
                                value: spec.clone(),
                                reason: "must be VERSION=SHARE with a share between 0 and 1",
                            })?,
                    ),
                },
            },
        })
    }
}
