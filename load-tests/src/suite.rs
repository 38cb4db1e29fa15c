//! The scenario suite: steady rate per API, latency by length, step-up to the knee, capacity,
//! hot swap under load, shedding at twice the knee and a bounded soak, written as
//! `results.json`, `REPORT.md` and SVG plots.

use std::time::Duration;

use crate::cli::SuiteArgs;
use crate::client::{Api, Client};
use crate::local::in_process_rate;
use crate::openloop::{self, Plan};
use crate::report;
use crate::server_view::{metrics_text, rss_kib, server_compute_ms, server_requests, server_view};
use crate::workload::{self, Sentence};

/// Requests the server counts for `sent` generator requests: one per message of a stream.
fn server_requests_for(api: Api, batch: usize, sent: u64) -> u64 {
    if api == Api::GrpcStream {
        sent * batch as u64
    } else {
        sent
    }
}

/// One step-up scenario: an API, its workload and the rates to climb.
struct Ladder<'a> {
    api: Api,
    name: String,
    /// Sentences per request.
    batch: usize,
    rates: Vec<f64>,
    sentences: &'a [Sentence],
    /// The model to ask for (the server's default when `None`).
    model: Option<String>,
}

/// Runs every scenario against the target and writes the report.
pub async fn run(args: SuiteArgs) -> anyhow::Result<()> {
    let SuiteArgs {
        target,
        out,
        quick,
        budget_ms,
        admin_token,
        model,
        swap_versions,
        server_pid,
        conllu,
        conllu_model,
        model_dir,
        machine,
    } = args;
    let seconds = if quick { 1.5 } else { 10.0 };
    let plan = |rate: f64, secs: f64, batch: usize| Plan {
        rate,
        duration: Duration::from_secs_f64(secs),
        max_requests: 200_000,
        max_outstanding: 256,
        batch,
    };
    let mut suite = report::Suite {
        machine,
        budget_ms,
        ..Default::default()
    };
    let before = server_requests(&target.http).await.unwrap_or_default();
    let mut generated = 0u64;
    let medium = workload::demo_fixed(25, 200, 3);
    if let Some(pid) = server_pid.and_then(rss_kib) {
        suite.rss_kib.insert("start".into(), pid);
    }
    // Steady rate on every API.
    for (api, name, rate, batch) in [
        (Api::GrpcParse, "grpc-parse", 100.0, 1),
        (Api::HttpParse, "http-parse", 100.0, 1),
        (Api::GrpcBatch, "grpc-batch (32)", 10.0, 32),
        (Api::HttpBatch, "http-batch (32)", 10.0, 32),
        (Api::GrpcStream, "grpc-stream (8)", 20.0, 8),
    ] {
        let client = Client::connect(api, &target.http, &target.grpc, None, false).await?;
        let r = openloop::run(&client, &medium, &plan(rate, seconds, batch)).await;
        generated += server_requests_for(api, batch, r.sent);
        suite.steady.insert(name.to_string(), r);
    }
    // Latency by length, projective decoding; then the same lengths non-projective with
    // confidences (marginals) on.
    let lengths: &[usize] = if quick {
        &[10, 25, 50, 100]
    } else {
        &[10, 25, 50, 100, 200, 400]
    };
    for (decoder, confidence) in [("projective", false), ("non-projective", true)] {
        let grpc = Client::connect(
            Api::GrpcParse,
            &target.http,
            &target.grpc,
            Some(decoder.into()),
            confidence,
        )
        .await?;
        for &words in lengths {
            let rate = if words > 100 { 5.0 } else { 20.0 };
            let r = openloop::run(
                &grpc,
                &workload::demo_fixed(words, 50, 9),
                &plan(rate, seconds, 1),
            )
            .await;
            generated += r.sent;
            if confidence {
                suite.lengths_non_projective_confidence.insert(words, r);
            } else {
                suite.lengths.insert(words, r);
            }
        }
    }
    // The real test sentences, for a steady run and a step-up with their own model.
    let real = match &conllu {
        Some(path) => Some((
            format!("grpc-parse, {}", path.rsplit('/').next().unwrap_or(path)),
            workload::conllu_file(path)?,
        )),
        None => None,
    };
    if let Some((name, sentences)) = &real {
        let mut client =
            Client::connect(Api::GrpcParse, &target.http, &target.grpc, None, false).await?;
        client.set_model(conllu_model.clone());
        let r = openloop::run(&client, sentences, &plan(50.0, seconds, 1)).await;
        generated += r.sent;
        suite.steady.insert(name.clone(), r);
    }
    suite.scaling = reqwest::get(format!("{}/v1/scaling", target.http))
        .await?
        .json()
        .await
        .unwrap_or_default();
    // Step-up until the p99 budget breaks (or shedding / errors / client saturation), for
    // unary gRPC (the reference knee), unary HTTP, gRPC and HTTP batches of 32, gRPC
    // streams of 8 and, given a CoNLL-U file, unary gRPC on its sentences.
    let full_rates = vec![
        100.0, 200.0, 400.0, 800.0, 1200.0, 1600.0, 2400.0, 3200.0, 4000.0,
    ];
    let ladders = [
        (
            Api::GrpcParse,
            "grpc-parse",
            1,
            if quick {
                vec![50.0, 200.0, 800.0]
            } else {
                full_rates.clone()
            },
        ),
        (
            Api::HttpParse,
            "http-parse",
            1,
            if quick {
                vec![50.0, 200.0]
            } else {
                full_rates.clone()
            },
        ),
        (
            Api::GrpcBatch,
            "grpc-batch (32)",
            32,
            if quick {
                vec![5.0, 20.0]
            } else {
                vec![
                    10.0, 20.0, 40.0, 60.0, 80.0, 100.0, 120.0, 160.0, 200.0, 240.0, 280.0, 320.0,
                ]
            },
        ),
        (
            Api::HttpBatch,
            "http-batch (32)",
            32,
            if quick {
                vec![5.0]
            } else {
                vec![
                    10.0, 20.0, 40.0, 60.0, 80.0, 100.0, 120.0, 160.0, 200.0, 240.0, 280.0, 320.0,
                ]
            },
        ),
        // Streams of 8 messages; a shed message is answered in the stream, so every
        // message is counted by the server and the accounting holds past the knee too.
        (
            Api::GrpcStream,
            "grpc-stream (8)",
            8,
            if quick {
                vec![10.0, 40.0]
            } else {
                vec![
                    20.0, 40.0, 80.0, 160.0, 240.0, 320.0, 400.0, 480.0, 560.0, 640.0,
                ]
            },
        ),
    ];
    let mut ladders: Vec<Ladder> = ladders
        .into_iter()
        .map(|(api, name, batch, rates)| Ladder {
            api,
            name: name.to_string(),
            batch,
            rates,
            sentences: &medium,
            model: None,
        })
        .collect();
    // The real test sentences with their model: the knee a replica reaches on text of
    // the treebank's own length mix.
    if let Some((name, sentences)) = &real {
        ladders.push(Ladder {
            api: Api::GrpcParse,
            name: name.clone(),
            batch: 1,
            rates: if quick {
                vec![50.0, 200.0]
            } else {
                [&full_rates[..], &[4800.0]].concat()
            },
            sentences,
            model: conllu_model.clone(),
        });
    }
    for Ladder {
        api,
        name,
        batch,
        rates,
        sentences,
        model: ladder_model,
    } in ladders
    {
        let mut client = Client::connect(api, &target.http, &target.grpc, None, false).await?;
        client.set_model(ladder_model);
        // The reference knee: unary gRPC on the 25-word demo sentences.
        let reference = name == "grpc-parse";
        // Up the ladder until a step fails; then (full runs) halve the gap between the
        // last good and the first failing rate twice, so the knee is known to within a
        // quarter of the last step rather than a whole step.
        let mut last_good: Option<f64> = None;
        let mut first_bad: Option<f64> = None;
        let mut queue: std::collections::VecDeque<f64> = rates.into_iter().collect();
        let mut refinements = if quick { 0 } else { 2 };
        let mut runs = Vec::new();
        while let Some(rate) = queue.pop_front() {
            let r = openloop::run(&client, sentences, &plan(rate, seconds, batch)).await;
            generated += server_requests_for(api, batch, r.sent);
            let within = r.latency.p99_ms <= budget_ms * batch as f64
                && r.errors == 0
                && r.shed == 0
                && r.client_overloaded == 0;
            runs.push(r);
            if within {
                last_good = Some(last_good.map_or(rate, |g: f64| g.max(rate)));
            } else {
                first_bad = Some(first_bad.map_or(rate, |b: f64| b.min(rate)));
                queue.clear(); // past the knee: no higher step
            }
            if let (true, Some(good), Some(bad)) =
                (queue.is_empty() && refinements > 0, last_good, first_bad)
            {
                let middle = ((good + bad) / 2.0).round();
                if middle > good && middle < bad {
                    refinements -= 1;
                    queue.push_back(middle);
                }
            }
        }
        runs.sort_by(|a, b| a.offered_rate.total_cmp(&b.offered_rate));
        if let Some(good) = last_good {
            suite.knees.insert(name.clone(), good * batch as f64);
            if reference {
                suite.knee_rate = Some(good);
            }
        }
        if reference {
            suite.step_up.extend(runs);
        } else {
            suite.step_up_other.entry(name).or_default().extend(runs);
        }
    }
    let grpc = Client::connect(Api::GrpcParse, &target.http, &target.grpc, None, false).await?;
    // Hot swap under load: activate each version in turn through the admin API.
    if let (Some(token), false) = (&admin_token, swap_versions.is_empty()) {
        let name = model.clone().unwrap_or_else(|| "demo".into());
        let rate = suite.knee_rate.unwrap_or(50.0) / 2.0;
        let swap_plan = plan(
            rate,
            seconds.max(1.0) * (swap_versions.len() as f64 + 1.0),
            1,
        );
        let http = reqwest::Client::new();
        let (token, versions, base) = (token.clone(), swap_versions.clone(), target.http.clone());
        let interval = swap_plan.duration / (versions.len() as u32 + 1);
        let swapper = tokio::spawn(async move {
            let mut done = 0;
            for version in versions {
                tokio::time::sleep(interval).await;
                let response = http
                    .post(format!("{base}/v1/models/{name}/activate"))
                    .bearer_auth(&token)
                    .json(&serde_json::json!({"version": version}))
                    .send()
                    .await;
                if response.map(|r| r.status().is_success()).unwrap_or(false) {
                    done += 1;
                }
            }
            done
        });
        let r = openloop::run(&grpc, &medium, &swap_plan).await;
        generated += r.sent;
        suite.swaps_done = swapper.await.unwrap_or(0);
        suite.swap = Some(r);
    }
    // Half the knee: p99 should stay within 3× p50. The server's own compute time for
    // the same sentences comes from /v1/scaling right after the first run (its windows
    // then hold that run's last sentences); the repeats show the machine's run-to-run
    // spread.
    if let Some(knee) = suite.knee_rate {
        // First the machine's own wake-up lateness with nothing else running.
        let span = Duration::from_secs_f64(if quick { 1.0 } else { 5.0 });
        suite.wake_probe_idle = tokio::task::spawn_blocking(move || openloop::wake_probe(span))
            .await
            .ok();
        let before = metrics_text(&target.http).await;
        let r = openloop::run(&grpc, &medium, &plan(knee / 2.0, seconds, 1)).await;
        let after = metrics_text(&target.http).await;
        suite.half_knee_server = before
            .zip(after)
            .and_then(|(before, after)| server_view(&before, &after));
        generated += r.sent;
        suite.half_knee = Some(r);
        suite.half_knee_server_ms = server_compute_ms(&target.http, medium[0].len()).await;
        for _ in 0..if quick { 1 } else { 2 } {
            let r = openloop::run(&grpc, &medium, &plan(knee / 2.0, seconds, 1)).await;
            generated += r.sent;
            suite.half_knee_repeats.push(r);
        }
    }
    // Capacity: closed loop with a fixed number of batches open, each round followed at
    // once by the in-process rate on the same sentences (all cores, nothing else
    // running). The machine's speed drifts by tens of percent over minutes, so the
    // ratio is taken within each round and the rounds' median is the figure.
    let model = match &model_dir {
        Some(dir) => Some(arcwright_parser::model::Model::load(dir)?),
        None => None,
    };
    let rounds = if quick { 1 } else { 3 };
    for round in 0..rounds {
        for (api, name) in [
            (Api::GrpcBatch, "grpc-batch (32)"),
            (Api::HttpBatch, "http-batch (32)"),
        ] {
            let client = Client::connect(api, &target.http, &target.grpc, None, false).await?;
            let opens: &[usize] = match (quick, round) {
                (true, _) => &[4],
                (false, 0) => &[2, 4, 8],
                (false, _) => &[8],
            };
            for &open in opens {
                let run = openloop::saturate(
                    &client,
                    &medium,
                    32,
                    open,
                    Duration::from_secs_f64(if quick { 1.0 } else { 6.0 }),
                    100_000,
                )
                .await;
                generated += server_requests_for(api, 32, run.sent);
                suite
                    .capacity
                    .entry(name.to_string())
                    .or_default()
                    .push(report::Capacity {
                        open,
                        batch: 32,
                        round,
                        run,
                    });
            }
        }
        if let Some(model) = &model {
            let span = Duration::from_secs_f64(if quick { 0.5 } else { 5.0 });
            suite
                .in_process_rounds
                .push(in_process_rate(model, &medium, span));
        }
    }
    suite.in_process_sentences_per_second = report::median(&suite.in_process_rounds);
    // Shedding: twice the knee.
    let knee = suite.knee_rate.unwrap_or(100.0);
    let r = openloop::run(
        &grpc,
        &workload::demo_fixed(100, 50, 4),
        &plan(knee * 2.0, seconds, 1),
    )
    .await;
    generated += r.sent;
    suite.shed = Some(r);
    if let Some(kib) = server_pid.and_then(rss_kib) {
        suite.rss_kib.insert("after shedding".into(), kib);
    }
    // Bounded soak.
    let r = openloop::run(
        &grpc,
        &workload::demo_mix(500, 11, 120),
        &plan(knee / 2.0, seconds * 2.0, 1),
    )
    .await;
    generated += r.sent;
    suite.soak = Some(r);
    if let Some(kib) = server_pid.and_then(rss_kib) {
        suite.rss_kib.insert("after soak".into(), kib);
    }
    // The generator's accounting against the server's request counters.
    let after = server_requests(&target.http).await.unwrap_or_default();
    let server_total: f64 = after.values().sum::<f64>() - before.values().sum::<f64>();
    suite.accounting = serde_json::json!({
        "generator_sent": generated,
        "server_counted": server_total,
        "match": (server_total - generated as f64).abs() < 0.5,
    });
    report::write_all(&suite, &out)?;
    println!("{}", serde_json::to_string(&suite.accounting)?);
    Ok(())
}
