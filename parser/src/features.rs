//! Hashed features for arcs, labels and tags.
//!
//! Arc features follow the first-order set of McDonald, Crammer & Pereira (2005): head and
//! modifier word/tag unigrams and bigrams, the tags in between, and the tags around head and
//! modifier; each is emitted twice, plain and conjoined with direction and binned distance. On top:
//! suffix and word-shape backoff for rare and unknown words, and morphology from FEATS (case,
//! possession), which carries much of the attachment signal in languages such as
//! Turkish. Features are hashed (Weinberger et al. 2009) into a table of `2^hash_bits` weights.
//!
//! Hot path: per-token parts (word, tag, suffix, shape, morphology, neighbours' tags) are hashed
//! once per sentence; an arc's feature index is then a cheap mix of a template id and two parts.
//! "In between" tags come from a sparse table of tag bit sets (range union in O(1), then one step
//! per tag present) when the inventory has at most 64 tags, else from prefix counts over the
//! inventory (O(tags) per arc); either way never O(distance).

use crate::hashing::{hash_str, mix};
use crate::text;

/// Feature options stored with a model.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct FeatureConfig {
    /// log2 of the parser's weight-table size.
    pub hash_bits: u32,
    /// Use FEATS morphology (Case and Possessive) in arc features.
    pub morphology: bool,
}

impl Default for FeatureConfig {
    fn default() -> Self {
        FeatureConfig {
            hash_bits: 22,
            morphology: true,
        }
    }
}

/// A token as the feature extractor sees it.
#[derive(Debug, Clone)]
pub struct TokenView<'a> {
    pub form: &'a str,
    pub tag: &'a str,
    /// Morphology summary, e.g. "Case=Dat|Possessive=P3sg" (empty when none or not used).
    pub morph: &'a str,
}

#[derive(Debug, Clone, Copy, Default)]
struct Parts {
    word: u64,
    tag: u64,
    word_tag: u64,
    suffix: u64,
    shape: u64,
    case: u64,
    morph: u64,
    tag_id: usize,
}

/// Per-sentence precomputation for arc scoring.
#[derive(Debug)]
pub struct SentenceFeatures {
    parts: Vec<Parts>,
    /// The tags strictly between two positions, for the in-between features.
    between: Between,
    tag_count: usize,
    morphology: bool,
}

/// Which tag ids occur in a range of positions.
#[derive(Debug, Clone)]
enum Between {
    /// At most 64 tag ids: a sparse table of tag-id bit sets, `masks[k * side + i]` holding the
    /// tags at positions `i .. i + 2^k`, so any range is the union of two entries (O(1) per arc,
    /// and only the tags present are visited).
    Masks(Vec<u64>),
    /// More tag ids: `counts[t * (n+2) + i]` = number of tokens with tag id t among positions
    /// < i (O(tags) per arc).
    Counts(Vec<u16>),
}

impl Between {
    fn masks(parts: &[Parts]) -> Between {
        let side = parts.len();
        let mut masks: Vec<u64> = parts.iter().map(|p| 1u64 << p.tag_id).collect();
        let mut span = 1;
        while 2 * span <= side {
            let below = masks.len() - side;
            for i in 0..side {
                let right = if i + span < side {
                    masks[below + i + span]
                } else {
                    0
                };
                masks.push(masks[below + i] | right);
            }
            span *= 2;
        }
        Between::Masks(masks)
    }

    fn counts(parts: &[Parts], tag_count: usize) -> Between {
        let stride = parts.len() + 1;
        let mut counts = vec![0u16; (tag_count + 1) * stride];
        for (i, part) in parts.iter().enumerate() {
            for t in 0..=tag_count {
                counts[t * stride + i + 1] = counts[t * stride + i] + u16::from(part.tag_id == t);
            }
        }
        Between::Counts(counts)
    }
}

const ROOT: u64 = 0x5A5A_0000_0000_0001;
const EDGE: u64 = 0x5A5A_0000_0000_0002;

/// Distance bins: 1, 2, 3, 4, 5, 6–10, 11+.
#[inline(always)]
fn distance_bin(distance: usize) -> u64 {
    match distance {
        0..=5 => distance as u64,
        6..=10 => 6,
        _ => 7,
    }
}

impl SentenceFeatures {
    /// `tag_ids` maps each token's tag to a small id (< `tag_count`) for in-between counts.
    pub fn new(
        tokens: &[TokenView<'_>],
        tag_ids: &dyn Fn(&str) -> usize,
        tag_count: usize,
        config: FeatureConfig,
    ) -> Self {
        let n = tokens.len();
        let mut parts = Vec::with_capacity(n + 1);
        parts.push(Parts {
            word: ROOT,
            tag: ROOT,
            word_tag: ROOT,
            suffix: ROOT,
            shape: ROOT,
            case: ROOT,
            morph: ROOT,
            tag_id: tag_count,
        });
        for token in tokens {
            let lower = text::lowercase(token.form);
            let word = hash_str(&lower);
            let tag = hash_str(token.tag);
            let case = if config.morphology {
                hash_str(text::feature_value(token.morph, "Case"))
            } else {
                0
            };
            parts.push(Parts {
                word,
                tag,
                word_tag: mix(word, tag),
                suffix: hash_str(text::suffix(&lower, 3)),
                shape: hash_str(&text::shape(token.form)),
                case,
                morph: if config.morphology {
                    hash_str(token.morph)
                } else {
                    0
                },
                tag_id: tag_ids(token.tag).min(tag_count.saturating_sub(1)),
            });
        }
        let between = if tag_count < 64 {
            Between::masks(&parts)
        } else {
            Between::counts(&parts, tag_count)
        };
        SentenceFeatures {
            parts,
            between,
            tag_count,
            morphology: config.morphology,
        }
    }

    /// Number of positions including the root.
    pub fn side(&self) -> usize {
        self.parts.len()
    }

    fn tag_at(&self, i: isize) -> u64 {
        if i < 0 || i as usize >= self.parts.len() {
            EDGE
        } else {
            self.parts[i as usize].tag
        }
    }

    /// Calls `emit` with the hash of every feature of the arc `head → modifier`: the head's
    /// unary features, the modifier's, the pair features and the in-between features.
    #[inline]
    pub fn arc_features(&self, head: usize, modifier: usize, mut emit: impl FnMut(u64)) {
        let dd = Self::dd_code(head, modifier);
        self.unary_features(head, true, dd, &mut emit);
        self.unary_features(modifier, false, dd, &mut emit);
        self.pair_features(head, modifier, &mut emit);
    }

    /// Direction-distance codes are `1 + 8·direction + bin` with bins 1..=7, so they are < 17.
    pub const DD_CODES: usize = 17;

    /// The direction-distance code of an arc.
    #[inline(always)]
    pub fn dd_code(head: usize, modifier: usize) -> u64 {
        1 + u64::from(head < modifier) * 8 + distance_bin(head.abs_diff(modifier))
    }

    /// Features of one end of an arc: templates 1–3 for the head, 4–6 for the modifier, plain and
    /// conjoined with the direction-distance code `dd`. They depend on one token and `dd` only,
    /// so scoring can table them per token (O(n) lookups) instead of per arc.
    #[inline]
    pub fn unary_features(&self, token: usize, as_head: bool, dd: u64, mut emit: impl FnMut(u64)) {
        let p = &self.parts[token];
        let templates: [(u64, u64); 3] = if as_head {
            [(1, p.word_tag), (2, p.word), (3, p.tag)]
        } else {
            [(4, p.word_tag), (5, p.word), (6, p.tag)]
        };
        for (template, value) in templates {
            let base = mix(template, value);
            emit(base);
            emit(mix(base, dd));
        }
    }

    /// Features that depend on both ends of the arc (templates 7 and up, and in-between tags).
    #[inline]
    pub fn pair_features(&self, head: usize, modifier: usize, mut emit: impl FnMut(u64)) {
        let h = &self.parts[head];
        let m = &self.parts[modifier];
        let (hi, mi) = (head as isize, modifier as isize);
        let dd = Self::dd_code(head, modifier);
        let mut both = |template: u64, value: u64| {
            let base = mix(template, value);
            emit(base);
            emit(mix(base, dd));
        };
        both(7, mix(h.word_tag, m.word_tag));
        both(8, mix(h.tag, m.word_tag));
        both(9, mix(h.word, m.word_tag));
        both(10, mix(h.word_tag, m.tag));
        both(11, mix(h.word_tag, m.word));
        both(12, mix(h.word, m.word));
        both(13, mix(h.tag, m.tag));
        // Surrounding tags.
        let (h_prev, h_next) = (self.tag_at(hi - 1), self.tag_at(hi + 1));
        let (m_prev, m_next) = (self.tag_at(mi - 1), self.tag_at(mi + 1));
        both(14, mix(mix(h.tag, h_next), mix(m_prev, m.tag)));
        both(15, mix(mix(h_prev, h.tag), mix(m_prev, m.tag)));
        both(16, mix(mix(h.tag, h_next), mix(m.tag, m_next)));
        both(17, mix(mix(h_prev, h.tag), mix(m.tag, m_next)));
        // Backoff for rare words: suffixes and shapes.
        both(18, mix(h.suffix, m.suffix));
        both(19, mix(h.tag, m.suffix));
        both(20, mix(h.suffix, m.tag));
        both(21, mix(h.shape, m.shape));
        // Morphology.
        if self.morphology {
            both(22, mix(h.tag, m.case));
            both(23, mix(h.case, m.case));
            both(24, mix(h.morph, m.tag));
            both(25, mix(h.tag, m.morph));
            both(26, mix(h.word, m.case));
        }
        // In between: one feature per tag present strictly between head and modifier.
        let (lo, hi_pos) = if head < modifier {
            (head, modifier)
        } else {
            (modifier, head)
        };
        if hi_pos > lo + 1 {
            // In increasing tag id, either way.
            let base = mix(27, mix(h.tag, m.tag));
            match &self.between {
                Between::Masks(masks) => {
                    // Positions lo + 1 ..= hi_pos − 1: two table entries of the largest level
                    // that fits, overlapping in the middle.
                    let side = self.parts.len();
                    let (first, last) = (lo + 1, hi_pos - 1);
                    let level = (last - first + 1).ilog2() as usize;
                    let mut tags =
                        masks[level * side + first] | masks[level * side + last + 1 - (1 << level)];
                    while tags != 0 {
                        emit(mix(base, u64::from(tags.trailing_zeros())));
                        tags &= tags - 1;
                    }
                }
                Between::Counts(counts) => {
                    let stride = self.parts.len() + 1;
                    for t in 0..=self.tag_count {
                        if counts[t * stride + hi_pos] > counts[t * stride + lo + 1] {
                            emit(mix(base, t as u64));
                        }
                    }
                }
            }
        }
    }

    /// Label features of the arc `head → modifier` (label-independent; the labeler conjoins them
    /// with each label).
    pub fn label_features(&self, head: usize, modifier: usize, mut emit: impl FnMut(u64)) {
        let h = &self.parts[head];
        let m = &self.parts[modifier];
        let direction = u64::from(head < modifier);
        let dd = 1 + direction * 8 + distance_bin(head.abs_diff(modifier));
        emit(mix(101, m.word));
        emit(mix(102, m.tag));
        emit(mix(103, h.tag));
        emit(mix(104, h.word));
        emit(mix(105, mix(h.tag, m.tag)));
        emit(mix(106, mix(mix(h.tag, m.tag), dd)));
        emit(mix(107, mix(h.word, m.tag)));
        emit(mix(108, mix(h.tag, m.word)));
        emit(mix(109, m.suffix));
        emit(mix(110, mix(m.tag, self.tag_at(modifier as isize + 1))));
        emit(mix(111, dd));
        if self.morphology {
            emit(mix(112, m.case));
            emit(mix(113, m.morph));
            emit(mix(114, mix(h.tag, m.case)));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The two in-between tables (bit-set sparse table, prefix counts) emit the same features in
    /// the same order for every arc, on sentences of every length up to 70 with repeated tags.
    #[test]
    fn in_between_tables_agree() {
        let tags = ["NOUN", "VERB", "ADP", "DET", "ADJ", "PUNCT", "PRON"];
        for n in 1..=70 {
            let forms: Vec<String> = (0..n).map(|i| format!("w{}", i % 11)).collect();
            let views: Vec<TokenView<'_>> = forms
                .iter()
                .enumerate()
                .map(|(i, form)| TokenView {
                    form,
                    tag: tags[(i * i + 3 * i) % tags.len()],
                    morph: "",
                })
                .collect();
            let id = |tag: &str| tags.iter().position(|t| *t == tag).unwrap_or(tags.len());
            let with_masks = SentenceFeatures::new(&views, &id, 9, FeatureConfig::default());
            assert!(matches!(with_masks.between, Between::Masks(_)));
            let with_counts = SentenceFeatures {
                parts: with_masks.parts.clone(),
                between: Between::counts(&with_masks.parts, 9),
                tag_count: 9,
                morphology: true,
            };
            for h in 0..=n {
                for m in 1..=n {
                    if h == m {
                        continue;
                    }
                    let (mut a, mut b) = (Vec::new(), Vec::new());
                    with_masks.pair_features(h, m, |x| a.push(x));
                    with_counts.pair_features(h, m, |x| b.push(x));
                    assert_eq!(a, b, "arc {h} → {m} of {n}");
                }
            }
        }
    }
}
