//! Exact first-order decoders over a dense arc-score matrix.
//!
//! A sentence of `n` words has positions `0..=n`; position 0 is the artificial root. The score
//! matrix holds `score(h, m)` for the arc head `h` → modifier `m`. Arcs into the root and
//! self-loops do not exist: column 0 and the diagonal are ignored.
//!
//! Two decoders, each exact:
//! - [`Algorithm::Projective`]: Eisner (1996), O(n³) time, O(n²) space ([`eisner`]).
//! - [`Algorithm::NonProjective`]: Chu-Liu (1965) / Edmonds (1967) maximum spanning arborescence in
//!   O(n²) for dense graphs, following Tarjan (1977) ([`chu_liu_edmonds`]).
//!
//! Both honour a [`RootConstraint`]: by default exactly one word attaches to the root (the
//! convention of dependency treebanks such as Universal Dependencies); `MultiRoot` allows any
//! number. Straightforward reference versions live in [`reference`]; they are slower but simple
//! enough to check by reading, and the tests compare the fast decoders against them and against
//! brute-force enumeration.
//!
//! # Tie-breaking
//! When several trees share the best score, the result is still deterministic (same input, same
//! output, on every machine): Eisner takes the smallest split point at each step of the
//! back-trace; Chu-Liu-Edmonds takes, for each node, the incoming arc whose head has the smallest
//! position among equal scores, and for the single-root repair the candidate with the smallest
//! position. The two decoders may therefore return different trees of equal score.
//!
//! This module knows nothing about features, labels or I/O.

pub mod chu_liu_edmonds;
pub mod eisner;
mod kernel;
pub mod reference;

pub use kernel::{max_plus, simd_level};

use std::fmt;

/// Largest sentence the decoders accept. The Eisner chart needs 7·(n+1)² doubles (≈ 115 MB at
/// this size); the service applies its own, much smaller, limit.
pub const MAX_WORDS: usize = 4096;

/// Which decoder to run.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Algorithm {
    /// Eisner (1996): best projective tree (no crossing arcs).
    Projective,
    /// Chu-Liu-Edmonds: best tree of any shape.
    NonProjective,
}

impl Algorithm {
    /// The name used on the command line and in APIs.
    pub fn name(self) -> &'static str {
        match self {
            Algorithm::Projective => "projective",
            Algorithm::NonProjective => "non-projective",
        }
    }

    /// Parses the name used on the command line and in APIs.
    pub fn from_name(name: &str) -> Option<Algorithm> {
        match name {
            "projective" => Some(Algorithm::Projective),
            "non-projective" => Some(Algorithm::NonProjective),
            _ => None,
        }
    }
}

impl fmt::Display for Algorithm {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// How many words may attach to the root.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default)]
pub enum RootConstraint {
    /// Exactly one word is attached to the root (the default).
    #[default]
    SingleRoot,
    /// Any positive number of words may attach to the root.
    MultiRoot,
}

/// Errors in a score matrix handed to a decoder.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ScoreMatrixError {
    #[error("the score matrix must describe at least one word (found {rows} row(s); need n+1 ≥ 2)")]
    NoWords { rows: usize },
    #[error("the score matrix has {words} words; the limit is {limit}")]
    TooLarge { words: usize, limit: usize },
    #[error("row {row} has {found} entries; the matrix is {expected}×{expected}")]
    RaggedRow {
        row: usize,
        found: usize,
        expected: usize,
    },
    #[error("data holds {found} scores; {words} words need {expected}")]
    WrongLength {
        words: usize,
        found: usize,
        expected: usize,
    },
    #[error("score of arc {head} → {modifier} is not a finite number ({value})")]
    NotFinite {
        head: usize,
        modifier: usize,
        value: f64,
    },
}

/// A dense (n+1)×(n+1) matrix of arc scores, row-major: `get(h, m)` is the score of h → m.
#[derive(Debug, Clone, PartialEq)]
pub struct ScoreMatrix {
    words: usize,
    scores: Vec<f64>,
}

impl ScoreMatrix {
    /// Wraps row-major scores for `words` words. Entries of column 0 and of the diagonal are
    /// ignored and replaced by −∞; every other entry must be finite.
    pub fn from_row_major(words: usize, mut scores: Vec<f64>) -> Result<Self, ScoreMatrixError> {
        if words == 0 {
            return Err(ScoreMatrixError::NoWords {
                rows: usize::from(!scores.is_empty()),
            });
        }
        if words > MAX_WORDS {
            return Err(ScoreMatrixError::TooLarge {
                words,
                limit: MAX_WORDS,
            });
        }
        let side = words + 1;
        if scores.len() != side * side {
            return Err(ScoreMatrixError::WrongLength {
                words,
                found: scores.len(),
                expected: side * side,
            });
        }
        for head in 0..side {
            for modifier in 0..side {
                let value = &mut scores[head * side + modifier];
                if modifier == 0 || modifier == head {
                    *value = f64::NEG_INFINITY;
                } else if !value.is_finite() {
                    return Err(ScoreMatrixError::NotFinite {
                        head,
                        modifier,
                        value: *value,
                    });
                }
            }
        }
        Ok(ScoreMatrix { words, scores })
    }

    /// Every score multiplied by `factor` (> 0): the same trees in the same order, a flatter
    /// (factor < 1) or more peaked (factor > 1) distribution over them.
    pub fn scaled(&self, factor: f64) -> ScoreMatrix {
        ScoreMatrix {
            words: self.words,
            scores: self
                .scores
                .iter()
                .map(|&s| if s.is_finite() { s * factor } else { s })
                .collect(),
        }
    }

    /// Builds a matrix from rows (as read from JSON).
    pub fn from_rows(rows: &[Vec<f64>]) -> Result<Self, ScoreMatrixError> {
        let side = rows.len();
        if side < 2 {
            return Err(ScoreMatrixError::NoWords { rows: side });
        }
        if side - 1 > MAX_WORDS {
            return Err(ScoreMatrixError::TooLarge {
                words: side - 1,
                limit: MAX_WORDS,
            });
        }
        let mut flat = Vec::with_capacity(side * side);
        for (row_index, row) in rows.iter().enumerate() {
            if row.len() != side {
                return Err(ScoreMatrixError::RaggedRow {
                    row: row_index,
                    found: row.len(),
                    expected: side,
                });
            }
            flat.extend_from_slice(row);
        }
        ScoreMatrix::from_row_major(side - 1, flat)
    }

    /// Builds a matrix by calling `score(h, m)` for every real arc.
    pub fn from_fn(
        words: usize,
        mut score: impl FnMut(usize, usize) -> f64,
    ) -> Result<Self, ScoreMatrixError> {
        let side = words + 1;
        let mut flat = vec![0.0; side * side];
        for head in 0..side {
            for modifier in 1..side {
                if head != modifier {
                    flat[head * side + modifier] = score(head, modifier);
                }
            }
        }
        ScoreMatrix::from_row_major(words, flat)
    }

    /// Number of words `n` (the matrix is (n+1)×(n+1)).
    pub fn words(&self) -> usize {
        self.words
    }

    /// Side of the square matrix, n+1.
    pub fn side(&self) -> usize {
        self.words + 1
    }

    /// Score of the arc `head` → `modifier` (−∞ for arcs that cannot exist).
    #[inline]
    pub fn get(&self, head: usize, modifier: usize) -> f64 {
        self.scores[head * self.side() + modifier]
    }

    /// The row-major scores.
    pub fn as_slice(&self) -> &[f64] {
        &self.scores
    }

    /// Sum of the scores of a tree's arcs.
    pub fn tree_score(&self, heads: &[usize]) -> f64 {
        (1..heads.len()).map(|m| self.get(heads[m], m)).sum()
    }
}

/// The heads of a sentence's words, in the one convention of the whole project: `heads[m]` is
/// the head of word `m` for `m` in `1..=n` (0 = the root), and `heads[0]` is a placeholder 0 so
/// that word positions index directly. Dereferences to that slice.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct Heads(Vec<usize>);

impl Heads {
    /// From a vector that already has the placeholder slot 0.
    pub fn from_slots(slots: Vec<usize>) -> Heads {
        debug_assert!(slots.first().is_none_or(|&h| h == 0));
        Heads(slots)
    }

    /// `(word, head)` for words 1..=n.
    pub fn arcs(&self) -> impl Iterator<Item = (usize, usize)> + '_ {
        self.0.iter().copied().enumerate().skip(1)
    }
}

impl std::ops::Deref for Heads {
    type Target = [usize];
    fn deref(&self) -> &[usize] {
        &self.0
    }
}

/// A decoded tree and its score.
#[derive(Debug, Clone, PartialEq)]
pub struct Decoded {
    pub heads: Heads,
    pub score: f64,
}

/// Runs the chosen decoder.
pub fn decode(scores: &ScoreMatrix, algorithm: Algorithm, root: RootConstraint) -> Decoded {
    let heads = match algorithm {
        Algorithm::Projective => eisner::decode(scores, root),
        Algorithm::NonProjective => chu_liu_edmonds::decode(scores, root),
    };
    let score = scores.tree_score(&heads);
    Decoded {
        heads: Heads::from_slots(heads),
        score,
    }
}

/// What is wrong with a head vector as a dependency tree.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum TreeError {
    #[error("word {word} has head {head}, outside 0..={words}")]
    HeadOutOfRange {
        word: usize,
        head: usize,
        words: usize,
    },
    #[error("word {word} is its own head")]
    SelfLoop { word: usize },
    #[error("words {cycle:?} form a cycle")]
    Cycle { cycle: Vec<usize> },
    #[error("no word is attached to the root")]
    NoRoot,
}

/// Checks that `heads` (1-based, `heads[0]` unused) forms a tree rooted at 0 and returns the
/// number of words attached to the root.
pub fn check_tree(heads: &[usize]) -> Result<usize, TreeError> {
    let words = heads.len().saturating_sub(1);
    for word in 1..=words {
        let head = heads[word];
        if head > words {
            return Err(TreeError::HeadOutOfRange { word, head, words });
        }
        if head == word {
            return Err(TreeError::SelfLoop { word });
        }
    }
    // 0 = unvisited, 1 = on the current path, 2 = known to reach the root.
    let mut state = vec![0u8; words + 1];
    state[0] = 2;
    for start in 1..=words {
        let mut path = Vec::new();
        let mut node = start;
        while state[node] == 0 {
            state[node] = 1;
            path.push(node);
            node = heads[node];
        }
        if state[node] == 1 {
            let position = path.iter().position(|&p| p == node).unwrap_or(0);
            return Err(TreeError::Cycle {
                cycle: path[position..].to_vec(),
            });
        }
        for p in path {
            state[p] = 2;
        }
    }
    let root_children = (1..=words).filter(|&w| heads[w] == 0).count();
    if root_children == 0 && words > 0 {
        return Err(TreeError::NoRoot);
    }
    Ok(root_children)
}

/// True when no two arcs of the tree cross (the root counts as position 0).
pub fn is_projective(heads: &[usize]) -> bool {
    crossing_arcs(heads).is_empty()
}

/// The words whose incoming arc crosses at least one other arc, in increasing order.
pub fn crossing_arcs(heads: &[usize]) -> Vec<usize> {
    let words = heads.len().saturating_sub(1);
    let span = |m: usize| {
        let h = heads[m];
        if h < m { (h, m) } else { (m, h) }
    };
    let mut crossing = vec![false; words + 1];
    for a in 1..=words {
        let (l1, r1) = span(a);
        for b in (a + 1)..=words {
            let (l2, r2) = span(b);
            let crosses = (l1 < l2 && l2 < r1 && r1 < r2) || (l2 < l1 && l1 < r2 && r2 < r1);
            if crosses {
                crossing[a] = true;
                crossing[b] = true;
            }
        }
    }
    (1..=words).filter(|&w| crossing[w]).collect()
}
