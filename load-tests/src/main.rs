//! `arcwright-load`: open-loop load generator and performance report for `arcwright serve`.
//!
//! - `arcwright-load run …`: one open-loop run (one API, one rate) printed as JSON;
//! - `arcwright-load suite …`: the scenarios — steady rate per API, latency by length, step-up
//!   to the knee, hot swap under load, shedding at twice the knee, a bounded soak — written as
//!   `results.json`, `REPORT.md` and SVG plots;
//! - `arcwright-load report --input results.json --out DIR`: regenerate the Markdown and plots.
//!
//! Every loop is bounded in time and request count; targets default to loopback.

mod cli;
mod client;
mod local;
mod openloop;
mod plan;
mod report;
mod server_view;
mod suite;
mod workload;

use std::time::Duration;

use clap::Parser;

use cli::{Cli, Command};
use client::Client;
use local::in_process_rate;
use openloop::Plan;

/// The same allocator as the service, so that the in-process figure compares like with like.
#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

#[tokio::main(flavor = "multi_thread", worker_threads = 2)]
async fn main() -> anyhow::Result<()> {
    match Cli::parse().command {
        Command::Run {
            target,
            api,
            rate,
            seconds,
            max_requests,
            words,
            conllu,
            batch,
            decoder,
            confidence,
            closed,
        } => {
            let sentences = match (conllu, words) {
                (Some(path), _) => workload::conllu_file(&path)?,
                (None, Some(w)) => workload::demo_fixed(w, 200, 1),
                (None, None) => workload::demo_mix(500, 1, 120),
            };
            let client =
                Client::connect(api, &target.http, &target.grpc, decoder, confidence).await?;
            let plan = Plan {
                rate,
                duration: Duration::from_secs_f64(seconds),
                max_requests,
                max_outstanding: 512,
                batch: batch.max(1),
            };
            let result = match closed {
                Some(concurrency) => {
                    openloop::saturate(
                        &client,
                        &sentences,
                        plan.batch,
                        concurrency,
                        plan.duration,
                        max_requests,
                    )
                    .await
                }
                None => openloop::run(&client, &sentences, &plan).await,
            };
            println!("{}", serde_json::to_string_pretty(&result)?);
        }
        Command::Local {
            model_dir,
            words,
            seconds,
        } => {
            let model = arcwright_parser::model::Model::load(&model_dir)?;
            let sentences = workload::demo_fixed(words, 200, 3);
            let rate = in_process_rate(&model, &sentences, Duration::from_secs_f64(seconds));
            println!("{}", serde_json::json!({ "sentences_per_second": rate }));
        }
        Command::Probe { seconds } => {
            let span = Duration::from_secs_f64(seconds.clamp(0.0, 60.0));
            let lateness = tokio::task::spawn_blocking(move || openloop::wake_probe(span)).await?;
            println!("{}", serde_json::to_string_pretty(&lateness)?);
        }
        Command::Report { input, out } => {
            let suite: report::Suite = serde_json::from_str(&std::fs::read_to_string(&input)?)?;
            report::write_all(&suite, &out)?;
            println!("wrote {}", out.join("REPORT.md").display());
        }
        Command::Suite(args) => suite::run(args).await?,
        Command::Plan {
            http,
            conllu,
            lengths,
        } => {
            let lengths = match (conllu, lengths) {
                (Some(path), _) => workload::conllu_file(&path)?.iter().map(Vec::len).collect(),
                (None, Some(path)) => plan::read_lengths(&path)?,
                (None, None) => anyhow::bail!("give --conllu FILE or --lengths FILE"),
            };
            let scaling: serde_json::Value = reqwest::get(format!("{http}/v1/scaling"))
                .await?
                .error_for_status()?
                .json()
                .await?;
            let prediction = plan::predict(&scaling, &lengths)?;
            println!("{}", serde_json::to_string_pretty(&prediction)?);
        }
    }
    Ok(())
}
