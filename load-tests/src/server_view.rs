//! The server's own view, read from its `/metrics` (parsed with the `prometheus-parse` crate)
//! and `/v1/scaling`, and its resident memory from `/proc`.

use prometheus_parse::{Scrape, Value};

use crate::report;

pub fn rss_kib(pid: u32) -> Option<u64> {
    let status = std::fs::read_to_string(format!("/proc/{pid}/status")).ok()?;
    status
        .lines()
        .find(|l| l.starts_with("VmRSS:"))?
        .split_whitespace()
        .nth(1)?
        .parse()
        .ok()
}

/// The server's total stage time (p50, p99, in ms) for sentences in the length bucket of
/// `words`, from `/v1/scaling` (the bucket's recent window, any decoder: the fullest).
pub async fn server_compute_ms(http: &str, words: usize) -> Option<(f64, f64)> {
    let scaling: serde_json::Value = reqwest::get(format!("{http}/v1/scaling"))
        .await
        .ok()?
        .json()
        .await
        .ok()?;
    let bucket = words.next_power_of_two().to_string();
    scaling["buckets"]
        .as_array()?
        .iter()
        .filter(|b| b["stage"] == "total" && b["length_bucket"] == bucket.as_str())
        .max_by_key(|b| b["count"].as_u64().unwrap_or(0))
        .and_then(|b| {
            Some((
                b["p50_seconds"].as_f64()? * 1e3,
                b["p99_seconds"].as_f64()? * 1e3,
            ))
        })
}

/// Parses a Prometheus text exposition (nothing when it is not one).
fn scrape(text: &str) -> Option<Scrape> {
    Scrape::parse(text.lines().map(|line| Ok(line.to_string()))).ok()
}

/// The cumulative bucket counts of one histogram series in a Prometheus text exposition:
/// `name` with exactly the labels `labels` (besides `le`), as (upper bound, count) pairs.
pub fn histogram_buckets(text: &str, name: &str, labels: &[(&str, &str)]) -> Vec<(f64, f64)> {
    let Some(scrape) = scrape(text) else {
        return Vec::new();
    };
    let mut out: Vec<(f64, f64)> = scrape
        .samples
        .iter()
        .filter(|s| {
            s.metric == name
                && s.labels.len() == labels.len()
                && labels.iter().all(|(k, v)| s.labels.get(k) == Some(*v))
        })
        .find_map(|s| match &s.value {
            Value::Histogram(counts) => {
                Some(counts.iter().map(|c| (c.less_than, c.count)).collect())
            }
            _ => None,
        })
        .unwrap_or_default();
    out.sort_by(|a, b| a.0.total_cmp(&b.0));
    out
}

/// The `q` quantile (in ms) of the observations between two readings of the same histogram
/// series, interpolating linearly within a bucket as Prometheus's `histogram_quantile` does.
pub fn quantile_between(before: &[(f64, f64)], after: &[(f64, f64)], q: f64) -> Option<f64> {
    let delta: Vec<(f64, f64)> = after
        .iter()
        .map(|&(le, count)| {
            let earlier = before
                .iter()
                .find(|(l, _)| *l == le)
                .map_or(0.0, |(_, c)| *c);
            (le, count - earlier)
        })
        .collect();
    let total = delta.last()?.1;
    if total <= 0.0 {
        return None;
    }
    let rank = q * total;
    let (mut lower, mut below) = (0.0, 0.0);
    for &(le, count) in &delta {
        if count >= rank {
            if le.is_infinite() {
                return Some(lower * 1e3);
            }
            let share = (rank - below) / (count - below).max(1e-9);
            return Some((lower + (le - lower) * share) * 1e3);
        }
        (lower, below) = (le, count);
    }
    None
}

/// The server's own view of a run from its /metrics before and after: p50 and p99 (ms) of the
/// gRPC Parse request duration and of the wait for a parsing thread.
pub fn server_view(before: &str, after: &str) -> Option<report::ServerView> {
    let request = |text| {
        histogram_buckets(
            text,
            "arcwright_request_duration_seconds",
            &[("api", "grpc"), ("method", "parse")],
        )
    };
    let wait = |text| histogram_buckets(text, "arcwright_queue_wait_seconds", &[]);
    let (r0, r1, w0, w1) = (request(before), request(after), wait(before), wait(after));
    Some(report::ServerView {
        request_p50_ms: quantile_between(&r0, &r1, 0.5)?,
        request_p99_ms: quantile_between(&r0, &r1, 0.99)?,
        queue_wait_p50_ms: quantile_between(&w0, &w1, 0.5)?,
        queue_wait_p99_ms: quantile_between(&w0, &w1, 0.99)?,
    })
}

pub async fn metrics_text(http: &str) -> Option<String> {
    reqwest::get(format!("{http}/metrics"))
        .await
        .ok()?
        .text()
        .await
        .ok()
}

/// Sum of `arcwright_requests_total` per api from the server's /metrics.
pub async fn server_requests(
    http: &str,
) -> anyhow::Result<std::collections::BTreeMap<String, f64>> {
    let text = metrics_text(http)
        .await
        .ok_or_else(|| anyhow::anyhow!("could not read {http}/metrics"))?;
    let scrape =
        scrape(&text).ok_or_else(|| anyhow::anyhow!("{http}/metrics is not an exposition"))?;
    let mut out = std::collections::BTreeMap::new();
    for sample in scrape
        .samples
        .iter()
        .filter(|s| s.metric == "arcwright_requests_total")
    {
        if let Value::Counter(value) = sample.value {
            let api = sample.labels.get("api").unwrap_or("?").to_string();
            *out.entry(api).or_default() += value;
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quantiles_come_from_the_difference_of_two_histogram_readings() {
        let before = "# TYPE x histogram\n\
            x_bucket{api=\"grpc\",method=\"Parse\",le=\"0.001\"} 10\n\
            x_bucket{api=\"grpc\",method=\"Parse\",le=\"0.002\"} 10\n\
            x_bucket{api=\"grpc\",method=\"Parse\",le=\"+Inf\"} 10\n\
            x_bucket{api=\"http\",method=\"Parse\",le=\"0.001\"} 99\n";
        let after = "# TYPE x histogram\n\
            x_bucket{api=\"grpc\",method=\"Parse\",le=\"0.001\"} 60\n\
            x_bucket{api=\"grpc\",method=\"Parse\",le=\"0.002\"} 110\n\
            x_bucket{api=\"grpc\",method=\"Parse\",le=\"+Inf\"} 110\n";
        let labels = [("api", "grpc"), ("method", "Parse")];
        let b = histogram_buckets(before, "x", &labels);
        let a = histogram_buckets(after, "x", &labels);
        assert_eq!(b, vec![(0.001, 10.0), (0.002, 10.0), (f64::INFINITY, 10.0)]);
        // 100 new observations: 50 at or below 1 ms, 50 in (1, 2] ms. The median is the top
        // of the first bucket; the 99th percentile 49/50 of the way through the second.
        let p50 = quantile_between(&b, &a, 0.5).expect("p50");
        let p99 = quantile_between(&b, &a, 0.99).expect("p99");
        assert!((p50 - 1.0).abs() < 1e-9, "{p50}");
        assert!((p99 - 1.98).abs() < 1e-9, "{p99}");
        assert_eq!(quantile_between(&b, &b, 0.5), None);
        assert!(histogram_buckets(before, "x", &[("api", "grpc")]).is_empty());
    }
}
