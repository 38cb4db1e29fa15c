//! Capacity planning from a running service's cost models: for a distribution of sentence
//! lengths, the seconds of parsing thread time per sentence each decoder's model predicts, and
//! so the sentences per second one core parses.

use std::path::Path;

use serde::Serialize;

/// One decoder's prediction.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Prediction {
    pub decoder: String,
    pub sentences: usize,
    pub mean_tokens: f64,
    /// The cost model planned from: `cpu` (the parsing thread's CPU seconds per sentence: what
    /// a core is busy for, whatever else the machine did meanwhile) where the service has it,
    /// else `total` (wall-clock seconds of the parsing stages).
    pub stage: String,
    /// Mean over the sentences of t(n) = a + l·n + b·n² + c·n³ of that model.
    pub mean_seconds: f64,
    pub sentences_per_second_per_core: f64,
    /// The model's largest relative error on the buckets it was fitted to.
    pub model_relative_error: f64,
    /// Mean wall-clock seconds per sentence from the `total` stage's model, when there is one
    /// (above `mean_seconds` by the time the parsing thread waited for a core).
    pub mean_wall_seconds: Option<f64>,
}

/// Lengths from a text file: whole numbers separated by white space or commas.
pub fn read_lengths(path: &Path) -> anyhow::Result<Vec<usize>> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| anyhow::anyhow!("{}: cannot read: {e}", path.display()))?;
    let mut lengths = Vec::new();
    for (line_number, line) in text.lines().enumerate() {
        for field in line
            .split(|c: char| c.is_whitespace() || c == ',')
            .filter(|f| !f.is_empty())
        {
            let n: usize = field.parse().ok().filter(|&n| n >= 1).ok_or_else(|| {
                anyhow::anyhow!(
                    "{}:{}: {field:?} is not a sentence length (a whole number of at least 1)",
                    path.display(),
                    line_number + 1
                )
            })?;
            lengths.push(n);
        }
    }
    if lengths.is_empty() {
        anyhow::bail!("{}: no lengths", path.display());
    }
    Ok(lengths)
}

/// Predictions per decoder from `/v1/scaling`'s cost models of the `cpu` stage (or of the
/// `total` stage where a service has no `cpu` model).
pub fn predict(scaling: &serde_json::Value, lengths: &[usize]) -> anyhow::Result<Vec<Prediction>> {
    if lengths.is_empty() {
        anyhow::bail!("no sentence lengths to plan for");
    }
    let models = scaling["cost_models"]
        .as_array()
        .ok_or_else(|| anyhow::anyhow!("/v1/scaling has no cost_models"))?;
    let number = |v: &serde_json::Value, key: &str| -> anyhow::Result<f64> {
        v[key]
            .as_f64()
            .ok_or_else(|| anyhow::anyhow!("cost model without a number {key:?}: {v}"))
    };
    // The mean of t(n) over the lengths.
    let mean_cost = |model: &serde_json::Value| -> anyhow::Result<f64> {
        let (a, l, b, c) = (
            number(model, "a")?,
            number(model, "l")?,
            number(model, "b")?,
            number(model, "c")?,
        );
        let total: f64 = lengths
            .iter()
            .map(|&n| {
                let n = n as f64;
                a + l * n + b * n * n + c * n * n * n
            })
            .sum();
        Ok(total / lengths.len() as f64)
    };
    let find = |stage: &str, decoder: &serde_json::Value| {
        models
            .iter()
            .find(|m| m["stage"] == stage && &m["decoder"] == decoder)
    };
    let mut decoders: Vec<&serde_json::Value> = models
        .iter()
        .filter(|m| m["stage"] == "total" || m["stage"] == "cpu")
        .map(|m| &m["decoder"])
        .collect();
    decoders.sort_by_key(|d| d.as_str().unwrap_or(""));
    decoders.dedup();
    let mut predictions = Vec::new();
    for decoder in decoders {
        let wall = find("total", decoder);
        let Some(entry) = find("cpu", decoder).or(wall) else {
            continue;
        };
        let mean_seconds = mean_cost(&entry["model"])?;
        predictions.push(Prediction {
            decoder: decoder.as_str().unwrap_or("?").to_string(),
            sentences: lengths.len(),
            mean_tokens: lengths.iter().sum::<usize>() as f64 / lengths.len() as f64,
            stage: entry["stage"].as_str().unwrap_or("?").to_string(),
            mean_seconds,
            sentences_per_second_per_core: 1.0 / mean_seconds.max(1e-12),
            model_relative_error: number(&entry["model"], "max_relative_error")?,
            mean_wall_seconds: wall.map(|w| mean_cost(&w["model"])).transpose()?,
        });
    }
    if predictions.is_empty() {
        anyhow::bail!(
            "the service has no cost model of the cpu or total stage yet: it needs traffic in at least two length buckets"
        );
    }
    Ok(predictions)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Worked by hand: t(n) = 1 ms + 1 µs·n² over lengths 10 and 30 → (1.1 + 1.9) / 2 = 1.5 ms
    /// per sentence, 666.7 sentences per second; the linear term 10 µs·n adds 0.2 ms.
    #[test]
    fn the_mean_cost_gives_the_rate() {
        let scaling = serde_json::json!({"cost_models": [
            {"stage": "total", "decoder": "projective",
             "model": {"a": 1e-3, "l": 0.0, "b": 1e-6, "c": 0.0, "max_relative_error": 0.1}},
            {"stage": "decode", "decoder": "projective",
             "model": {"a": 1.0, "l": 0.0, "b": 0.0, "c": 0.0, "max_relative_error": 0.1}}]});
        let p = predict(&scaling, &[10, 30]).expect("prediction");
        assert_eq!(p.len(), 1);
        assert_eq!(p[0].stage, "total");
        assert!((p[0].mean_seconds - 1.5e-3).abs() < 1e-12);
        assert!((p[0].sentences_per_second_per_core - 1000.0 / 1.5).abs() < 1e-6);
        assert_eq!(p[0].mean_tokens, 20.0);
        assert!(predict(&serde_json::json!({"cost_models": []}), &[3]).is_err());
        let mut linear = scaling.clone();
        linear["cost_models"][0]["model"]["l"] = serde_json::json!(1e-5);
        let p = predict(&linear, &[10, 30]).expect("prediction");
        assert!((p[0].mean_seconds - 1.7e-3).abs() < 1e-12);
        // With a CPU model the plan uses it, and gives the wall time beside it: t(n) = 1 ms
        // over any lengths → 1,000 sentences per second per core.
        let mut cpu = linear.clone();
        cpu["cost_models"]
            .as_array_mut()
            .expect("array")
            .push(serde_json::json!({"stage": "cpu", "decoder": "projective",
                "model": {"a": 1e-3, "l": 0.0, "b": 0.0, "c": 0.0, "max_relative_error": 0.0}}));
        let p = predict(&cpu, &[10, 30]).expect("prediction");
        assert_eq!((p.len(), p[0].stage.as_str()), (1, "cpu"));
        assert!((p[0].sentences_per_second_per_core - 1000.0).abs() < 1e-6);
        assert!(
            p[0].mean_wall_seconds
                .is_some_and(|w| (w - 1.7e-3).abs() < 1e-12)
        );
    }

    #[test]
    fn lengths_files_name_the_bad_field() {
        let dir = std::env::temp_dir().join(format!("arcwright-plan-{}", std::process::id()));
        std::fs::create_dir_all(&dir).expect("dir");
        let good = dir.join("good.txt");
        std::fs::write(&good, "3, 5\n8 13\n").expect("write");
        assert_eq!(read_lengths(&good).expect("lengths"), vec![3, 5, 8, 13]);
        let bad = dir.join("bad.txt");
        std::fs::write(&bad, "3\n5 x\n").expect("write");
        let message = read_lengths(&bad).expect_err("refused").to_string();
        assert!(
            message.contains("bad.txt:2") && message.contains("\"x\""),
            "{message}"
        );
        std::fs::remove_dir_all(&dir).ok();
    }
}
