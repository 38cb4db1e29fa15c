//! The demo model, built only when asked for (`serve --demo`, or the default local store when it
//! is empty): train on the invented harbour-crew sentences (seconds), publish it as `demo` and
//! make it `live`, so `arcwright serve` works on a fresh clone. Demo data only.

use arcwright_parser::demo;
use arcwright_parser::train::{self, Example, TrainOptions};
use arcwright_store::{Store, StoreError};

use super::StartupError;

/// Whether any model in the store has a `live` alias.
pub async fn has_live_model(store: &Store) -> Result<bool, StoreError> {
    for name in store.names().await? {
        if store.alias(&name, "live").await?.is_some() {
            return Ok(true);
        }
    }
    Ok(false)
}

/// Trains the demo model and publishes it as `demo`, `live`.
pub async fn publish_demo_model(store: &Store) -> Result<(), StartupError> {
    tracing::info!(store = %store.url(), "the store has no live model: building the demo model (invented harbour-crew sentences; a few seconds)");
    let started = std::time::Instant::now();
    // Unique per call: several stores may be bootstrapped by one process (tests).
    let dir = std::env::temp_dir().join(format!(
        "arcwright-demo-model-{}-{}",
        std::process::id(),
        super::new_request_id()
    ));
    let build_dir = dir.clone();
    tokio::task::spawn_blocking(move || -> Result<(), String> {
        let examples: Vec<Example> = demo::corpus(1500, 20261201, None, 80).iter().filter_map(Example::from_sentence).collect();
        let options = TrainOptions { epochs: 3, jackknife_folds: 0, ..TrainOptions::default() };
        let mut model = train::train(&examples, &[], &options, &mut |_, _| {});
        model.training = serde_json::json!({"data": "arcwright demo-data (invented scenario)", "sentences": examples.len()});
        model.save(&build_dir).map_err(|e| e.to_string())
    })
    .await
    .map_err(|e| StartupError::Demo(e.to_string()))?
    .map_err(StartupError::Demo)?;
    let info = crate::commands::store::artifact_info(&dir, None)
        .map_err(|e| StartupError::Demo(e.to_string()))?;
    let manifest = store.publish("demo", &dir, info).await?;
    let decision = arcwright_store::Decision {
        actor: "bootstrap".to_string(),
        reason: "the built-in demo model, built at first start on an empty store".to_string(),
        evidence: serde_json::Value::Null,
    };
    store
        .promote("demo", "live", &manifest.version, decision)
        .await?;
    let _ = std::fs::remove_dir_all(&dir);
    tracing::info!(version = %manifest.version, seconds = started.elapsed().as_secs_f64(), "demo model published as demo/live");
    Ok(())
}
