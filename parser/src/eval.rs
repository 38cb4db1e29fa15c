//! Evaluation: UAS, LAS and label accuracy over all tokens (punctuation included), broken down
//! by sentence length, by whether the gold sentence is projective, and by gold label; plus tagger
//! accuracy and, when asked, scores over the tokens whose gold label is not among some excluded
//! labels (in the Turkish treebank, for example, `ig` arcs — 18% of tokens — always attach to the
//! next token and inflate UAS).

use std::collections::BTreeMap;

use serde::Serialize;

use crate::decode::is_projective;

/// Counts for one slice of the data.
#[derive(Debug, Clone, Default, Serialize)]
pub struct Counts {
    pub tokens: usize,
    pub heads_correct: usize,
    pub labels_correct: usize,
    pub both_correct: usize,
}

impl Counts {
    fn add(&mut self, head_ok: bool, label_ok: bool) {
        self.tokens += 1;
        self.heads_correct += usize::from(head_ok);
        self.labels_correct += usize::from(label_ok);
        self.both_correct += usize::from(head_ok && label_ok);
    }

    fn percent(part: usize, whole: usize) -> f64 {
        if whole == 0 {
            0.0
        } else {
            100.0 * part as f64 / whole as f64
        }
    }

    pub fn uas(&self) -> f64 {
        Counts::percent(self.heads_correct, self.tokens)
    }
    pub fn las(&self) -> f64 {
        Counts::percent(self.both_correct, self.tokens)
    }
    pub fn label_accuracy(&self) -> f64 {
        Counts::percent(self.labels_correct, self.tokens)
    }
}

/// A slice's scores, for the JSON report.
#[derive(Debug, Clone, Serialize)]
pub struct Scores {
    pub tokens: usize,
    pub uas: f64,
    pub las: f64,
    pub label_accuracy: f64,
}

impl From<&Counts> for Scores {
    fn from(c: &Counts) -> Self {
        Scores {
            tokens: c.tokens,
            uas: c.uas(),
            las: c.las(),
            label_accuracy: c.label_accuracy(),
        }
    }
}

/// Accumulates gold/predicted pairs.
#[derive(Debug, Default)]
pub struct Evaluator {
    sentences: usize,
    all: Counts,
    by_length: BTreeMap<&'static str, Counts>,
    /// By whether the gold tree of the sentence is projective (not by decoder).
    by_sentence_projectivity: BTreeMap<&'static str, Counts>,
    by_label: BTreeMap<String, Counts>,
    /// Labels left out of `excluding`, and the counts over the other tokens.
    excluded_labels: Vec<String>,
    excluding: Counts,
    tags: (usize, usize),
    crossing: (usize, usize),
}

/// Sentence length buckets.
pub fn length_bucket(words: usize) -> &'static str {
    match words {
        0..=10 => "01-10",
        11..=20 => "11-20",
        21..=30 => "21-30",
        31..=40 => "31-40",
        _ => "41+",
    }
}

impl Evaluator {
    /// Also report UAS/LAS over the tokens whose gold label is none of `labels` (nothing extra
    /// when `labels` is empty).
    pub fn excluding_labels(labels: &[String]) -> Self {
        Evaluator {
            excluded_labels: labels.to_vec(),
            ..Evaluator::default()
        }
    }

    /// Adds one sentence: heads are 1-based with `[0]` unused.
    pub fn add(
        &mut self,
        gold_heads: &[usize],
        gold_labels: &[String],
        heads: &[usize],
        labels: &[String],
        gold_tags: &[String],
        tags: &[String],
    ) {
        self.sentences += 1;
        let words = gold_heads.len() - 1;
        let projective = is_projective(gold_heads);
        // A gold crossing arc counts as recovered when the prediction has the same arc and it
        // crosses another predicted arc (so a projective decoder recovers none, by construction).
        let predicted_crossing = crate::decode::crossing_arcs(heads);
        for m in crate::decode::crossing_arcs(gold_heads) {
            self.crossing.0 += 1;
            self.crossing.1 += usize::from(
                heads[m] == gold_heads[m] && predicted_crossing.binary_search(&m).is_ok(),
            );
        }
        for m in 1..=words {
            let head_ok = heads[m] == gold_heads[m];
            let label_ok = labels[m - 1] == gold_labels[m - 1];
            self.all.add(head_ok, label_ok);
            self.by_length
                .entry(length_bucket(words))
                .or_default()
                .add(head_ok, label_ok);
            self.by_sentence_projectivity
                .entry(if projective {
                    "projective"
                } else {
                    "non-projective"
                })
                .or_default()
                .add(head_ok, label_ok);
            self.by_label
                .entry(gold_labels[m - 1].clone())
                .or_default()
                .add(head_ok, label_ok);
            if !self.excluded_labels.is_empty()
                && !self.excluded_labels.contains(&gold_labels[m - 1])
            {
                self.excluding.add(head_ok, label_ok);
            }
            self.tags.0 += 1;
            self.tags.1 += usize::from(gold_tags.get(m - 1) == tags.get(m - 1));
        }
    }

    pub fn overall(&self) -> &Counts {
        &self.all
    }

    /// The JSON report: `uas`, `las`, `sentences`, `tokens` at the top, then the breakdowns.
    pub fn report(&self) -> serde_json::Value {
        let map = |m: &BTreeMap<&'static str, Counts>| -> serde_json::Value {
            m.iter()
                .map(|(k, c)| {
                    (
                        k.to_string(),
                        serde_json::to_value(Scores::from(c)).unwrap_or_default(),
                    )
                })
                .collect()
        };
        let labels: serde_json::Value = self
            .by_label
            .iter()
            .map(|(k, c)| {
                (
                    k.clone(),
                    serde_json::to_value(Scores::from(c)).unwrap_or_default(),
                )
            })
            .collect();
        let mut report = serde_json::json!({
            "uas": self.all.uas(),
            "las": self.all.las(),
            "label_accuracy": self.all.label_accuracy(),
            "sentences": self.sentences,
            "tokens": self.all.tokens,
            "tag_accuracy": Counts::percent(self.tags.1, self.tags.0),
            "crossing_arcs": {"gold": self.crossing.0, "recovered": self.crossing.1},
            "by_length": map(&self.by_length),
            "by_sentence_projectivity": map(&self.by_sentence_projectivity),
            "by_label": labels,
        });
        if !self.excluded_labels.is_empty() {
            let mut excluding =
                serde_json::to_value(Scores::from(&self.excluding)).unwrap_or_default();
            excluding["excluded_labels"] = serde_json::json!(self.excluded_labels);
            report["excluding_labels"] = excluding;
        }
        report
    }

    /// A readable table of the same numbers.
    pub fn table(&self) -> String {
        let mut out = String::new();
        let line = |out: &mut String, name: &str, c: &Counts| {
            out.push_str(&format!(
                "{name:<22} {:>7} {:>7.2} {:>7.2} {:>7.2}\n",
                c.tokens,
                c.uas(),
                c.las(),
                c.label_accuracy()
            ));
        };
        out.push_str(&format!(
            "{:<22} {:>7} {:>7} {:>7} {:>7}\n",
            "slice", "tokens", "UAS", "LAS", "LA"
        ));
        line(&mut out, "all", &self.all);
        if !self.excluded_labels.is_empty() {
            let name = format!("without {}", self.excluded_labels.join(", "));
            line(&mut out, &name, &self.excluding);
        }
        for (k, c) in &self.by_length {
            line(&mut out, &format!("length {k}"), c);
        }
        for (k, c) in &self.by_sentence_projectivity {
            line(&mut out, &format!("{k} sentences"), c);
        }
        for (k, c) in &self.by_label {
            line(&mut out, &format!("label {k}"), c);
        }
        out.push_str(&format!(
            "tag accuracy {:.2}%; gold crossing arcs recovered {}/{}\n",
            Counts::percent(self.tags.1, self.tags.0),
            self.crossing.1,
            self.crossing.0
        ));
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn strings(v: &[&str]) -> Vec<String> {
        v.iter().map(|s| s.to_string()).collect()
    }

    /// Hand-worked: 4 words; heads right for words 1, 2, 4 (UAS 3/4 = 75%); labels right for
    /// words 1, 3, 4 (LA 75%); both right for words 1 and 4 (LAS 50%).
    #[test]
    fn scores_match_a_hand_worked_sentence() {
        let mut e = Evaluator::excluding_labels(&["ig".to_string()]);
        let gold_heads = [0, 2, 0, 2, 3];
        let heads = [0, 2, 0, 4, 3];
        let gold_labels = strings(&["nsubj", "root", "ig", "obj"]);
        let labels = strings(&["nsubj", "obj", "ig", "obj"]);
        let tags = strings(&["N", "V", "N", "N"]);
        e.add(&gold_heads, &gold_labels, &heads, &labels, &tags, &tags);
        let c = e.overall();
        assert_eq!(
            (c.tokens, c.heads_correct, c.labels_correct, c.both_correct),
            (4, 3, 3, 2)
        );
        assert_eq!((c.uas(), c.las(), c.label_accuracy()), (75.0, 50.0, 75.0));
        let report = e.report();
        assert_eq!(report["excluding_labels"]["tokens"], 3);
        assert_eq!(report["excluding_labels"]["uas"], 100.0);
        assert_eq!(
            report["excluding_labels"]["excluded_labels"],
            serde_json::json!(["ig"])
        );
        assert_eq!(
            report["by_sentence_projectivity"]["projective"]["tokens"],
            4
        );
        assert_eq!(report["tag_accuracy"], 100.0);
    }

    /// Hand-worked crossing arcs. Gold heads [_, 3, 0, 2, 2]: arc 3→1 (span 1–3) crosses both
    /// 0→2 (span 0–2) and 2→4 (span 2–4), so words 1, 2 and 4 have crossing arcs. Prediction A =
    /// gold recovers all three; prediction B keeps 0→2 and 2→4 but attaches word 1 to 2, so no
    /// predicted arc crosses another: right arcs, but no recovered crossing arc.
    #[test]
    fn crossing_arc_recall_counts_only_arcs_that_cross_in_the_prediction() {
        let gold = [0, 3, 0, 2, 2];
        let l = strings(&["a", "b", "c", "d"]);
        let mut a = Evaluator::default();
        a.add(&gold, &l, &gold, &l, &l, &l);
        assert_eq!(
            a.report()["crossing_arcs"],
            serde_json::json!({"gold": 3, "recovered": 3})
        );
        let mut b = Evaluator::default();
        b.add(&gold, &l, &[0, 2, 0, 2, 2], &l, &l, &l);
        assert_eq!(
            b.report()["crossing_arcs"],
            serde_json::json!({"gold": 3, "recovered": 0})
        );
    }
}
