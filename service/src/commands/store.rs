//! `arcwright store …`: the model store from the command line.

use arcwright_store::{Decision, RolloutPolicy, Store, StoreError, gate};

use super::Failure;
use crate::cli::{StoreAction, StoreOptions};

/// A store error as a command failure: backend and I/O trouble is a runtime failure (exit 1),
/// anything about what the user asked for is bad input (exit 2).
pub(crate) fn failure(error: StoreError) -> Failure {
    match error {
        StoreError::Backend { .. } | StoreError::Io { .. } => Failure::runtime(error),
        _ => Failure::bad_input(error),
    }
}

/// The version asked for, or the one alias `live` of `name` points at.
pub(crate) async fn version_or_live(
    store: &Store,
    name: &str,
    version: Option<&str>,
) -> Result<String, Failure> {
    if let Some(version) = version {
        return Ok(version.to_string());
    }
    Ok(store
        .alias(name, "live")
        .await
        .map_err(failure)?
        .ok_or_else(|| {
            Failure::bad_input(format!(
                "model {name} has no live alias in {}; give --version",
                store.url()
            ))
        })?
        .version)
}

pub fn run(options: &StoreOptions) -> Result<(), Failure> {
    let runtime = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .map_err(Failure::runtime)?;
    runtime.block_on(async {
        // Only publishing may create a local store; every other action needs one that exists.
        let store = match options.action {
            StoreAction::Publish { .. } => Store::open(&options.store),
            _ => Store::open_existing(&options.store),
        }
        .map_err(failure)?;
        run_action(&store, &options.action).await
    })
}

async fn run_action(store: &Store, action: &StoreAction) -> Result<(), Failure> {
    match action {
        StoreAction::Publish { name, dir, scores } => {
            let scores = match scores {
                Some(path) => {
                    let text = std::fs::read_to_string(path)
                        .map_err(|e| Failure::runtime(format!("{}: {e}", path.display())))?;
                    Some(serde_json::from_str(&text).map_err(|e| {
                        Failure::bad_input(format!("{}: not JSON: {e}", path.display()))
                    })?)
                }
                None => None,
            };
            let info = artifact_info(dir, scores).map_err(Failure::bad_input)?;
            let started = std::time::Instant::now();
            let manifest = store.publish(name, dir, info).await.map_err(failure)?;
            eprintln!(
                "published {name} {} ({} files, {} bytes) to {} in {:.2} s",
                manifest.version,
                manifest.files.len(),
                manifest.size(),
                store.url(),
                started.elapsed().as_secs_f64()
            );
            println!("{}", manifest.version);
        }
        StoreAction::List { name: None, json } => {
            let names = store.names().await.map_err(failure)?;
            let mut models = Vec::new();
            for name in &names {
                let aliases = store.aliases(name).await.map_err(failure)?;
                let versions = store.versions(name).await.map_err(failure)?;
                models.push(serde_json::json!({
                    "name": name,
                    "versions": versions.len(),
                    "aliases": aliases.iter().map(|(a, r)| (a.clone(), serde_json::json!(r.version))).collect::<serde_json::Map<_, _>>(),
                }));
                if !json {
                    let alias_text: Vec<String> = aliases
                        .iter()
                        .map(|(a, r)| format!("{a} → {}", r.version))
                        .collect();
                    println!(
                        "{name}\t{} versions\t{}",
                        versions.len(),
                        alias_text.join(", ")
                    );
                }
            }
            if *json {
                println!("{}", serde_json::json!({ "models": models }));
            }
        }
        StoreAction::List {
            name: Some(name),
            json,
        } => {
            let listed = store.list(name).await.map_err(failure)?;
            if *json {
                let versions: Vec<_> = listed
                    .iter()
                    .map(|v| serde_json::json!({"manifest": v.manifest, "size": v.manifest.size(), "aliases": v.aliases}))
                    .collect();
                println!(
                    "{}",
                    serde_json::json!({ "name": name, "versions": versions })
                );
            } else {
                println!(
                    "{:<30} {:>12}  {:<25} {:<16} aliases",
                    "version", "bytes", "created", "scores (UAS/LAS)"
                );
                for v in &listed {
                    let m = &v.manifest;
                    let scores = m
                        .scores
                        .as_ref()
                        .and_then(|s| {
                            Some(format!(
                                "{:.2}/{:.2}",
                                s.get("uas")?.as_f64()?,
                                s.get("las")?.as_f64()?
                            ))
                        })
                        .unwrap_or_else(|| "-".to_string());
                    println!(
                        "{:<30} {:>12}  {:<25} {:<16} {}",
                        m.version,
                        m.size(),
                        m.created,
                        scores,
                        v.aliases.join(", ")
                    );
                }
            }
        }
        StoreAction::Promote {
            name,
            version,
            alias,
            max_drop,
            force,
            reason,
        } => {
            if !max_drop.is_finite() || *max_drop < 0.0 {
                return Err(Failure::bad_input(format!(
                    "--max-drop {max_drop}: give a number of points of at least 0"
                )));
            }
            let live = match store.alias(name, alias).await.map_err(failure)? {
                Some(record) => Some(
                    store
                        .manifest(name, &record.version)
                        .await
                        .map_err(failure)?,
                ),
                None => None,
            };
            let candidate = store.manifest(name, version).await.map_err(failure)?;
            let given = |default: &str| {
                if reason.is_empty() {
                    default.to_string()
                } else {
                    reason.clone()
                }
            };
            let decision = match gate::compare(live.as_ref(), &candidate, *max_drop) {
                gate::Verdict::Pass { evidence } => Decision {
                    actor: actor(),
                    reason: given("promoted from the command line; score gate passed"),
                    evidence: serde_json::json!({ "score_gate": evidence }),
                },
                gate::Verdict::NotComparable { reason: why } => {
                    eprintln!("score gate: not compared: {why}");
                    Decision {
                        actor: actor(),
                        reason: given("promoted from the command line; scores not compared"),
                        evidence: serde_json::json!({ "score_gate": { "not_compared": why } }),
                    }
                }
                gate::Verdict::Worse {
                    reason: why,
                    evidence,
                } => {
                    if !*force {
                        store
                            .record_refusal(
                                name,
                                alias,
                                version,
                                Decision {
                                    actor: actor(),
                                    reason: format!("refused by the score gate: {why}"),
                                    evidence: serde_json::json!({ "score_gate": evidence }),
                                },
                            )
                            .await
                            .map_err(failure)?;
                        return Err(Failure::bad_input(format!(
                            "{why}; not promoted (give --force to promote anyway)"
                        )));
                    }
                    eprintln!("score gate: {why}; promoting anyway (--force)");
                    Decision {
                        actor: actor(),
                        reason: given(&format!("forced past the score gate: {why}")),
                        evidence: serde_json::json!({ "score_gate": evidence, "forced": true }),
                    }
                }
            };
            let record = store
                .promote(name, alias, version, decision)
                .await
                .map_err(failure)?;
            println!(
                "{name} {alias} → {}{}",
                record.version,
                record
                    .history
                    .first()
                    .map_or(String::new(), |p| format!(" (was {p})"))
            );
        }
        StoreAction::Rollback {
            name,
            alias,
            reason,
        } => {
            let decision = Decision {
                actor: actor(),
                reason: if reason.is_empty() {
                    "rolled back from the command line".to_string()
                } else {
                    reason.clone()
                },
                evidence: serde_json::Value::Null,
            };
            let record = store
                .roll_back(name, alias, decision)
                .await
                .map_err(failure)?;
            println!("{name} {alias} → {}", record.version);
        }
        StoreAction::Policy {
            name,
            mode,
            shadow_sample,
            min_sentences,
            min_agreement,
            max_latency_ratio,
            rollback_seconds,
            clear,
        } => {
            let mut policy = if *clear {
                RolloutPolicy::default()
            } else {
                store
                    .rollout_policy(name)
                    .await
                    .map_err(failure)?
                    .unwrap_or_default()
            };
            let changes = [
                mode.is_some(),
                shadow_sample.is_some(),
                min_sentences.is_some(),
                min_agreement.is_some(),
                max_latency_ratio.is_some(),
                rollback_seconds.is_some(),
                *clear,
            ];
            policy.mode = mode.clone().or(policy.mode);
            policy.shadow_sample = shadow_sample.or(policy.shadow_sample);
            policy.min_sentences = min_sentences.or(policy.min_sentences);
            policy.min_agreement = min_agreement.or(policy.min_agreement);
            policy.max_latency_ratio = max_latency_ratio.or(policy.max_latency_ratio);
            policy.rollback_seconds = rollback_seconds.or(policy.rollback_seconds);
            if changes.iter().any(|&c| c) {
                store
                    .set_rollout_policy(name, &policy)
                    .await
                    .map_err(failure)?;
            }
            println!(
                "{}",
                serde_json::to_string_pretty(&policy).map_err(Failure::runtime)?
            );
        }
        StoreAction::History { name, json } => {
            let entries = store.history(name).await.map_err(failure)?;
            if *json {
                println!(
                    "{}",
                    serde_json::to_string_pretty(&entries).map_err(Failure::runtime)?
                );
            } else {
                println!("time\talias\taction\tfrom\tto\tactor\treason");
                for e in &entries {
                    println!(
                        "{}\t{}\t{}\t{}\t{}\t{}\t{}",
                        e.time,
                        e.alias,
                        serde_json::to_value(e.action)
                            .ok()
                            .and_then(|v| v.as_str().map(str::to_string))
                            .unwrap_or_default(),
                        e.from.as_deref().unwrap_or("-"),
                        e.to,
                        e.actor,
                        e.reason
                    );
                }
            }
        }
        StoreAction::Verify { name, version } => {
            let versions = match version {
                Some(v) => vec![v.clone()],
                None => store.versions(name).await.map_err(failure)?,
            };
            let mut bad = 0;
            for v in &versions {
                match store.verify(name, v).await {
                    Ok(m) => println!(
                        "{name} {v}: ok ({} files, {} bytes)",
                        m.files.len(),
                        m.size()
                    ),
                    Err(e) => {
                        bad += 1;
                        eprintln!("{e}");
                    }
                }
            }
            if bad > 0 {
                return Err(Failure::bad_input(format!(
                    "{bad} of {} versions failed verification",
                    versions.len()
                )));
            }
        }
        StoreAction::Fetch {
            name,
            version,
            cache,
        } => {
            let version = version_or_live(store, name, version.as_deref()).await?;
            let started = std::time::Instant::now();
            let (dir, _) = store.fetch(name, &version, cache).await.map_err(failure)?;
            eprintln!(
                "fetched and verified in {:.2} s",
                started.elapsed().as_secs_f64()
            );
            println!("{}", dir.display());
        }
        StoreAction::Watch {
            name,
            alias,
            interval,
            count,
        } => {
            if !(interval.is_finite() && *interval > 0.0) {
                return Err(Failure::bad_input(format!(
                    "--interval {interval}: must be a positive number of seconds"
                )));
            }
            let current = store
                .alias(name, alias)
                .await
                .map_err(failure)?
                .map(|r| r.version);
            println!(
                "{} {name} {alias} {}",
                unix_millis(),
                current.as_deref().unwrap_or("-")
            );
            let interval = std::time::Duration::from_secs_f64(*interval);
            let mut watcher =
                arcwright_store::AliasWatcher::new(store.clone(), name, alias, interval, current);
            let mut seen = 0;
            while count.is_none_or(|c| seen < c) {
                match watcher.next_change().await {
                    Ok(record) => {
                        seen += 1;
                        println!("{} {name} {alias} {}", unix_millis(), record.version);
                    }
                    Err(e) => eprintln!(
                        "{} poll failed (will retry with backoff): {e}",
                        unix_millis()
                    ),
                }
            }
        }
        StoreAction::Prune { name, keep, yes } => {
            if !yes {
                let prunable = store.prunable(name, *keep).await.map_err(failure)?;
                for v in &prunable {
                    println!("would delete {name} {v}");
                }
                eprintln!(
                    "{} version(s) of {name} would be deleted; run again with --yes to delete them",
                    prunable.len()
                );
                return Ok(());
            }
            for v in store.prune(name, *keep).await.map_err(failure)? {
                println!("deleted {name} {v}");
            }
        }
    }
    Ok(())
}

/// What the store's manifest records of a model directory, from its `model.json`.
pub fn artifact_info(
    dir: &std::path::Path,
    scores: Option<serde_json::Value>,
) -> Result<arcwright_store::ArtifactInfo, arcwright_parser::model::ModelError> {
    let summary = arcwright_parser::model::Model::summary(dir)?;
    Ok(arcwright_store::ArtifactInfo {
        format: Some(summary.format),
        settings: summary.settings,
        labels: summary.labels,
        training_fingerprint: summary.training_fingerprint,
        scores,
    })
}

/// Milliseconds since the Unix epoch, for watch output.
fn unix_millis() -> u128 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_millis())
}

/// Who is deciding, from the command line: `cli:` and the user's login name.
fn actor() -> String {
    format!(
        "cli:{}",
        std::env::var("USER")
            .or_else(|_| std::env::var("LOGNAME"))
            .unwrap_or_else(|_| "unknown".to_string())
    )
}
