//! Partial ancestral graphs (PAGs; Richardson & Spirtes 2002, Zhang 2008): at most one edge per
//! pair of nodes `0..n`, each edge end carrying a mark (tail, arrowhead or circle). Central type:
//! `Pag`; `PagEdge` is one edge with its two marks and its `PagEdgeKind`.
//! Reading of the marks (Zhang 2008, section 2): an arrowhead at b on a *-> b says b is not a
//! cause (ancestor) of a; a tail at a on a -* b says a is a cause of b; a circle says the data
//! leave it open. Never stores a self edge; never knows names.

use serde::{Deserialize, Serialize};

/// The mark at one end of a PAG edge.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Mark {
    /// `-`: this end is a cause of the other.
    Tail,
    /// `o`: undetermined.
    Circle,
    /// `>`: this end is not a cause of the other.
    Arrow,
}

impl Mark {
    /// Order used to write an edge with its less arrow-like end first: tail, circle, arrow.
    fn rank(self) -> u8 {
        match self {
            Mark::Tail => 0,
            Mark::Circle => 1,
            Mark::Arrow => 2,
        }
    }
}

/// The kind of a PAG edge from its two marks, written with the less arrow-like end first.
/// Serialized as results.json's `kind` words.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum PagEdgeKind {
    /// `a -> b`: a causes b; no hidden common cause is needed to explain the pair.
    Directed,
    /// `a <-> b`: neither causes the other; they share a hidden common cause.
    Bidirected,
    /// `a o-> b`: b does not cause a; a causes b, or they share a hidden cause, or both.
    PartiallyDirected,
    /// `a o-o b`: adjacent, nothing about the direction is settled.
    Nondirected,
    /// `a - b`: each causes the other's selection (selection bias only; never without it).
    Undirected,
    /// `a -o b`: a causes b or both are selected on (selection bias only; never without it).
    PartiallyUndirected,
}

impl PagEdgeKind {
    /// The kind of an edge with mark `at_from` at its first end and `at_to` at its second,
    /// written so that `at_from` ranks no higher than `at_to` (tail < circle < arrow).
    pub fn of(at_from: Mark, at_to: Mark) -> PagEdgeKind {
        match (at_from.min_rank(at_to), at_from.max_rank(at_to)) {
            (Mark::Tail, Mark::Arrow) => PagEdgeKind::Directed,
            (Mark::Arrow, Mark::Arrow) => PagEdgeKind::Bidirected,
            (Mark::Circle, Mark::Arrow) => PagEdgeKind::PartiallyDirected,
            (Mark::Circle, Mark::Circle) => PagEdgeKind::Nondirected,
            (Mark::Tail, Mark::Tail) => PagEdgeKind::Undirected,
            _ => PagEdgeKind::PartiallyUndirected,
        }
    }

    /// True when the edge allows that the two share a hidden common cause (an arrowhead or a
    /// circle at both ends: `<->`, `o->`, `o-o`).
    pub fn allows_hidden_cause(self) -> bool {
        matches!(self, PagEdgeKind::Bidirected | PagEdgeKind::PartiallyDirected | PagEdgeKind::Nondirected)
    }
}

impl From<PagEdgeKind> for super::graph::EdgeKind {
    /// The results word of a PAG edge. `a -o b` (selection bias only) has no word of its own
    /// and is written `undirected`; its marks say the rest.
    fn from(k: PagEdgeKind) -> Self {
        use super::graph::EdgeKind as E;
        match k {
            PagEdgeKind::Directed => E::Directed,
            PagEdgeKind::Bidirected => E::Bidirected,
            PagEdgeKind::PartiallyDirected => E::PartiallyDirected,
            PagEdgeKind::Nondirected => E::Nondirected,
            PagEdgeKind::Undirected | PagEdgeKind::PartiallyUndirected => E::Undirected,
        }
    }
}

impl Mark {
    fn min_rank(self, other: Mark) -> Mark {
        if self.rank() <= other.rank() { self } else { other }
    }
    fn max_rank(self, other: Mark) -> Mark {
        if self.rank() <= other.rank() { other } else { self }
    }
}

/// One edge of a PAG: `mark_from` at `from`, `mark_to` at `to`, with the less arrow-like end
/// first (tail < circle < arrow) and, for equal marks, `from < to`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
pub struct PagEdge {
    pub from: usize,
    pub to: usize,
    pub mark_from: Mark,
    pub mark_to: Mark,
    pub kind: PagEdgeKind,
}

impl PagEdge {
    /// The edge's text form: `2 -> 5`, `2 o-> 5`, `2 <-> 5`, `2 o-o 5`, `2 - 5`, `2 -o 5`.
    pub fn symbol(&self) -> String {
        let left = match self.mark_from {
            Mark::Tail => "",
            Mark::Circle => "o",
            Mark::Arrow => "<",
        };
        let right = match self.mark_to {
            Mark::Tail => "",
            Mark::Circle => "o",
            Mark::Arrow => ">",
        };
        format!("{} {left}-{right} {}", self.from, self.to)
    }
}

/// A partial ancestral graph over `n` nodes. `marks[a * n + b]` is the mark at b on the edge
/// between a and b, `None` when they are not adjacent.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Pag {
    n: usize,
    marks: Vec<Option<Mark>>,
}

impl Pag {
    /// The empty graph on `n` nodes.
    pub fn new(n: usize) -> Pag {
        Pag { n, marks: vec![None; n * n] }
    }

    /// The complete graph on `n` nodes with circles at every end (the start of FCI).
    pub fn complete(n: usize) -> Pag {
        let mut g = Pag::new(n);
        for a in 0..n {
            for b in (a + 1)..n {
                g.add(a, b, Mark::Circle, Mark::Circle);
            }
        }
        g
    }

    /// Number of nodes.
    pub fn n(&self) -> usize {
        self.n
    }

    /// Adds (or replaces) the edge a *-* b with `at_a` at a and `at_b` at b; self loops ignored.
    pub fn add(&mut self, a: usize, b: usize, at_a: Mark, at_b: Mark) {
        if a != b {
            self.marks[b * self.n + a] = Some(at_a);
            self.marks[a * self.n + b] = Some(at_b);
        }
    }

    /// Removes the edge between a and b, if any.
    pub fn remove(&mut self, a: usize, b: usize) {
        self.marks[a * self.n + b] = None;
        self.marks[b * self.n + a] = None;
    }

    /// The mark at `b` on the edge between a and b (`None` when not adjacent).
    pub fn mark(&self, a: usize, b: usize) -> Option<Mark> {
        self.marks[a * self.n + b]
    }

    /// Sets the mark at `b` on the existing edge a *-* b; panics when there is none (a bug).
    pub fn set_mark(&mut self, a: usize, b: usize, mark: Mark) {
        assert!(self.is_adjacent(a, b), "no edge between {a} and {b}");
        self.marks[a * self.n + b] = Some(mark);
    }

    /// True when a and b share an edge.
    pub fn is_adjacent(&self, a: usize, b: usize) -> bool {
        a != b && self.marks[a * self.n + b].is_some()
    }

    /// Nodes adjacent to a, ascending.
    pub fn adjacent(&self, a: usize) -> Vec<usize> {
        (0..self.n).filter(|&b| self.is_adjacent(a, b)).collect()
    }

    /// True when the edge is a -> b (tail at a, arrowhead at b).
    pub fn is_directed(&self, a: usize, b: usize) -> bool {
        self.mark(b, a) == Some(Mark::Tail) && self.mark(a, b) == Some(Mark::Arrow)
    }

    /// Every edge once, written as `PagEdge` orders it, sorted.
    pub fn edges(&self) -> Vec<PagEdge> {
        let mut out = Vec::new();
        for a in 0..self.n {
            for b in (a + 1)..self.n {
                let (Some(at_b), Some(at_a)) = (self.mark(a, b), self.mark(b, a)) else { continue };
                let (from, to, mark_from, mark_to) =
                    if (at_a.rank(), a) <= (at_b.rank(), b) { (a, b, at_a, at_b) } else { (b, a, at_b, at_a) };
                out.push(PagEdge { from, to, mark_from, mark_to, kind: PagEdgeKind::of(mark_from, mark_to) });
            }
        }
        out.sort_unstable();
        out
    }

    /// Number of adjacencies.
    pub fn edge_count(&self) -> usize {
        self.marks.iter().filter(|m| m.is_some()).count() / 2
    }

    /// A PAG from edges written as `(a, "o->", b)`: the left character is the mark at a
    /// (`-`, `o`, `<`), the right one the mark at b (`-`, `o`, `>`); for tests and fixtures.
    /// Panics on any other form (a bug in the caller).
    pub fn from_symbols(n: usize, edges: &[(usize, &str, usize)]) -> Pag {
        let mut g = Pag::new(n);
        for &(a, s, b) in edges {
            let chars: Vec<char> = s.chars().collect();
            let (l, r) = (chars[0], chars[chars.len() - 1]);
            let at_a = match l {
                '-' => Mark::Tail,
                'o' => Mark::Circle,
                '<' => Mark::Arrow,
                _ => panic!("bad edge symbol {s}"),
            };
            let at_b = match r {
                '-' => Mark::Tail,
                'o' => Mark::Circle,
                '>' => Mark::Arrow,
                _ => panic!("bad edge symbol {s}"),
            };
            g.add(a, b, at_a, at_b);
        }
        g
    }

    /// The graph as text, one edge per line in `edges` order (for failure messages).
    pub fn describe(&self) -> String {
        self.edges().iter().map(PagEdge::symbol).collect::<Vec<_>>().join(", ")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn edges_are_written_with_the_least_arrow_like_end_first() {
        let g = Pag::from_symbols(4, &[(1, "<-o", 0), (2, "<->", 3), (3, "->", 0), (1, "o-o", 2)]);
        let kinds: Vec<(usize, usize, PagEdgeKind)> = g.edges().iter().map(|e| (e.from, e.to, e.kind)).collect();
        assert_eq!(
            kinds,
            vec![
                (0, 1, PagEdgeKind::PartiallyDirected),
                (1, 2, PagEdgeKind::Nondirected),
                (2, 3, PagEdgeKind::Bidirected),
                (3, 0, PagEdgeKind::Directed),
            ]
        );
        assert_eq!(g.mark(0, 1), Some(Mark::Arrow));
        assert_eq!(g.mark(1, 0), Some(Mark::Circle));
        assert!(g.is_directed(3, 0) && !g.is_directed(0, 3));
        assert_eq!(g.describe(), "0 o-> 1, 1 o-o 2, 2 <-> 3, 3 -> 0");
        assert_eq!(serde_json::to_value(PagEdgeKind::PartiallyDirected).unwrap(), "partially_directed");
        assert_eq!(serde_json::to_value(Mark::Arrow).unwrap(), "arrow");
        assert!(PagEdgeKind::Nondirected.allows_hidden_cause() && !PagEdgeKind::Directed.allows_hidden_cause());
        assert_eq!(PagEdgeKind::of(Mark::Circle, Mark::Tail), PagEdgeKind::PartiallyUndirected);
        use crate::search::graph::EdgeKind;
        let words: Vec<serde_json::Value> = [
            PagEdgeKind::Directed,
            PagEdgeKind::Bidirected,
            PagEdgeKind::PartiallyDirected,
            PagEdgeKind::Nondirected,
            PagEdgeKind::Undirected,
        ]
        .into_iter()
        .map(|k| serde_json::to_value(EdgeKind::from(k)).unwrap())
        .collect();
        assert_eq!(words, ["directed", "bidirected", "partially_directed", "nondirected", "undirected"]);
    }
}
