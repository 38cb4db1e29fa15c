//! `arcwright decode`: a JSON score matrix on stdin, the best tree on stdout.

use std::io::Read;

use arcwright_parser::decode::{self, RootConstraint, ScoreMatrix};
use arcwright_parser::marginals;
use serde::{Deserialize, Serialize};

use super::Failure;
use crate::cli::DecodeOptions;

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct Input {
    scores: Vec<Vec<f64>>,
}

#[derive(Serialize)]
struct Output {
    heads: Vec<usize>,
    score: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    log_partition: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    marginals: Option<Vec<Vec<f64>>>,
}

pub fn run(options: &DecodeOptions) -> Result<(), Failure> {
    let mut text = String::new();
    std::io::stdin()
        .read_to_string(&mut text)
        .map_err(|e| Failure::bad_input(format!("cannot read stdin as UTF-8 text: {e}")))?;
    let input: Input = serde_json::from_str(&text).map_err(|e| {
        Failure::bad_input(format!(
            "stdin is not a JSON object {{\"scores\": [[number]]}}: {e}"
        ))
    })?;
    let scores = ScoreMatrix::from_rows(&input.scores)
        .map_err(|e| Failure::bad_input(format!("scores: {e}")))?;
    let algorithm = options.decoder.into();
    let root = if options.multi_root {
        RootConstraint::MultiRoot
    } else {
        RootConstraint::SingleRoot
    };
    let decoded = decode::decode(&scores, algorithm, root);
    let (log_partition, marginal_rows) = if options.marginals {
        let m = marginals::marginals(&scores, algorithm, root);
        (Some(m.log_partition), Some(m.to_rows()))
    } else {
        (None, None)
    };
    let output = Output {
        heads: decoded.heads[1..].to_vec(),
        score: decoded.score,
        log_partition,
        marginals: marginal_rows,
    };
    let json = serde_json::to_string(&output).map_err(Failure::runtime)?;
    println!("{json}");
    Ok(())
}
