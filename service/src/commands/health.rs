//! `arcwright health`: one grpc.health.v1 `Check` against a running service.

use tonic_health::pb::health_check_response::ServingStatus;
use tonic_health::pb::{HealthCheckRequest, health_client::HealthClient};

use super::Failure;
use crate::cli::HealthOptions;

pub fn run(options: &HealthOptions) -> Result<(), Failure> {
    let (endpoint, address) = super::grpc_endpoint(&options.grpc, options.timeout)?;
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
