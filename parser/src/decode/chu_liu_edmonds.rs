//! Chu-Liu (1965) / Edmonds (1967) maximum spanning arborescence in O(n²) on dense graphs,
//! organised as in Tarjan (1977), with an exact single-root search on top.
//!
//! The graph is kept as one dense matrix indexed by *slot*: `incoming[v][u]` holds the best
//! reduced score of an arc from group `u` into group `v`, together with the original arc that
//! achieves it. Rows are the *incoming* lists, so choosing a node's best in-arc scans contiguous
//! memory. Contracting a cycle writes the merged row and column into the slot of one member and
//! blanks the others, in O(n · |cycle|); since cycle sizes add up to less than 2n, the whole
//! contraction phase is O(n²), and so is the expansion.
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
//! candidates `r` are tried best-bound-first with branch and bound: forcing `r` can gain at most
//! `score(0, r) − best word head of r` over the sum of every word's best word head, and no
//! candidate can beat the unconstrained optimum. The search stops as soon as no remaining bound
//! beats the best tree found. This is exact; its worst case is O(n³) (every candidate tried),
//! where Zmigrod, Vieira & Cotterell (2020, "Please Mind the Root") give an O(n²) bound. Our
//! first implementation of their deletion rule failed the brute-force check on a tie-free
//! 3-word case (a deletion whose cheapest alternative arc closes a cycle), so the exact search
//! ships until that rule is re-derived and passes the same checks.
//!
//! Ties: a group takes the in-arc with the smallest slot among equal scores; among single-root
//! candidates of equal score the first tried wins (highest bound, then smallest position).

use super::{RootConstraint, ScoreMatrix};

const NONE: usize = usize::MAX;

/// Best arborescence rooted at 0: `heads[m]` for `m` in `1..=n` (`heads[0] = 0`).
pub fn decode(scores: &ScoreMatrix, root: RootConstraint) -> Vec<usize> {
    let unconstrained = solve(scores, None);
    let root_children = unconstrained.iter().skip(1).filter(|&&h| h == 0).count();
    if root == RootConstraint::MultiRoot || root_children == 1 {
        return unconstrained;
    }
    let n = scores.words();
    let ceiling = scores.tree_score(&unconstrained);
    // Best word (non-root) head of each word, and their sum: a relaxation of every tree.
    let best_word_head: Vec<f64> = (0..=n)
        .map(|m| {
            if m == 0 {
                0.0
            } else {
                (1..=n)
                    .map(|h| scores.get(h, m))
                    .fold(f64::NEG_INFINITY, f64::max)
            }
        })
        .collect();
    let relaxed: f64 = best_word_head[1..].iter().sum();
    let mut candidates: Vec<(f64, usize)> = (1..=n)
        .map(|r| {
            let bound = if n == 1 {
                scores.get(0, r)
            } else {
                relaxed - best_word_head[r] + scores.get(0, r)
            };
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
        let heads = solve(scores, Some(r));
        let score = scores.tree_score(&heads);
        if best.as_ref().is_none_or(|(b, _)| score > *b) {
            best = Some((score, heads));
        }
    }
    best.map(|(_, heads)| heads).unwrap_or(unconstrained)
}

/// Unconstrained maximum arborescence, optionally with `only_root_child` the sole word the root
/// may take.
fn solve(scores: &ScoreMatrix, only_root_child: Option<usize>) -> Vec<usize> {
    let mut graph = Graph::new(scores);
    if let Some(r) = only_root_child {
        for v in 1..graph.side {
            if v != r {
                graph.incoming[v * graph.side] = f64::NEG_INFINITY;
            }
        }
    }
    graph.contract_all();
    graph.expand()
}

/// Union-find with path halving; the representative of a set is chosen by the caller.
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

struct Graph {
    side: usize,
    /// `incoming[v * side + u]`: best reduced score of an arc from group `u` into group `v`.
    incoming: Vec<f64>,
    /// Original head and modifier of that arc.
    arc_head: Vec<u32>,
    arc_modifier: Vec<u32>,
    /// Per slot: is it a live group (slot 0, the root, is never in `pending`)?
    alive: Vec<bool>,
    /// Per slot: logical node id of the group it holds (originals are `0..=n`, contractions
    /// get `n+1, n+2, …`).
    node_of_slot: Vec<usize>,
    /// Per slot: the chosen in-arc (original head, original modifier) and its reduced score.
    chosen: Vec<Option<(usize, usize, f64)>>,
    /// Groups: original vertex → slot of the group holding it.
    groups: UnionFind,
    /// Weak components over slots (arcs from the root are not merged).
    weak: UnionFind,
    /// Per logical node: parent contraction, and the in-arc it keeps after expansion.
    node_parent: Vec<usize>,
    node_arc: Vec<(usize, usize)>,
    /// Logical ids of contractions, in creation order, with their member node ids.
    contractions: Vec<(usize, Vec<usize>)>,
    /// Slots waiting to choose an in-arc (a stack; popped in increasing slot order initially).
    pending: Vec<usize>,
}

impl Graph {
    fn new(scores: &ScoreMatrix) -> Self {
        let side = scores.side();
        let mut incoming = vec![f64::NEG_INFINITY; side * side];
        let mut arc_head = vec![0u32; side * side];
        let mut arc_modifier = vec![0u32; side * side];
        for v in 1..side {
            for u in 0..side {
                incoming[v * side + u] = scores.get(u, v);
                arc_head[v * side + u] = u as u32;
                arc_modifier[v * side + u] = v as u32;
            }
        }
        let max_nodes = 2 * side;
        Graph {
            side,
            incoming,
            arc_head,
            arc_modifier,
            alive: (0..side).map(|s| s != 0).collect(),
            node_of_slot: (0..side).collect(),
            chosen: vec![None; side],
            groups: UnionFind::new(side),
            weak: UnionFind::new(side),
            node_parent: vec![NONE; max_nodes],
            node_arc: vec![(0, 0); max_nodes],
            contractions: Vec::new(),
            pending: (1..side).rev().collect(),
        }
    }

    fn row(&self, slot: usize) -> &[f64] {
        &self.incoming[slot * self.side..(slot + 1) * self.side]
    }

    /// Slot of the best in-arc of `v` (first among equals), or `None` if every in-arc is −∞.
    fn best_in(&self, v: usize) -> Option<usize> {
        let mut best = f64::NEG_INFINITY;
        let mut best_u = None;
        for (u, &score) in self.row(v).iter().enumerate() {
            if score > best {
                best = score;
                best_u = Some(u);
            }
        }
        best_u
    }

    fn contract_all(&mut self) {
        while let Some(v) = self.pending.pop() {
            let Some(u) = self.best_in(v) else {
                // Unreachable: every word keeps finite in-arcs from the other words (only root arcs
                // are ever removed), so some arc is always available.
                continue;
            };
            let cell = v * self.side + u;
            let arc = (
                self.arc_head[cell] as usize,
                self.arc_modifier[cell] as usize,
                self.incoming[cell],
            );
            self.chosen[v] = Some(arc);
            if u == 0 {
                continue;
            }
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
                let (head, _, _) = self.chosen[x].expect("a group on a cycle has an in-arc");
                x = self.groups.find(head);
            }
            self.contract(&cycle);
        }
    }

    /// Contracts the groups in `cycle` (slots; `cycle[0]` keeps the merged group).
    fn contract(&mut self, cycle: &[usize]) {
        let side = self.side;
        let keep = cycle[0];
        let mut in_cycle = vec![false; side];
        for &c in cycle {
            in_cycle[c] = true;
        }
        // Merged in-arcs: for every outside u, max over members m of incoming[m][u] − chosen[m].
        let mut merged = vec![f64::NEG_INFINITY; side];
        let mut merged_head = vec![0u32; side];
        let mut merged_modifier = vec![0u32; side];
        for &m in cycle {
            let reduce = self.chosen[m].expect("cycle member has an in-arc").2;
            for u in 0..side {
                if in_cycle[u] {
                    continue;
                }
                let cell = m * side + u;
                let score = self.incoming[cell] - reduce;
                if score > merged[u] {
                    merged[u] = score;
                    merged_head[u] = self.arc_head[cell];
                    merged_modifier[u] = self.arc_modifier[cell];
                }
            }
        }
        // Merged out-arcs: for every live outside group x, max over members of incoming[x][m].
        for x in 1..side {
            if !self.alive[x] || in_cycle[x] {
                continue;
            }
            let row = x * side;
            let mut best = f64::NEG_INFINITY;
            let mut best_cell = row + keep;
            for &m in cycle {
                let score = self.incoming[row + m];
                if score > best {
                    best = score;
                    best_cell = row + m;
                }
            }
            let (head, modifier) = (self.arc_head[best_cell], self.arc_modifier[best_cell]);
            for &m in cycle {
                self.incoming[row + m] = f64::NEG_INFINITY;
            }
            self.incoming[row + keep] = best;
            self.arc_head[row + keep] = head;
            self.arc_modifier[row + keep] = modifier;
        }
        let row = keep * side;
        self.incoming[row..row + side].copy_from_slice(&merged);
        self.arc_head[row..row + side].copy_from_slice(&merged_head);
        self.arc_modifier[row..row + side].copy_from_slice(&merged_modifier);
        for &m in &cycle[1..] {
            let row = m * side;
            self.incoming[row..row + side].fill(f64::NEG_INFINITY);
            self.alive[m] = false;
        }
        // Book-keeping for the expansion.
        let node = self.contractions.len() + side;
        let mut members = Vec::with_capacity(cycle.len());
        for &m in cycle {
            let member = self.node_of_slot[m];
            let (head, modifier, _) = self.chosen[m].expect("cycle member has an in-arc");
            self.node_parent[member] = node;
            self.node_arc[member] = (head, modifier);
            members.push(member);
            if m != keep {
                self.groups.attach(m, keep);
            }
            self.chosen[m] = None;
        }
        self.contractions.push((node, members));
        self.node_of_slot[keep] = node;
        self.pending.push(keep);
    }

    fn expand(&mut self) -> Vec<usize> {
        for v in 1..self.side {
            if let (true, Some((head, modifier, _))) = (self.alive[v], self.chosen[v]) {
                self.node_arc[self.node_of_slot[v]] = (head, modifier);
            }
        }
        for (node, _members) in self.contractions.iter().rev() {
            let (head, modifier) = self.node_arc[*node];
            // The member of this contraction that contains the arc's modifier.
            let mut member = modifier;
            while self.node_parent[member] != *node {
                member = self.node_parent[member];
            }
            self.node_arc[member] = (head, modifier);
        }
        let mut heads = vec![0usize; self.side];
        for m in 1..self.side {
            heads[m] = self.node_arc[m].0;
        }
        heads
    }
}
