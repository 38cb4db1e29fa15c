//! Where a store URL points and the object-store backend for it: a local directory, or an
//! S3-compatible bucket configured from the standard `AWS_*` variables.

use std::path::PathBuf;
use std::time::Duration;

use object_store::RetryConfig;
use object_store::aws::{AmazonS3Builder, S3ConditionalPut};

use crate::StoreError;

/// The S3-compatible bucket `bucket`: credentials, region and endpoint from the standard
/// `AWS_*` variables; plain HTTP only for endpoints on loopback.
pub(crate) fn s3_bucket(
    url: &str,
    bucket: &str,
) -> Result<object_store::aws::AmazonS3, StoreError> {
    let mut builder = AmazonS3Builder::from_env()
        .with_bucket_name(bucket)
        .with_conditional_put(S3ConditionalPut::ETagMatch)
        .with_retry(RetryConfig {
            max_retries: 3,
            retry_timeout: Duration::from_secs(15),
            ..RetryConfig::default()
        });
    // The one place environment variables are read for the store: the standard
    // AWS_ENDPOINT_URL (the crate itself reads AWS_ENDPOINT and the credentials).
    if let Ok(endpoint) = std::env::var("AWS_ENDPOINT_URL") {
        let loopback = ["http://127.", "http://localhost", "http://[::1]"]
            .iter()
            .any(|p| endpoint.starts_with(p));
        builder = builder.with_endpoint(endpoint).with_allow_http(loopback);
    }
    builder.build().map_err(|e| StoreError::BadUrl {
        url: url.to_string(),
        reason: e.to_string(),
    })
}

/// Where a store URL points: an S3 bucket and the path after it, or a local path.
pub(crate) enum Location<'a> {
    S3 { bucket: &'a str, rest: &'a str },
    Local(PathBuf),
}

/// Splits a store URL (`s3://bucket/rest`, `file:///path` or a plain path); `forms` names the
/// accepted forms in the error for any other scheme.
pub(crate) fn locate<'a>(url: &'a str, forms: &str) -> Result<Location<'a>, StoreError> {
    if let Some(after) = url.strip_prefix("s3://") {
        let (bucket, rest) = after.split_once('/').unwrap_or((after, ""));
        if bucket.is_empty() {
            return Err(StoreError::BadUrl {
                url: url.to_string(),
                reason: "no bucket name after s3://".to_string(),
            });
        }
        return Ok(Location::S3 { bucket, rest });
    }
    match url.strip_prefix("file://") {
        Some(path) => Ok(Location::Local(PathBuf::from(path))),
        None if url.contains("://") => Err(StoreError::BadUrl {
            url: url.to_string(),
            reason: format!("supported are {forms}"),
        }),
        None => Ok(Location::Local(PathBuf::from(url))),
    }
}
