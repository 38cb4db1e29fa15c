//! `arcwright serve` configuration: flags and environment variables (read here and nowhere else
//! in the service), validated before anything is built.

use std::net::SocketAddr;
use std::path::PathBuf;
use std::time::Duration;

use clap::Args;

/// Flags of `arcwright serve`; each has an `ARCWRIGHT_*` environment variable.
#[derive(Debug, Clone, Args)]
pub struct ServeArgs {
    /// Model store URL (path, file:///…, s3://bucket/prefix).
    #[arg(long, env = "ARCWRIGHT_STORE", default_value = "./model-store")]
    pub store: String,
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
    /// Optional settings file: `name = value` lines with the flag names above (without `--`),
    /// `#` comments. A flag or an environment variable wins over the file.
    #[arg(long, env = "ARCWRIGHT_CONFIG")]
    pub config: Option<PathBuf>,
    /// Check the settings (flags, variables, config file, admin token), print them and exit
    /// without serving: for deployment pipelines.
    #[arg(long)]
    pub check_config: bool,
}

/// Validated settings. `Debug` shows whether an admin token is set, never the token.
#[derive(Clone)]
pub struct Config {
    pub store: String,
    pub http: SocketAddr,
    pub grpc: SocketAddr,
    pub default_model: Option<String>,
    pub poll: Duration,
    pub cache_dir: PathBuf,
    pub admin_token: Option<String>,
    pub limits: Limits,
    pub threads: usize,
    pub grace: Duration,
}

impl std::fmt::Debug for Config {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Config")
            .field("store", &self.store)
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

fn seconds(name: &str, value: f64) -> Result<Duration, String> {
    if value.is_finite() && value > 0.0 && value < 86_400.0 {
        Ok(Duration::from_secs_f64(value))
    } else {
        Err(format!(
            "--{name} {value}: must be a number of seconds between 0 and 86400"
        ))
    }
}

impl ServeArgs {
    /// Fills in settings from `--config FILE` where the user gave neither a flag nor an
    /// environment variable (`matches` says where each value came from).
    pub fn apply_config_file(&mut self, matches: &clap::ArgMatches) -> Result<(), String> {
        let Some(path) = self.config.clone() else {
            return Ok(());
        };
        let text = std::fs::read_to_string(&path)
            .map_err(|e| format!("--config {}: {e}", path.display()))?;
        for (index, raw) in text.lines().enumerate() {
            let line = raw.split('#').next().unwrap_or("").trim();
            if line.is_empty() {
                continue;
            }
            let at = || format!("{}:{}", path.display(), index + 1);
            let (key, value) = line
                .split_once('=')
                .ok_or_else(|| format!("{}: expected `name = value`", at()))?;
            let (key, value) = (key.trim(), value.trim().trim_matches('"'));
            let id = key.replace('-', "_");
            if matches.try_get_raw(&id).is_err() || id == "config" {
                return Err(format!("{}: unknown setting {key:?}", at()));
            }
            if !matches!(
                matches.value_source(&id),
                None | Some(clap::parser::ValueSource::DefaultValue)
            ) {
                continue; // a flag or an environment variable wins
            }
            let bad = |e: String| format!("{}: {key} = {value:?}: {e}", at());
            let number = |v: &str| v.parse::<usize>().map_err(|e| bad(e.to_string()));
            let float = |v: &str| v.parse::<f64>().map_err(|e| bad(e.to_string()));
            match id.as_str() {
                "store" => self.store = value.to_string(),
                "http" => {
                    self.http = value
                        .parse()
                        .map_err(|e: std::net::AddrParseError| bad(e.to_string()))?
                }
                "grpc" => {
                    self.grpc = value
                        .parse()
                        .map_err(|e: std::net::AddrParseError| bad(e.to_string()))?
                }
                "default_model" => self.default_model = Some(value.to_string()),
                "poll_seconds" => self.poll_seconds = float(value)?,
                "cache_dir" => self.cache_dir = PathBuf::from(value),
                "admin_token_file" => self.admin_token_file = Some(PathBuf::from(value)),
                "max_tokens" => self.max_tokens = number(value)?,
                "max_sentences" => self.max_sentences = number(value)?,
                "max_body_bytes" => self.max_body_bytes = number(value)?,
                "deadline_seconds" => self.deadline_seconds = float(value)?,
                "max_in_flight" => self.max_in_flight = number(value)?,
                "threads" => self.threads = Some(number(value)?),
                "grace_seconds" => self.grace_seconds = float(value)?,
                "log_json" => {
                    self.log_json = value
                        .parse()
                        .map_err(|e: std::str::ParseBoolError| bad(e.to_string()))?
                }
                _ => return Err(format!("{}: unknown setting {key:?}", at())),
            }
        }
        Ok(())
    }

    /// Checks the flags; reads the admin token (from its file, or `ARCWRIGHT_ADMIN_TOKEN`).
    pub fn validate(&self) -> Result<Config, String> {
        let positive = |name: &str, v: usize| {
            if v == 0 {
                Err(format!("--{name} must be at least 1"))
            } else {
                Ok(v)
            }
        };
        let admin_token = match &self.admin_token_file {
            Some(path) => Some(
                std::fs::read_to_string(path)
                    .map_err(|e| format!("--admin-token-file {}: {e}", path.display()))?
                    .trim()
                    .to_string(),
            ),
            None => std::env::var("ARCWRIGHT_ADMIN_TOKEN")
                .ok()
                .map(|t| t.trim().to_string()),
        };
        if admin_token.as_ref().is_some_and(|t| t.len() < 16) {
            return Err("the admin token must be at least 16 characters".to_string());
        }
        Ok(Config {
            store: self.store.clone(),
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
        })
    }
}
