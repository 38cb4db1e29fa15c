//! `arcwright eval`: a model against a gold treebank.

use arcwright_parser::calibration::{self, Calibration};
use arcwright_parser::eval::Evaluator;
use arcwright_parser::model::Model;
use arcwright_parser::pipeline::{self, ParseOptions, Unobserved};
use arcwright_parser::train::Example;

use super::{Failure, read_treebank};
use crate::cli::EvalOptions;

pub fn run(options: &EvalOptions) -> Result<(), Failure> {
    let load_started = std::time::Instant::now();
    let model = Model::load(&options.model).map_err(Failure::bad_input)?;
    let load_seconds = load_started.elapsed().as_secs_f64();
    let document = read_treebank(&options.gold)?;
    if !document
        .sentences
        .iter()
        .any(|s| Example::from_sentence(s).is_some())
    {
        return Err(Failure::bad_input(format!(
            "{}: no annotated sentence to evaluate against (every word needs HEAD and DEPREL)",
            options.gold.display()
        )));
    }
    let decoder = options.decoder.map(Into::into);
    let mut evaluator = Evaluator::excluding_labels(&options.exclude_labels);
    let parse_options = ParseOptions {
        decoder,
        confidence: true,
        ..ParseOptions::default()
    };
    // (confidence of the chosen head, whether it is the gold head) per word that got one.
    let mut arcs: Vec<(f64, bool)> = Vec::new();
    let mut without_confidence = 0usize;
    let started = std::time::Instant::now();
    for example in document.sentences.iter().filter_map(Example::from_sentence) {
        let (tags, morph) = if options.gold_tags {
            (
                Some(example.tags.as_slice()),
                Some(example.morph.as_slice()),
            )
        } else {
            (None, None)
        };
        let parsed = pipeline::parse(
            &model,
            &example.forms,
            tags,
            morph,
            &parse_options,
            &mut Unobserved,
        );
        for ((m, head), p) in parsed.heads.arcs().zip(parsed.confidences.iter().flatten()) {
            match p {
                Some(p) => arcs.push((*p, head == example.heads[m])),
                None => without_confidence += 1,
            }
        }
        evaluator.add(
            &example.heads,
            &example.labels,
            &parsed.heads,
            &parsed.labels,
            &example.tags,
            &parsed.tags,
        );
    }
    let elapsed = started.elapsed().as_secs_f64();
    let mut report = evaluator.report();
    report["decoder"] = serde_json::json!(decoder.unwrap_or(model.default_decoder).name());
    // Which evaluation data the scores are on: a promote compares two versions' scores only
    // when this matches.
    let gold_bytes = std::fs::read(&options.gold)
        .map_err(|e| Failure::runtime(format!("{}: cannot read: {e}", options.gold.display())))?;
    report["gold_fingerprint_fnv64"] = serde_json::json!(format!(
        "{:016x}",
        arcwright_parser::hashing::fingerprint(&gold_bytes)
    ));
    report["tags"] = serde_json::json!(if options.gold_tags {
        "gold"
    } else {
        "predicted"
    });
    report["seconds"] = serde_json::json!(elapsed);
    report["model_load_seconds"] = serde_json::json!(load_seconds);
    report["sentences_per_second"] =
        serde_json::json!(report["sentences"].as_f64().unwrap_or(0.0) / elapsed.max(1e-9));
    let used_decoder = decoder.unwrap_or(model.default_decoder);
    let calibrated = calibration::calibration(&arcs, calibration::BINS);
    report["calibration"] = serde_json::json!({
        "expected_calibration_error": calibrated.expected_calibration_error,
        "maximum_calibration_error": calibrated.maximum_calibration_error,
        "arcs": calibrated.arcs,
        "arcs_without_confidence": without_confidence,
        "mean_confidence": calibrated.mean_confidence,
        "accuracy": calibrated.accuracy,
        "temperature": model.confidence_temperatures.get(used_decoder),
        "logit_map": model.confidence_maps.get(used_decoder),
        "bins": calibrated.bins,
    });
    if let Some(path) = &options.arc_confidences {
        let mut text = String::from("confidence\tright\n");
        for (p, right) in &arcs {
            text.push_str(&format!("{p}\t{}\n", u8::from(*right)));
        }
        std::fs::write(path, text)
            .map_err(|e| Failure::runtime(format!("{}: {e}", path.display())))?;
    }
    if let Some(path) = &options.reliability {
        std::fs::write(path, reliability_svg(&calibrated))
            .map_err(|e| Failure::runtime(format!("{}: {e}", path.display())))?;
    }
    eprint!("{}", evaluator.table());
    eprintln!(
        "confidence: expected calibration error {:.4} over {} arcs (mean confidence {:.4}, \
         accuracy {:.4}; temperature {:.3}, logistic map {:.3} · logit p + {:.3}){}",
        calibrated.expected_calibration_error,
        calibrated.arcs,
        calibrated.mean_confidence,
        calibrated.accuracy,
        model.confidence_temperatures.get(used_decoder),
        model.confidence_maps.get(used_decoder).slope,
        model.confidence_maps.get(used_decoder).offset,
        if without_confidence > 0 {
            format!("; {without_confidence} arcs without a confidence")
        } else {
            String::new()
        }
    );
    println!("{report}");
    Ok(())
}

/// A reliability diagram: per confidence bin, the share of right arcs (bar) against the mean
/// confidence (dot), with the diagonal a calibrated model would follow and each bin's arc count.
fn reliability_svg(c: &Calibration) -> String {
    let (w, h, left, right, top, bottom) = (520.0, 420.0, 56.0, 16.0, 36.0, 48.0);
    let plot_w = w - left - right;
    let plot_h = h - top - bottom;
    let x = |v: f64| left + v * plot_w;
    let y = |v: f64| top + (1.0 - v) * plot_h;
    let mut out = format!(
        "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{w}\" height=\"{h}\" \
         viewBox=\"0 0 {w} {h}\" font-family=\"sans-serif\" font-size=\"12\">\n\
         <rect width=\"100%\" height=\"100%\" fill=\"white\"/>\n\
         <text x=\"{}\" y=\"20\" text-anchor=\"middle\" font-size=\"14\">reliability of arc \
         confidences: ECE {:.4} over {} arcs</text>\n",
        w / 2.0,
        c.expected_calibration_error,
        c.arcs
    );
    for tick in 0..=10 {
        let v = f64::from(tick) / 10.0;
        out.push_str(&format!(
            "<line x1=\"{l}\" x2=\"{r}\" y1=\"{yy}\" y2=\"{yy}\" stroke=\"#e3e3e3\"/>\n\
             <text x=\"{tx}\" y=\"{ty}\" text-anchor=\"end\">{v:.1}</text>\n\
             <text x=\"{xx}\" y=\"{bx}\" text-anchor=\"middle\">{v:.1}</text>\n",
            l = left,
            r = w - right,
            yy = y(v),
            tx = left - 6.0,
            ty = y(v) + 4.0,
            xx = x(v),
            bx = h - bottom + 16.0,
        ));
    }
    let bin_w = plot_w / c.bins.len().max(1) as f64;
    for bin in &c.bins {
        if bin.count == 0 {
            continue;
        }
        out.push_str(&format!(
            "<rect x=\"{:.1}\" y=\"{:.1}\" width=\"{:.1}\" height=\"{:.1}\" fill=\"#1d6f6a\" \
             fill-opacity=\"0.55\"><title>confidence {:.2}–{:.2}: {} arcs, accuracy {:.4}, mean \
             confidence {:.4}</title></rect>\n\
             <circle cx=\"{:.1}\" cy=\"{:.1}\" r=\"3.5\" fill=\"#a4431c\"/>\n\
             <text x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"middle\" font-size=\"10\">{}</text>\n",
            x(bin.lower) + 1.0,
            y(bin.accuracy),
            bin_w - 2.0,
            y(0.0) - y(bin.accuracy),
            bin.lower,
            bin.upper,
            bin.count,
            bin.accuracy,
            bin.confidence,
            x(bin.confidence),
            y(bin.confidence),
            x(bin.lower) + bin_w / 2.0,
            y(bin.accuracy) - 4.0,
            bin.count,
        ));
    }
    out.push_str(&format!(
        "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" stroke=\"black\" stroke-dasharray=\"4 3\"/>\n\
         <text x=\"{}\" y=\"{}\" text-anchor=\"middle\">confidence of the chosen head (bins of 0.1)</text>\n\
         <text x=\"14\" y=\"{}\" text-anchor=\"middle\" transform=\"rotate(-90 14 {})\">share of \
         right heads (bars); dots: mean confidence</text>\n</svg>\n",
        x(0.0),
        y(0.0),
        x(1.0),
        y(1.0),
        left + plot_w / 2.0,
        h - 10.0,
        top + plot_h / 2.0,
        top + plot_h / 2.0,
    ));
    out
}
