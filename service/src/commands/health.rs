//! `arcwright health`: one grpc.health.v1 `Check` against a running service.

use std::time::Duration;

use tonic_health::pb::health_check_response::ServingStatus;
use tonic_health::pb::{HealthCheckRequest, health_client::HealthClient};

use super::Failure;
use crate::cli::HealthOptions;

pub fn run(options: &HealthOptions) -> Result<(), Failure> {
    if !(options.timeout > 0.0 && options.timeout <= 3600.0) {
        return Err(Failure::bad_input(format!(
            "--timeout {}: expected seconds in (0, 3600]",
            options.timeout
        )));
    }
    let timeout = Duration::from_secs_f64(options.timeout);
    let address = if options.grpc.contains("://") {
        options.grpc.clone()
    } else {
        format!("http://{}", options.grpc)
    };
    let endpoint = tonic::transport::Endpoint::from_shared(address.clone())
        .map_err(|e| Failure::bad_input(format!("--grpc {}: {e}", options.grpc)))?
        .connect_timeout(timeout)
        .timeout(timeout);
    let runtime = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .map_err(Failure::runtime)?;
    let status = runtime.block_on(async {
        let channel = endpoint
            .connect()
            .await
            .map_err(|e| Failure::runtime(format!("{address}: cannot connect: {e}")))?;
        let reply = HealthClient::new(channel)
            .check(HealthCheckRequest {
                service: options.service.clone(),
            })
            .await
            .map_err(|e| Failure::runtime(format!("{address}: health check failed: {e}")))?;
        Ok::<_, Failure>(reply.into_inner().status)
    })?;
    let status = ServingStatus::try_from(status).unwrap_or(ServingStatus::Unknown);
    println!("{}", status.as_str_name());
    if status == ServingStatus::Serving {
        Ok(())
    } else {
        Err(Failure::runtime(format!(
            "{address}: {}",
            status.as_str_name()
        )))
    }
}
