//! Chu-Liu (1965) / Edmonds (1967) maximum spanning arborescence in O(n²) on dense graphs,
//! organised as in Tarjan (1977), with an exact single-root search on top.
//!
//! Layout: the score matrix is read in place and never copied. One sequential pass over its rows
//! finds every word's best head (the only O(n²) memory traffic in the common case of few
//! cycles). A contracted group gets one *incoming row* of its own, indexed by original head:
//! `row[h]` = the best reduced score of an arc from `h` into any member, with that member's
//! original modifier. Building it reads each member's column (or row) once, O(n · |cycle|); since
//! cycle sizes add up to less than 2n, the whole contraction phase is O(n²). Heads that fall
//! inside the group are skipped when the row is scanned (union-find), so no row or column is
//! ever rewritten. The expansion is O(n²) as well.
//!
//! Phases:
//! 1. *Contraction* (Tarjan 1977): every group without an in-arc picks its best one. Weak
//!    components (union-find) tell whether the pick closes a cycle; if it does, the cycle is
//!    contracted into a new group whose in-arcs are reduced by the score of the member they
//!    would replace. Arcs from the root never close a cycle and are not merged.
//! 2. *Expansion*: walking the contractions from the last to the first, the member that
//!    contains the modifier of the group's chosen in-arc takes that arc; the others keep the
//!    arc they had inside the cycle.
//!
//! Single root (see [`decode`]): when the unconstrained optimum attaches exactly one word to the
//! root it is also the constrained optimum (nothing more to do, O(n²)). Otherwise the
//! constrained optimum is `max_r` of the optimum with the root arc forced to `r`, and the
//! candidates `r` are tried best-bound-first with branch and bound (each try reuses the first
//! pass, so it costs O(n) plus its contractions): forcing `r` can gain at most
//! `score(0, r) − best word head of r` over the sum of every word's best word head, and no
//! candidate can beat the unconstrained optimum. The search stops as soon as no remaining bound
//! beats the best tree found. This is exact; its worst case is O(n³) (every candidate tried),
//! where Zmigrod, Vieira & Cotterell (2020, "Please Mind the Root") give an O(n²) bound by
//! deleting root arcs one at a time. The naive reading of that rule — delete the root arc whose
//! score exceeds its group's next-best in-arc by the least — is wrong when that next-best arc
//! closes a cycle. Three words, root arcs 10 / 10 / 0, 1→3 = 10, 3→1 = 9.5, 1→2 = 3→2 = 1, the
//! rest 0: the root takes 1 and 2; giving up 0→1 "costs" 0.5 (3→1 instead) and 0→2 costs 9, but
//! 3→1 closes 1 ⇄ 3, and the best tree keeping 0→2 scores 20 while 0→1, 1→3, 1→2 scores 21.
//! The exact search stays until the rule is re-derived with its cycle case and passes the same
//! checks (`chu_liu_edmonds_single_root_matches_reference` has root-heavy scores for that).
//!
//! Ties: a word or group takes the in-arc whose head has the smallest position among equal
//! scores; among single-root candidates of equal score the first tried wins (highest bound, then
//! smallest position).

use super::{RootConstraint, ScoreMatrix};

const NONE: usize = usize::MAX;

/// Best arborescence rooted at 0: `heads[m]` for `m` in `1..=n` (`heads[0] = 0`).
pub fn decode(scores: &ScoreMatrix, root: RootConstraint) -> Vec<usize> {
    let first = BestWordHeads::new(scores);
    let unconstrained = Solver::new(scores, &first, None).solve();
    let root_children = unconstrained.iter().skip(1).filter(|&&h| h == 0).count();
    if root == RootConstraint::MultiRoot || root_children == 1 {
        return unconstrained;
    }
    let n = scores.words();
    let ceiling = scores.tree_score(&unconstrained);
    // Every word's best word (non-root) head, summed: a relaxation of every tree.
    let relaxed: f64 = first.best[1..].iter().map(|&(score, _)| score).sum();
    let mut candidates: Vec<(f64, usize)> = (1..=n)
        .map(|r| {
            let bound = relaxed - first.best[r].0 + scores.get(0, r);
            (bound.min(ceiling), r)
        })
        .collect();
    candidates.sort_by(|a, b| b.0.total_cmp(&a.0).then(a.1.cmp(&b.1)));
    let mut best: Option<(f64, Vec<usize>)> = None;
    for (bound, r) in candidates {
        if best
            .as_ref()
            .is_some_and(|(best_score, _)| bound <= *best_score)
        {
            break;
        }
        let heads = Solver::new(scores, &first, Some(r)).solve();
        let score = scores.tree_score(&heads);
        if best.as_ref().is_none_or(|(b, _)| score > *b) {
            best = Some((score, heads));
        }
    }
    best.map(|(_, heads)| heads).unwrap_or(unconstrained)
}

/// Each word's best non-root head (smallest position among ties), from one pass over the rows.
struct BestWordHeads {
    best: Vec<(f64, usize)>,
}

impl BestWordHeads {
    fn new(scores: &ScoreMatrix) -> Self {
        let side = scores.side();
        let matrix = scores.as_slice();
        let mut best = vec![(f64::NEG_INFINITY, NONE); side];
        for h in 1..side {
            let row = &matrix[h * side..(h + 1) * side];
            for (m, &score) in row.iter().enumerate().skip(1) {
                if score > best[m].0 {
                    best[m] = (score, h);
                }
            }
        }
        BestWordHeads { best }
    }
}

/// Union-find with path halving; the caller chooses which representative absorbs the other.
struct UnionFind {
    parent: Vec<usize>,
}

impl UnionFind {
    fn new(size: usize) -> Self {
        UnionFind {
            parent: (0..size).collect(),
        }
    }

    fn find(&mut self, mut x: usize) -> usize {
        while self.parent[x] != x {
            self.parent[x] = self.parent[self.parent[x]];
            x = self.parent[x];
        }
        x
    }

    /// Makes `into` the representative of the union (both must be representatives).
    fn attach(&mut self, from: usize, into: usize) {
        self.parent[from] = into;
    }
}

/// An in-arc: original head and modifier, and its reduced score.
#[derive(Clone, Copy)]
struct Arc {
    head: usize,
    modifier: usize,
    score: f64,
}

/// One run of the contraction and expansion phases. Groups are numbered like nodes: the
/// original positions `0..=n`, then one new id per contraction.
struct Solver<'a> {
    scores: &'a ScoreMatrix,
    first: &'a BestWordHeads,
    side: usize,
    /// `Some(r)`: the root may only take word `r`.
    only_root_child: Option<usize>,
    /// Original position or group → the group that now contains it.
    groups: UnionFind,
    /// Weak components of groups (arcs from the root do not join them).
    weak: UnionFind,
    chosen: Vec<Option<Arc>>,
    /// Incoming rows of contracted groups: reduced score by original head, and the modifier.
    rows: Vec<Option<(Vec<f64>, Vec<u32>)>>,
    /// Per group: the contraction it was merged into (not path-compressed), and the in-arc it
    /// keeps after expansion.
    parent: Vec<usize>,
    kept: Vec<(usize, usize)>,
    /// Ids of contractions in creation order, with their members.
    contractions: Vec<(usize, Vec<usize>)>,
    /// Groups waiting to choose an in-arc (popped in increasing position order initially).
    pending: Vec<usize>,
}

impl<'a> Solver<'a> {
    fn new(
        scores: &'a ScoreMatrix,
        first: &'a BestWordHeads,
        only_root_child: Option<usize>,
    ) -> Self {
        let side = scores.side();
        let ids = 2 * side;
        Solver {
            scores,
            first,
            side,
            only_root_child,
            groups: UnionFind::new(ids),
            weak: UnionFind::new(ids),
            chosen: vec![None; ids],
            rows: vec![None; ids],
            parent: vec![NONE; ids],
            kept: vec![(0, 0); ids],
            contractions: Vec::new(),
            pending: (1..side).rev().collect(),
        }
    }

    fn root_allowed(&self, word: usize) -> bool {
        self.only_root_child.is_none_or(|r| r == word)
    }

    fn solve(mut self) -> Vec<usize> {
        self.contract_all();
        self.expand()
    }

    /// Best in-arc of a group: precomputed for original words, a row scan for contractions.
    fn best_in(&mut self, group: usize) -> Option<Arc> {
        if group < self.side {
            let (word_score, word_head) = self.first.best[group];
            let root_score = self.scores.get(0, group);
            if self.root_allowed(group) && root_score >= word_score {
                return Some(Arc {
                    head: 0,
                    modifier: group,
                    score: root_score,
                });
            }
            return (word_head != NONE).then_some(Arc {
                head: word_head,
                modifier: group,
                score: word_score,
            });
        }
        let (values, modifiers) = self.rows[group].take().expect("contracted group has a row");
        let mut best: Option<Arc> = None;
        for (head, &score) in values.iter().enumerate() {
            if score > best.map_or(f64::NEG_INFINITY, |b| b.score)
                && self.groups.find(head) != group
            {
                best = Some(Arc {
                    head,
                    modifier: modifiers[head] as usize,
                    score,
                });
            }
        }
        self.rows[group] = Some((values, modifiers));
        best
    }

    fn contract_all(&mut self) {
        while let Some(v) = self.pending.pop() {
            let Some(arc) = self.best_in(v) else {
                // Unreachable: every word keeps finite in-arcs from the other words (only root
                // arcs are ever withheld), so some arc is always available.
                continue;
            };
            self.chosen[v] = Some(arc);
            if arc.head == 0 {
                continue;
            }
            let u = self.groups.find(arc.head);
            let (weak_u, weak_v) = (self.weak.find(u), self.weak.find(v));
            if weak_u != weak_v {
                self.weak.attach(weak_v, weak_u);
                continue;
            }
            // The new arc closes a cycle: walk from u back to v along chosen in-arcs.
            let mut cycle = vec![v];
            let mut x = u;
            while x != v {
                cycle.push(x);
                let head = self.chosen[x]
                    .expect("a group on a cycle has an in-arc")
                    .head;
                x = self.groups.find(head);
            }
            self.contract(&cycle);
        }
    }

    /// Merges the groups of `cycle` into a new group with its own incoming row.
    fn contract(&mut self, cycle: &[usize]) {
        let side = self.side;
        let id = side + self.contractions.len();
        let mut values = vec![f64::NEG_INFINITY; side];
        let mut modifiers = vec![0u32; side];
        let matrix = self.scores.as_slice();
        for &member in cycle {
            let reduce = self.chosen[member]
                .expect("cycle member has an in-arc")
                .score;
            if member < side {
                // An original word: its column of the score matrix.
                let root_score = if self.root_allowed(member) {
                    matrix[member]
                } else {
                    f64::NEG_INFINITY
                };
                for head in 0..side {
                    let raw = if head == 0 {
                        root_score
                    } else {
                        matrix[head * side + member]
                    };
                    let score = raw - reduce;
                    if score > values[head] {
                        values[head] = score;
                        modifiers[head] = member as u32;
                    }
                }
            } else {
                let (member_values, member_modifiers) = self.rows[member]
                    .take()
                    .expect("contracted member has a row");
                for head in 0..side {
                    let score = member_values[head] - reduce;
                    if score > values[head] {
                        values[head] = score;
                        modifiers[head] = member_modifiers[head];
                    }
                }
            }
        }
        let weak_root = self.weak.find(cycle[0]);
        self.weak.attach(id, weak_root);
        let mut members = Vec::with_capacity(cycle.len());
        for &member in cycle {
            let arc = self.chosen[member]
                .take()
                .expect("cycle member has an in-arc");
            self.parent[member] = id;
            self.kept[member] = (arc.head, arc.modifier);
            self.groups.attach(member, id);
            members.push(member);
        }
        self.rows[id] = Some((values, modifiers));
        self.contractions.push((id, members));
        self.pending.push(id);
    }

    fn expand(&mut self) -> Vec<usize> {
        let last = self.side + self.contractions.len();
        for group in 1..last {
            if let (NONE, Some(arc)) = (self.parent[group], self.chosen[group]) {
                self.kept[group] = (arc.head, arc.modifier);
            }
        }
        for (id, _members) in self.contractions.iter().rev() {
            let (head, modifier) = self.kept[*id];
            // The member of this contraction that contains the arc's modifier.
            let mut member = modifier;
            while self.parent[member] != *id {
                member = self.parent[member];
            }
            self.kept[member] = (head, modifier);
        }
        let mut heads = vec![0usize; self.side];
        for m in 1..self.side {
            heads[m] = self.kept[m].0;
        }
        heads
    }
}
