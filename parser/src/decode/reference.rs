//! Straightforward reference decoders and a brute-force oracle.
//!
//! These are written for obviousness, not speed: the tests check the fast decoders against them,
//! and the benchmarks measure how much faster the fast ones are. Nothing in the service uses them.

use super::{RootConstraint, ScoreMatrix, check_tree, is_projective};

/// Textbook Eisner: one chart `[s][t][direction][complete]` of (score, split) pairs filled by a
/// triple loop, with stored back-pointers. O(n³); ties go to the smallest split point.
pub fn eisner(scores: &ScoreMatrix, root: RootConstraint) -> Vec<usize> {
    const LEFT: usize = 0;
    const RIGHT: usize = 1;
    const INCOMPLETE: usize = 0;
    const COMPLETE: usize = 1;
    let side = scores.side();
    let index = |s: usize, t: usize, dir: usize, comp: usize| ((s * side + t) * 2 + dir) * 2 + comp;
    let mut best = vec![f64::NEG_INFINITY; side * side * 4];
    let mut split = vec![0usize; side * side * 4];
    for s in 0..side {
        best[index(s, s, LEFT, COMPLETE)] = 0.0;
        best[index(s, s, RIGHT, COMPLETE)] = 0.0;
    }
    let single_root = root == RootConstraint::SingleRoot;
    for width in 1..side {
        for s in 0..side - width {
            let t = s + width;
            let (mut inner, mut inner_r) = (f64::NEG_INFINITY, s);
            for r in s..t {
                if s == 0 && single_root && r != 0 {
                    break;
                }
                let v = best[index(s, r, RIGHT, COMPLETE)] + best[index(r + 1, t, LEFT, COMPLETE)];
                if v > inner {
                    inner = v;
                    inner_r = r;
                }
            }
            best[index(s, t, RIGHT, INCOMPLETE)] = inner + scores.get(s, t);
            split[index(s, t, RIGHT, INCOMPLETE)] = inner_r;
            best[index(s, t, LEFT, INCOMPLETE)] = if s == 0 {
                f64::NEG_INFINITY
            } else {
                inner + scores.get(t, s)
            };
            split[index(s, t, LEFT, INCOMPLETE)] = inner_r;
            let (mut right, mut right_r) = (f64::NEG_INFINITY, s + 1);
            for r in s + 1..=t {
                let v = best[index(s, r, RIGHT, INCOMPLETE)] + best[index(r, t, RIGHT, COMPLETE)];
                if v > right {
                    right = v;
                    right_r = r;
                }
            }
            best[index(s, t, RIGHT, COMPLETE)] = right;
            split[index(s, t, RIGHT, COMPLETE)] = right_r;
            let (mut left, mut left_r) = (f64::NEG_INFINITY, s);
            for r in s..t {
                let v = best[index(s, r, LEFT, COMPLETE)] + best[index(r, t, LEFT, INCOMPLETE)];
                if v > left {
                    left = v;
                    left_r = r;
                }
            }
            best[index(s, t, LEFT, COMPLETE)] = left;
            split[index(s, t, LEFT, COMPLETE)] = left_r;
        }
    }
    let mut heads = vec![0usize; side];
    let mut stack = vec![(0usize, side - 1, RIGHT, COMPLETE)];
    while let Some((s, t, dir, comp)) = stack.pop() {
        if s == t {
            continue;
        }
        let r = split[index(s, t, dir, comp)];
        match (dir, comp) {
            (RIGHT, COMPLETE) => {
                stack.push((s, r, RIGHT, INCOMPLETE));
                stack.push((r, t, RIGHT, COMPLETE));
            }
            (LEFT, COMPLETE) => {
                stack.push((s, r, LEFT, COMPLETE));
                stack.push((r, t, LEFT, INCOMPLETE));
            }
            (_, _) => {
                if dir == RIGHT {
                    heads[t] = s;
                } else {
                    heads[s] = t;
                }
                stack.push((s, r, RIGHT, COMPLETE));
                stack.push((r + 1, t, LEFT, COMPLETE));
            }
        }
    }
    heads
}

/// Textbook Chu-Liu-Edmonds: pick every node's best in-arc; if they form a cycle, build a new,
/// smaller graph with the cycle contracted, solve it recursively and expand. O(n³) on dense
/// graphs. Single-root: try every word as the only child of the root (O(n⁴)).
pub fn chu_liu_edmonds(scores: &ScoreMatrix, root: RootConstraint) -> Vec<usize> {
    let side = scores.side();
    let dense: Vec<Vec<f64>> = (0..side)
        .map(|h| (0..side).map(|m| scores.get(h, m)).collect())
        .collect();
    match root {
        RootConstraint::MultiRoot => msa(&dense),
        RootConstraint::SingleRoot => {
            let mut best: Option<(f64, Vec<usize>)> = None;
            for only in 1..side {
                let mut forced = dense.clone();
                for m in 1..side {
                    if m != only {
                        forced[0][m] = f64::NEG_INFINITY;
                    }
                }
                let heads = msa(&forced);
                let score = scores.tree_score(&heads);
                if best.as_ref().is_none_or(|(b, _)| score > *b) {
                    best = Some((score, heads));
                }
            }
            best.map(|(_, heads)| heads).unwrap_or_default()
        }
    }
}

/// Maximum spanning arborescence rooted at 0 of a dense graph `w[h][m]` (−∞ = no arc).
fn msa(w: &[Vec<f64>]) -> Vec<usize> {
    let size = w.len();
    let mut heads = vec![0usize; size];
    for m in 1..size {
        let mut best = f64::NEG_INFINITY;
        for h in 0..size {
            if h != m && w[h][m] > best {
                best = w[h][m];
                heads[m] = h;
            }
        }
    }
    let Some(cycle) = find_cycle(&heads) else {
        return heads;
    };
    let mut in_cycle = vec![false; size];
    for &c in &cycle {
        in_cycle[c] = true;
    }
    // New node ids: the non-cycle nodes keep their order, the cycle becomes the last node.
    let outside: Vec<usize> = (0..size).filter(|&v| !in_cycle[v]).collect();
    let cycle_node = outside.len();
    let new_size = outside.len() + 1;
    let cycle_score: f64 = cycle.iter().map(|&c| w[heads[c]][c]).sum();
    let mut reduced = vec![vec![f64::NEG_INFINITY; new_size]; new_size];
    let mut enter_via = vec![0usize; new_size]; // which cycle member an arc into the cycle enters
    let mut leave_from = vec![0usize; new_size]; // which cycle member an arc out of the cycle leaves
    for (i, &u) in outside.iter().enumerate() {
        for (j, &v) in outside.iter().enumerate() {
            reduced[i][j] = w[u][v];
        }
        let mut best = f64::NEG_INFINITY;
        for &c in &cycle {
            let v = w[u][c] - w[heads[c]][c] + cycle_score;
            if v > best {
                best = v;
                enter_via[i] = c;
            }
        }
        reduced[i][cycle_node] = best;
        let mut best = f64::NEG_INFINITY;
        for &c in &cycle {
            if w[c][u] > best {
                best = w[c][u];
                leave_from[i] = c;
            }
        }
        reduced[cycle_node][i] = best;
    }
    let contracted = msa(&reduced);
    let mut result = heads.clone();
    for (j, &v) in outside.iter().enumerate() {
        if v == 0 {
            continue;
        }
        let h = contracted[j];
        result[v] = if h == cycle_node {
            leave_from[j]
        } else {
            outside[h]
        };
    }
    let from = contracted[cycle_node];
    let entered = enter_via[from];
    result[entered] = outside[from];
    result
}

fn find_cycle(heads: &[usize]) -> Option<Vec<usize>> {
    let size = heads.len();
    let mut color = vec![0u8; size];
    color[0] = 2;
    for start in 1..size {
        let mut path = Vec::new();
        let mut v = start;
        while color[v] == 0 {
            color[v] = 1;
            path.push(v);
            v = heads[v];
        }
        if color[v] == 1 {
            let at = path.iter().position(|&p| p == v).unwrap_or(0);
            return Some(path[at..].to_vec());
        }
        for p in path {
            color[p] = 2;
        }
    }
    None
}

/// Every head assignment of a small sentence that is a tree of the requested kind.
///
/// Enumerates all n^n head vectors (each word's head ranges over the n other positions), keeping
/// those that form a tree, are projective when asked, and have one root child when asked.
/// For n ≤ 7 this is at most 7⁷ ≈ 8.2·10⁵ vectors.
pub fn all_trees(words: usize, projective: bool, root: RootConstraint) -> Vec<Vec<usize>> {
    assert!(words <= 8, "brute force is for tiny sentences");
    let mut trees = Vec::new();
    let mut heads = vec![0usize; words + 1];
    loop {
        let valid_heads = (1..=words).all(|m| heads[m] != m);
        let root_children = if valid_heads {
            check_tree(&heads).ok()
        } else {
            None
        };
        if let Some(root_children) = root_children {
            let root_ok = root == RootConstraint::MultiRoot || root_children == 1;
            if root_ok && (!projective || is_projective(&heads)) {
                trees.push(heads.clone());
            }
        }
        // Next head vector, odometer style over 0..=words for each word.
        let mut m = 1;
        loop {
            if m > words {
                return trees;
            }
            heads[m] += 1;
            if heads[m] <= words {
                break;
            }
            heads[m] = 0;
            m += 1;
        }
    }
}
