//! FCI's orientation: unshielded colliders (R0) and the ten rules of Zhang (2008, section 4;
//! Artificial Intelligence 172), plus the Possible-D-SEP sets of Spirtes, Meek & Richardson
//! (1995). Central type: `Orienter`, a PAG with the separating sets and a log of every mark.
//! Every rule only turns a circle into a tail or an arrowhead; a rule that meets a mark
//! already fixed otherwise keeps that mark and logs a conflict.
//! Notation as Zhang's: `*` any mark; mark(a, b) is the mark at b on the edge a *-* b.

use std::collections::{BTreeMap, VecDeque};

use super::fci::{FciTriple, MarkConflict, MarkReason, MarkSet};
use super::pag::{Mark, Pag};

/// Possible-D-SEP(a) on a PAG whose unshielded colliders are oriented (Spirtes, Glymour &
/// Scheines 2000, section 6.7; Colombo et al. 2012, definition 3.3): the nodes v != a joined to
/// a by a path on which every inner node is a collider or the middle of a triangle. Searched
/// breadth first over edges (each directed edge visited once), as Colombo et al. (2012) do;
/// this may include nodes reachable only by walks, a superset that keeps the stage sound.
pub fn possible_d_sep(g: &Pag, a: usize) -> Vec<usize> {
    let n = g.n();
    let mut seen_edge = vec![false; n * n];
    let mut inside = vec![false; n];
    let mut queue: VecDeque<(usize, usize)> = VecDeque::new();
    for v in g.adjacent(a) {
        seen_edge[a * n + v] = true;
        queue.push_back((a, v));
    }
    while let Some((p, c)) = queue.pop_front() {
        inside[c] = true;
        for w in g.adjacent(c) {
            if w == p || w == a || seen_edge[c * n + w] {
                continue;
            }
            let collider = g.mark(p, c) == Some(Mark::Arrow) && g.mark(w, c) == Some(Mark::Arrow);
            if collider || g.is_adjacent(p, w) {
                seen_edge[c * n + w] = true;
                queue.push_back((c, w));
            }
        }
    }
    (0..n).filter(|&v| v != a && inside[v]).collect()
}

/// The PAG being oriented, the separating sets of its non-adjacent pairs, and the log.
pub(crate) struct Orienter {
    pub g: Pag,
    sepsets: BTreeMap<(usize, usize), Vec<usize>>,
    pub marks: Vec<MarkSet>,
    pub conflicts: Vec<MarkConflict>,
    /// Whether R5-R7 (selection bias) apply.
    selection: bool,
}

impl Orienter {
    /// Starts from the skeleton of `g` with a circle at every end.
    pub fn new(g: Pag, sepsets: BTreeMap<(usize, usize), Vec<usize>>, selection: bool) -> Orienter {
        let n = g.n();
        let mut fresh = Pag::new(n);
        for a in 0..n {
            for b in (a + 1)..n {
                if g.is_adjacent(a, b) {
                    fresh.add(a, b, Mark::Circle, Mark::Circle);
                }
            }
        }
        Orienter { g: fresh, sepsets, marks: Vec::new(), conflicts: Vec::new(), selection }
    }

    /// Keeps the marks of `g` as they are and knows no separating sets (rule tests).
    #[cfg(test)]
    pub fn keeping(g: Pag) -> Orienter {
        Orienter { g, sepsets: BTreeMap::new(), marks: Vec::new(), conflicts: Vec::new(), selection: true }
    }

    fn sepset(&self, a: usize, b: usize) -> Option<&Vec<usize>> {
        self.sepsets.get(&(a.min(b), a.max(b)))
    }

    /// Sets the mark at b on a *-* b when it is a circle; logs a conflict when another mark
    /// is fixed there. Returns whether the mark changed.
    pub fn fix(&mut self, a: usize, b: usize, mark: Mark, reason: MarkReason) -> bool {
        match self.g.mark(a, b) {
            Some(Mark::Circle) if mark != Mark::Circle => {
                self.g.set_mark(a, b, mark);
                self.marks.push(MarkSet { other: a, at: b, mark, reason });
                true
            }
            Some(kept) if kept != mark => {
                let c = MarkConflict { other: a, at: b, wanted: mark, kept, reason };
                if !self.conflicts.contains(&c) {
                    self.conflicts.push(c);
                }
                false
            }
            _ => false,
        }
    }

    fn is(&self, a: usize, b: usize, mark: Mark) -> bool {
        self.g.mark(a, b) == Some(mark)
    }

    /// a -> b: tail at a, arrowhead at b.
    fn directed(&self, a: usize, b: usize) -> bool {
        self.is(b, a, Mark::Tail) && self.is(a, b, Mark::Arrow)
    }

    /// R0: every unshielded triple a *-* c *-* b gets arrowheads at c when c is not in the
    /// separating set of a and b. Returns the triples with their verdicts.
    pub fn colliders(&mut self) -> Vec<FciTriple> {
        let n = self.g.n();
        let mut triples = Vec::new();
        for c in 0..n {
            let adj = self.g.adjacent(c);
            for (k, &a) in adj.iter().enumerate() {
                for &b in &adj[k + 1..] {
                    if self.g.is_adjacent(a, b) {
                        continue;
                    }
                    let collider = self.sepset(a, b).is_some_and(|s| !s.contains(&c));
                    triples.push(FciTriple { a, c, b, collider });
                }
            }
        }
        triples.sort_by_key(|t| (t.a, t.c, t.b));
        for t in triples.iter().filter(|t| t.collider) {
            self.fix(t.a, t.c, Mark::Arrow, MarkReason::Collider);
            self.fix(t.b, t.c, Mark::Arrow, MarkReason::Collider);
        }
        triples
    }

    /// R1-R4 to exhaustion, then R5-R10 (with R1-R4) until no rule applies (Zhang 2008);
    /// R5-R7 only when selection bias is allowed.
    pub fn close(&mut self) {
        loop {
            if self.r1() || self.r2() || self.r3() || self.r4() {
                continue;
            }
            let selection = self.selection && (self.r5() || self.r6() || self.r7());
            if selection || self.r8() || self.r9() || self.r10() {
                continue;
            }
            break;
        }
    }

    /// R1: a *-> b o-* c, a and c non-adjacent => b -> c.
    fn r1(&mut self) -> bool {
        let n = self.g.n();
        let mut any = false;
        for b in 0..n {
            for a in self.g.adjacent(b) {
                if !self.is(a, b, Mark::Arrow) {
                    continue;
                }
                for c in self.g.adjacent(b) {
                    if c == a || self.g.is_adjacent(a, c) || !self.is(c, b, Mark::Circle) {
                        continue;
                    }
                    any |= self.fix(c, b, Mark::Tail, MarkReason::Rule(1));
                    any |= self.fix(b, c, Mark::Arrow, MarkReason::Rule(1));
                }
            }
        }
        any
    }

    /// R2: a -> b *-> c or a *-> b -> c, and a *-o c => a *-> c.
    fn r2(&mut self) -> bool {
        let n = self.g.n();
        let mut any = false;
        for a in 0..n {
            for c in self.g.adjacent(a) {
                if !self.is(a, c, Mark::Circle) {
                    continue;
                }
                let hit = self.g.adjacent(a).into_iter().any(|b| {
                    b != c
                        && self.g.is_adjacent(b, c)
                        && ((self.directed(a, b) && self.is(b, c, Mark::Arrow))
                            || (self.is(a, b, Mark::Arrow) && self.directed(b, c)))
                });
                if hit {
                    any |= self.fix(a, c, Mark::Arrow, MarkReason::Rule(2));
                }
            }
        }
        any
    }

    /// R3: a *-> b <-* c, a *-o d o-* c, a and c non-adjacent, d *-o b => d *-> b.
    fn r3(&mut self) -> bool {
        let n = self.g.n();
        let mut any = false;
        for b in 0..n {
            for d in self.g.adjacent(b) {
                if !self.is(d, b, Mark::Circle) {
                    continue;
                }
                let cands: Vec<usize> = self
                    .g
                    .adjacent(b)
                    .into_iter()
                    .filter(|&x| {
                        x != d && self.g.is_adjacent(x, d) && self.is(x, b, Mark::Arrow) && self.is(x, d, Mark::Circle)
                    })
                    .collect();
                let hit =
                    cands.iter().enumerate().any(|(k, &a)| cands[k + 1..].iter().any(|&c| !self.g.is_adjacent(a, c)));
                if hit {
                    any |= self.fix(d, b, Mark::Arrow, MarkReason::Rule(3));
                }
            }
        }
        any
    }

    /// R4: u = <d, ..., a, b, c> a discriminating path for b (at least three edges; d and c
    /// non-adjacent; every node between d and b a collider on u and a parent of c) and
    /// b o-* c: if b is in the separating set of d and c then b -> c, else a <-> b <-> c.
    fn r4(&mut self) -> bool {
        let n = self.g.n();
        for b in 0..n {
            for c in self.g.adjacent(b) {
                if !self.is(c, b, Mark::Circle) {
                    continue;
                }
                for a in self.g.adjacent(b) {
                    // a must be a parent of c and have an arrowhead from b's side
                    if a == c || !self.directed(a, c) || !self.is(b, a, Mark::Arrow) {
                        continue;
                    }
                    let Some(d) = self.discriminating_start(a, b, c) else { continue };
                    let in_sepset = self.sepset(d, c).is_some_and(|s| s.contains(&b));
                    let changed = if in_sepset {
                        let t = self.fix(c, b, Mark::Tail, MarkReason::Rule(4));
                        self.fix(b, c, Mark::Arrow, MarkReason::Rule(4)) | t
                    } else {
                        let x = self.fix(a, b, Mark::Arrow, MarkReason::Rule(4));
                        let y = self.fix(c, b, Mark::Arrow, MarkReason::Rule(4));
                        self.fix(b, c, Mark::Arrow, MarkReason::Rule(4)) | x | y
                    };
                    if changed {
                        return true;
                    }
                }
            }
        }
        false
    }

    /// Breadth-first search backwards from `a` (a collider on the path, parent of c) for the
    /// start d of a discriminating path <d, ..., a, b, c>: each step v <- w needs an arrowhead
    /// at v from w; the path ends at a w not adjacent to c, or goes on through a w that is
    /// itself a collider and a parent of c.
    fn discriminating_start(&self, a: usize, b: usize, c: usize) -> Option<usize> {
        let n = self.g.n();
        let mut seen = vec![false; n];
        seen[a] = true;
        seen[b] = true;
        seen[c] = true;
        // (node on the path, its successor towards b)
        let mut queue: VecDeque<(usize, usize)> = VecDeque::from([(a, b)]);
        while let Some((v, _)) = queue.pop_front() {
            for w in self.g.adjacent(v) {
                if seen[w] || !self.is(w, v, Mark::Arrow) {
                    continue;
                }
                if !self.g.is_adjacent(w, c) {
                    return Some(w);
                }
                if self.directed(w, c) && self.is(v, w, Mark::Arrow) {
                    seen[w] = true;
                    queue.push_back((w, v));
                }
            }
        }
        None
    }

    /// An uncovered path <start, first, ..., target> (every consecutive triple's ends
    /// non-adjacent) whose every edge u *-* v, walked from u to v, passes `edge_ok(u, v)`;
    /// depth-first over simple paths (exponential in the worst case, fine for the few
    /// constructs of a survey).
    fn uncovered_path(
        &self,
        start: usize,
        first: usize,
        target: usize,
        edge_ok: &dyn Fn(usize, usize) -> bool,
    ) -> Option<Vec<usize>> {
        if !edge_ok(start, first) {
            return None;
        }
        let mut path = vec![start, first];
        let mut on = vec![false; self.g.n()];
        on[start] = true;
        on[first] = true;
        if self.extend(&mut path, &mut on, target, edge_ok) { Some(path) } else { None }
    }

    fn extend(
        &self,
        path: &mut Vec<usize>,
        on: &mut [bool],
        target: usize,
        edge_ok: &dyn Fn(usize, usize) -> bool,
    ) -> bool {
        let v = path[path.len() - 1];
        if v == target {
            return true;
        }
        let u = path[path.len() - 2];
        for w in self.g.adjacent(v) {
            if on[w] || self.g.is_adjacent(u, w) || !edge_ok(v, w) {
                continue;
            }
            path.push(w);
            on[w] = true;
            if self.extend(path, on, target, edge_ok) {
                return true;
            }
            path.pop();
            on[w] = false;
        }
        false
    }

    /// Edge u *-* v walked from u to v is potentially directed: no arrowhead at u, no tail at v.
    fn pd(&self, u: usize, v: usize) -> bool {
        !self.is(v, u, Mark::Arrow) && !self.is(u, v, Mark::Tail)
    }

    /// R5: a o-o b and an uncovered circle path <a, c, ..., d, b> with a, d and b, c
    /// non-adjacent => a - b and every edge of the path undirected (selection bias only).
    fn r5(&mut self) -> bool {
        let n = self.g.n();
        let circle =
            |g: &Pag, u: usize, v: usize| g.mark(u, v) == Some(Mark::Circle) && g.mark(v, u) == Some(Mark::Circle);
        for a in 0..n {
            for b in self.g.adjacent(a) {
                if !circle(&self.g, a, b) {
                    continue;
                }
                for c in self.g.adjacent(a) {
                    if c == b || self.g.is_adjacent(b, c) {
                        continue;
                    }
                    let g = &self.g;
                    let ok = |u: usize, v: usize| v != b && circle(g, u, v);
                    // the path runs a, c, ..., d and then d o-o b, with d not adjacent to a
                    let found =
                        self.g.adjacent(b).into_iter().filter(|&d| d != a && !self.g.is_adjacent(a, d)).find_map(|d| {
                            if !circle(&self.g, d, b) {
                                return None;
                            }
                            self.uncovered_path(a, c, d, &ok).filter(|p| {
                                // the last triple <x, d, b> and <d, b, a> must be uncovered too
                                let x = p[p.len() - 2];
                                !self.g.is_adjacent(x, b)
                            })
                        });
                    if let Some(mut path) = found {
                        path.push(b);
                        path.push(a);
                        let mut changed = false;
                        for w in path.windows(2) {
                            changed |= self.fix(w[0], w[1], Mark::Tail, MarkReason::Rule(5));
                            changed |= self.fix(w[1], w[0], Mark::Tail, MarkReason::Rule(5));
                        }
                        if changed {
                            return true;
                        }
                    }
                }
            }
        }
        false
    }

    /// R6: a - b o-* c (a and c any) => b -* c.
    fn r6(&mut self) -> bool {
        let n = self.g.n();
        let mut any = false;
        for b in 0..n {
            for a in self.g.adjacent(b) {
                if !(self.is(a, b, Mark::Tail) && self.is(b, a, Mark::Tail)) {
                    continue;
                }
                for c in self.g.adjacent(b) {
                    if c != a && self.is(c, b, Mark::Circle) {
                        any |= self.fix(c, b, Mark::Tail, MarkReason::Rule(6));
                    }
                }
            }
        }
        any
    }

    /// R7: a -o b o-* c, a and c non-adjacent => b -* c.
    fn r7(&mut self) -> bool {
        let n = self.g.n();
        let mut any = false;
        for b in 0..n {
            for a in self.g.adjacent(b) {
                if !(self.is(b, a, Mark::Tail) && self.is(a, b, Mark::Circle)) {
                    continue;
                }
                for c in self.g.adjacent(b) {
                    if c != a && !self.g.is_adjacent(a, c) && self.is(c, b, Mark::Circle) {
                        any |= self.fix(c, b, Mark::Tail, MarkReason::Rule(7));
                    }
                }
            }
        }
        any
    }

    /// The pairs (a, c) with a o-> c.
    fn partially_directed(&self) -> Vec<(usize, usize)> {
        let n = self.g.n();
        let mut out = Vec::new();
        for a in 0..n {
            for c in self.g.adjacent(a) {
                if self.is(c, a, Mark::Circle) && self.is(a, c, Mark::Arrow) {
                    out.push((a, c));
                }
            }
        }
        out
    }

    /// R8: a -> b -> c or a -o b -> c, and a o-> c => a -> c.
    fn r8(&mut self) -> bool {
        let mut any = false;
        for (a, c) in self.partially_directed() {
            let hit = self.g.adjacent(a).into_iter().any(|b| {
                b != c
                    && self.is(b, a, Mark::Tail)
                    && (self.is(a, b, Mark::Arrow) || self.is(a, b, Mark::Circle))
                    && self.directed(b, c)
            });
            if hit {
                any |= self.fix(c, a, Mark::Tail, MarkReason::Rule(8));
            }
        }
        any
    }

    /// R9: a o-> c and an uncovered potentially directed path <a, b, ..., c> with b and c
    /// non-adjacent => a -> c.
    fn r9(&mut self) -> bool {
        let mut any = false;
        for (a, c) in self.partially_directed() {
            let hit = self.g.adjacent(a).into_iter().any(|b| {
                b != c && !self.g.is_adjacent(b, c) && self.uncovered_path(a, b, c, &|u, v| self.pd(u, v)).is_some()
            });
            if hit {
                any |= self.fix(c, a, Mark::Tail, MarkReason::Rule(9));
            }
        }
        any
    }

    /// R10: a o-> c, b -> c <- d, uncovered potentially directed paths p1 from a to b and p2
    /// from a to d whose second nodes m (on p1) and w (on p2) are distinct and non-adjacent
    /// (m may be b, w may be d) => a -> c.
    fn r10(&mut self) -> bool {
        let mut any = false;
        for (a, c) in self.partially_directed() {
            let parents: Vec<usize> =
                self.g.adjacent(c).into_iter().filter(|&p| p != a && self.directed(p, c)).collect();
            if parents.len() < 2 {
                continue;
            }
            // for each parent, the second nodes of uncovered p.d. paths from a to it
            let firsts: Vec<Vec<usize>> = parents
                .iter()
                .map(|&p| {
                    self.g
                        .adjacent(a)
                        .into_iter()
                        .filter(|&m| self.uncovered_path(a, m, p, &|u, v| self.pd(u, v)).is_some())
                        .collect()
                })
                .collect();
            let hit = (0..parents.len()).any(|i| {
                ((i + 1)..parents.len())
                    .any(|j| firsts[i].iter().any(|&m| firsts[j].iter().any(|&w| m != w && !self.g.is_adjacent(m, w))))
            });
            if hit {
                any |= self.fix(c, a, Mark::Tail, MarkReason::Rule(10));
            }
        }
        any
    }
}
