//! A model's rollout policy, kept in the store beside its aliases so that every replica serving
//! the model judges its candidates alike: `models/<name>/rollout-policy.json`. Every field is
//! optional; a replica's own settings fill what the policy leaves out.

use serde::{Deserialize, Serialize};

use crate::error::backend;
use crate::layout;
use crate::names::validate_name;
use crate::{Store, StoreError};

#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RolloutPolicy {
    /// "manual" or "automatic".
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub mode: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub shadow_sample: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub min_sentences: Option<u64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub min_agreement: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_latency_ratio: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub rollback_seconds: Option<f64>,
}

impl RolloutPolicy {
    /// What is wrong with the policy, naming the field.
    pub fn check(&self) -> Result<(), StoreError> {
        let bad = |field: &str, reason: &str| {
            Err(StoreError::Invalid(format!(
                "rollout policy: {field} {reason}"
            )))
        };
        if let Some(mode) = &self.mode
            && mode != "manual"
            && mode != "automatic"
        {
            return bad("mode", "must be manual or automatic");
        }
        for (field, value) in [
            ("shadow_sample", self.shadow_sample),
            ("min_agreement", self.min_agreement),
        ] {
            if value.is_some_and(|v| !(0.0..=1.0).contains(&v)) {
                return bad(field, "must be a share between 0 and 1");
            }
        }
        if self
            .max_latency_ratio
            .is_some_and(|v| !v.is_finite() || v < 1.0)
        {
            return bad("max_latency_ratio", "must be a ratio of at least 1");
        }
        if self
            .rollback_seconds
            .is_some_and(|v| !v.is_finite() || !(0.0..86_400.0).contains(&v))
        {
            return bad("rollback_seconds", "must be between 0 and 86400");
        }
        if self.min_sentences == Some(0) {
            return bad("min_sentences", "must be at least 1");
        }
        Ok(())
    }
}

impl Store {
    /// A model's rollout policy, if one was set.
    pub async fn rollout_policy(&self, name: &str) -> Result<Option<RolloutPolicy>, StoreError> {
        validate_name("model", name)?;
        let key = layout::model(&self.root, name).child("rollout-policy.json");
        let bytes = match self.objects.get(&key).await {
            Ok(result) => result
                .bytes()
                .await
                .map_err(backend("read rollout policy", &key))?,
            Err(object_store::Error::NotFound { .. }) => return Ok(None),
            Err(e) => return Err(backend("read rollout policy", &key)(e)),
        };
        let policy: RolloutPolicy = serde_json::from_slice(&bytes).map_err(|e| {
            StoreError::Invalid(format!(
                "the rollout policy of model {name} is not readable: {e}"
            ))
        })?;
        policy.check()?;
        Ok(Some(policy))
    }

    /// Sets a model's rollout policy (checked first; one object write).
    pub async fn set_rollout_policy(
        &self,
        name: &str,
        policy: &RolloutPolicy,
    ) -> Result<(), StoreError> {
        validate_name("model", name)?;
        policy.check()?;
        let key = layout::model(&self.root, name).child("rollout-policy.json");
        let bytes =
            serde_json::to_vec_pretty(policy).map_err(|e| StoreError::Invalid(e.to_string()))?;
        self.objects
            .put(&key, bytes.into())
            .await
            .map(|_| ())
            .map_err(backend("write rollout policy", &key))
    }
}
