//! Partially directed graphs over nodes `0..n` (names live outside `stats/`): DAGs, PDAGs and
//! CPDAGs share one type, `Graph`, whose every adjacency is either directed or undirected.
//! Also owns the CPDAG of a DAG (skeleton + v-structures + Meek rules; Meek 1995,
//! Chickering 1995) and the d-separation criterion (Pearl 1988; Lauritzen et al. 1990).
//! Never stores more than one edge per pair and never holds bidirected or self edges.

use serde::{Deserialize, Serialize};

use super::meek;

/// State of the ordered pair (i, j) in the adjacency table.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Link {
    /// Not adjacent.
    None,
    /// i - j.
    Undirected,
    /// i -> j.
    Out,
    /// i <- j.
    In,
}

/// Whether an edge is oriented. Serialized as `"directed"` / `"undirected"` (the `kind` of
/// results.json's `structure.edges`); the one type every layer compares edges by. FCI's edges
/// add `"bidirected"`, `"partially_directed"` and `"nondirected"` (see `pag`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum EdgeKind {
    // Undirected first, so edges sort as they did when this was a `directed: bool`.
    /// `from - to`: the data and the knowledge leave the orientation open.
    Undirected,
    /// `from -> to`.
    Directed,
    // The kinds below occur only in FCI's partial ancestral graphs (`pag::PagEdgeKind`).
    /// `from <-> to`: the two share a hidden common cause and neither causes the other.
    Bidirected,
    /// `from o-> to`: `to` does not cause `from`; `from` causes `to`, or they share a hidden cause.
    PartiallyDirected,
    /// `from o-o to`: adjacent; causation either way or a hidden common cause.
    Nondirected,
}

impl EdgeKind {
    pub fn is_directed(self) -> bool {
        self == EdgeKind::Directed
    }

    /// `Directed` when `directed`, else `Undirected`.
    pub fn from_directed(directed: bool) -> EdgeKind {
        if directed { EdgeKind::Directed } else { EdgeKind::Undirected }
    }
}

/// One edge of a graph: `from -> to` when directed, otherwise `from - to` with `from < to`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
pub struct Edge {
    pub from: usize,
    pub to: usize,
    pub kind: EdgeKind,
}

impl Edge {
    pub fn is_directed(&self) -> bool {
        self.kind.is_directed()
    }
}

/// A graph over `n` nodes with at most one edge, directed or undirected, per pair.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Graph {
    n: usize,
    links: Vec<Link>,
}

impl Graph {
    /// The empty graph on `n` nodes.
    pub fn new(n: usize) -> Self {
        Graph { n, links: vec![Link::None; n * n] }
    }

    /// The complete undirected graph on `n` nodes (the start of the PC search).
    pub fn complete(n: usize) -> Self {
        let mut g = Graph::new(n);
        for i in 0..n {
            for j in (i + 1)..n {
                g.add_undirected(i, j);
            }
        }
        g
    }

    /// A graph from directed edges `(from, to)`; panics on an index >= n (a caller bug).
    pub fn from_directed(n: usize, edges: &[(usize, usize)]) -> Self {
        let mut g = Graph::new(n);
        for &(a, b) in edges {
            g.add_directed(a, b);
        }
        g
    }

    /// Number of nodes.
    pub fn n(&self) -> usize {
        self.n
    }

    /// The link state of the ordered pair (a, b).
    pub fn link(&self, a: usize, b: usize) -> Link {
        self.links[a * self.n + b]
    }

    fn set(&mut self, a: usize, b: usize, ab: Link, ba: Link) {
        self.links[a * self.n + b] = ab;
        self.links[b * self.n + a] = ba;
    }

    /// Sets a -> b, replacing whatever edge the pair had. Self loops are ignored.
    pub fn add_directed(&mut self, a: usize, b: usize) {
        if a != b {
            self.set(a, b, Link::Out, Link::In);
        }
    }

    /// Sets a - b, replacing whatever edge the pair had. Self loops are ignored.
    pub fn add_undirected(&mut self, a: usize, b: usize) {
        if a != b {
            self.set(a, b, Link::Undirected, Link::Undirected);
        }
    }

    /// Removes the edge between a and b, if any.
    pub fn remove(&mut self, a: usize, b: usize) {
        self.set(a, b, Link::None, Link::None);
    }

    /// True when a and b share an edge of any kind.
    pub fn is_adjacent(&self, a: usize, b: usize) -> bool {
        self.link(a, b) != Link::None
    }

    /// True when the graph has a -> b.
    pub fn is_directed(&self, a: usize, b: usize) -> bool {
        self.link(a, b) == Link::Out
    }

    /// True when the graph has a - b.
    pub fn is_undirected(&self, a: usize, b: usize) -> bool {
        self.link(a, b) == Link::Undirected
    }

    /// All nodes adjacent to a, ascending.
    pub fn adjacent(&self, a: usize) -> Vec<usize> {
        (0..self.n).filter(|&b| self.is_adjacent(a, b)).collect()
    }

    /// Parents of a (b -> a), ascending.
    pub fn parents(&self, a: usize) -> Vec<usize> {
        (0..self.n).filter(|&b| self.link(a, b) == Link::In).collect()
    }

    /// Children of a (a -> b), ascending.
    pub fn children(&self, a: usize) -> Vec<usize> {
        (0..self.n).filter(|&b| self.link(a, b) == Link::Out).collect()
    }

    /// Nodes joined to a by an undirected edge, ascending.
    pub fn undirected_neighbors(&self, a: usize) -> Vec<usize> {
        (0..self.n).filter(|&b| self.is_undirected(a, b)).collect()
    }

    /// Every edge once, sorted: directed as `from -> to`, undirected with `from < to`.
    pub fn edges(&self) -> Vec<Edge> {
        let mut out = Vec::new();
        for a in 0..self.n {
            for b in 0..self.n {
                match self.link(a, b) {
                    Link::Out => out.push(Edge { from: a, to: b, kind: EdgeKind::Directed }),
                    Link::Undirected if a < b => out.push(Edge { from: a, to: b, kind: EdgeKind::Undirected }),
                    _ => {}
                }
            }
        }
        out
    }

    /// Number of adjacencies.
    pub fn edge_count(&self) -> usize {
        self.links.iter().filter(|&&l| l != Link::None).count() / 2
    }

    /// True when every edge is directed.
    pub fn is_fully_directed(&self) -> bool {
        !self.links.contains(&Link::Undirected)
    }

    /// The same adjacencies with every edge undirected.
    pub fn skeleton(&self) -> Graph {
        let mut g = Graph::new(self.n);
        for a in 0..self.n {
            for b in (a + 1)..self.n {
                if self.is_adjacent(a, b) {
                    g.add_undirected(a, b);
                }
            }
        }
        g
    }

    /// True when a directed path a -> ... -> b of length >= 1 exists (directed edges only).
    pub fn has_directed_path(&self, a: usize, b: usize) -> bool {
        let mut seen = vec![false; self.n];
        let mut stack = self.children(a);
        while let Some(v) = stack.pop() {
            if v == b {
                return true;
            }
            if !seen[v] {
                seen[v] = true;
                stack.extend(self.children(v));
            }
        }
        false
    }

    /// A topological order of the directed part (Kahn 1962), or `None` when it has a cycle.
    /// Undirected edges are ignored.
    pub fn topological_order(&self) -> Option<Vec<usize>> {
        let mut indeg: Vec<usize> = (0..self.n).map(|v| self.parents(v).len()).collect();
        let mut ready: Vec<usize> = (0..self.n).rev().filter(|&v| indeg[v] == 0).collect();
        let mut order = Vec::with_capacity(self.n);
        while let Some(v) = ready.pop() {
            order.push(v);
            for c in self.children(v).into_iter().rev() {
                indeg[c] -= 1;
                if indeg[c] == 0 {
                    ready.push(c);
                }
            }
        }
        (order.len() == self.n).then_some(order)
    }

    /// True when the directed part has no directed cycle.
    pub fn is_acyclic(&self) -> bool {
        self.topological_order().is_some()
    }

    /// Unshielded colliders a -> c <- b with a, b non-adjacent, as (a, c, b) with a < b, sorted
    /// (the v-structures of Verma & Pearl 1990).
    pub fn v_structures(&self) -> Vec<(usize, usize, usize)> {
        let mut out = Vec::new();
        for c in 0..self.n {
            let pa = self.parents(c);
            for (x, &a) in pa.iter().enumerate() {
                for &b in &pa[x + 1..] {
                    if !self.is_adjacent(a, b) {
                        out.push((a, c, b));
                    }
                }
            }
        }
        out.sort_unstable();
        out
    }

    /// The completed PDAG (essential graph) of a DAG: its skeleton with its v-structures
    /// oriented, then Meek's rules R1-R3 to closure, which orient exactly the compelled edges
    /// (Verma & Pearl 1990 for the class; Meek 1995, Theorem 3 from memory, for completeness of the rules;
    /// Chickering 1995 for the same object by edge labelling).
    pub fn cpdag_of_dag(dag: &Graph) -> Graph {
        let mut g = dag.skeleton();
        for (a, c, b) in dag.v_structures() {
            g.add_directed(a, c);
            g.add_directed(b, c);
        }
        meek::close(&mut g, |_, _| false);
        g
    }

    /// d-separation of x and y given z in a DAG (Pearl 1988), decided by the moral ancestral
    /// graph criterion (Lauritzen, Dawid, Larsen & Leimer 1990): x and y are d-separated by z iff
    /// they are disconnected, after removing z, in the moralized graph of the ancestors of
    /// {x, y} ∪ z. Undirected edges are ignored; x, y must not be in z.
    pub fn d_separated(&self, x: usize, y: usize, z: &[usize]) -> bool {
        let n = self.n;
        let mut anc = vec![false; n];
        let mut stack: Vec<usize> = z.iter().copied().chain([x, y]).collect();
        while let Some(v) = stack.pop() {
            if !anc[v] {
                anc[v] = true;
                stack.extend(self.parents(v));
            }
        }
        let mut moral = vec![false; n * n];
        for v in (0..n).filter(|&v| anc[v]) {
            let pa = self.parents(v);
            for (k, &p) in pa.iter().enumerate() {
                moral[p * n + v] = true;
                moral[v * n + p] = true;
                for &q in &pa[k + 1..] {
                    moral[p * n + q] = true;
                    moral[q * n + p] = true;
                }
            }
        }
        let mut blocked = vec![false; n];
        for &v in z {
            blocked[v] = true;
        }
        let mut seen = vec![false; n];
        let mut stack = vec![x];
        seen[x] = true;
        while let Some(v) = stack.pop() {
            if v == y {
                return false;
            }
            for w in 0..n {
                if moral[v * n + w] && anc[w] && !blocked[w] && !seen[w] {
                    seen[w] = true;
                    stack.push(w);
                }
            }
        }
        true
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;

    // Edge kinds are one type with the words results.json has always shown, and sort as
    // the bool they replaced (undirected before directed).
    #[test]
    fn edge_kinds_serialize_to_their_words_and_keep_their_order() {
        assert_eq!(serde_json::to_value(EdgeKind::Directed).unwrap(), "directed");
        assert_eq!(serde_json::to_value(EdgeKind::Undirected).unwrap(), "undirected");
        assert_eq!(serde_json::from_value::<EdgeKind>("directed".into()).unwrap(), EdgeKind::Directed);
        assert!(serde_json::from_value::<EdgeKind>("Directed".into()).is_err());
        assert!(EdgeKind::Undirected < EdgeKind::Directed);
        assert_eq!(EdgeKind::from_directed(true), EdgeKind::Directed);
        let mut g = Graph::new(3);
        g.add_undirected(0, 1);
        g.add_directed(2, 1);
        let kinds: Vec<EdgeKind> = g.edges().iter().map(|e| e.kind).collect();
        assert_eq!(kinds, [EdgeKind::Undirected, EdgeKind::Directed]);
    }
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// A random DAG on `n` nodes: a random order, each forward pair an edge with probability
    /// `density` (the Erdos-Renyi DAG of common practice, no single source).
    pub(crate) fn random_dag(n: usize, density: f64, seed: u64) -> Graph {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let mut order: Vec<usize> = (0..n).collect();
        for i in (1..n).rev() {
            let j = rng.random_range(0..=i);
            order.swap(i, j);
        }
        let mut g = Graph::new(n);
        for i in 0..n {
            for j in (i + 1)..n {
                if rng.random::<f64>() < density {
                    g.add_directed(order[i], order[j]);
                }
            }
        }
        g
    }

    /// Every DAG with the skeleton of `g`, by brute force over all 2^E orientations.
    pub(crate) fn all_orientations(g: &Graph) -> Vec<Graph> {
        let pairs: Vec<(usize, usize)> = g.edges().iter().map(|e| (e.from, e.to)).collect();
        let mut out = Vec::new();
        for mask in 0u64..(1u64 << pairs.len()) {
            let mut d = Graph::new(g.n());
            for (k, &(a, b)) in pairs.iter().enumerate() {
                if mask >> k & 1 == 1 {
                    d.add_directed(a, b);
                } else {
                    d.add_directed(b, a);
                }
            }
            if d.is_acyclic() {
                out.push(d);
            }
        }
        out
    }

    /// The Markov equivalence class of a DAG by brute force: same skeleton and v-structures
    /// (Verma & Pearl 1990, Theorem 1).
    pub(crate) fn brute_class(dag: &Graph) -> Vec<Graph> {
        let v = dag.v_structures();
        all_orientations(dag).into_iter().filter(|d| d.v_structures() == v).collect()
    }

    #[test]
    fn basic_edge_bookkeeping() {
        let mut g = Graph::new(3);
        g.add_directed(0, 1);
        g.add_undirected(1, 2);
        assert!(g.is_directed(0, 1) && !g.is_directed(1, 0));
        assert!(g.is_undirected(2, 1));
        assert_eq!(g.parents(1), vec![0]);
        assert_eq!(g.adjacent(1), vec![0, 2]);
        assert_eq!(g.edge_count(), 2);
        g.remove(0, 1);
        assert!(!g.is_adjacent(1, 0));
        assert_eq!(g.edges(), vec![Edge { from: 1, to: 2, kind: EdgeKind::Undirected }]);
    }

    #[test]
    fn cycles_are_detected() {
        let g = Graph::from_directed(3, &[(0, 1), (1, 2), (2, 0)]);
        assert!(!g.is_acyclic());
        assert!(g.has_directed_path(0, 0));
        let g = Graph::from_directed(3, &[(0, 1), (1, 2), (0, 2)]);
        assert_eq!(g.topological_order(), Some(vec![0, 1, 2]));
    }

    // The three elementary cases of d-separation (Pearl 1988, ch. 3): chain and fork are blocked
    // by conditioning on the middle node, a collider is opened by conditioning on it or on a
    // descendant of it.
    #[test]
    fn d_separation_elementary_cases() {
        let chain = Graph::from_directed(3, &[(0, 1), (1, 2)]);
        assert!(!chain.d_separated(0, 2, &[]));
        assert!(chain.d_separated(0, 2, &[1]));
        let fork = Graph::from_directed(3, &[(1, 0), (1, 2)]);
        assert!(!fork.d_separated(0, 2, &[]));
        assert!(fork.d_separated(0, 2, &[1]));
        let collider = Graph::from_directed(4, &[(0, 1), (2, 1), (1, 3)]);
        assert!(collider.d_separated(0, 2, &[]));
        assert!(!collider.d_separated(0, 2, &[1]));
        assert!(!collider.d_separated(0, 2, &[3]));
    }

    // The CPDAG of a DAG orients exactly the edges with one direction in every member of the
    // class (Chickering 1995, def. of compelled edges); the class is enumerated by brute force.
    #[test]
    fn cpdag_matches_brute_force_class() {
        for seed in 0..30u64 {
            let n = 4 + (seed % 3) as usize;
            let dag = random_dag(n, 0.5, seed);
            let cp = Graph::cpdag_of_dag(&dag);
            let class = brute_class(&dag);
            assert!(class.contains(&dag));
            for a in 0..n {
                for b in 0..n {
                    if !dag.is_adjacent(a, b) {
                        continue;
                    }
                    let always = class.iter().all(|d| d.is_directed(a, b));
                    assert_eq!(cp.is_directed(a, b), always, "seed {seed} edge {a}->{b}");
                }
            }
        }
    }

    // Textbook case: the sprinkler graph (Pearl 2009, fig. 1.2) 0 -> 1, 0 -> 2, 1 -> 3,
    // 2 -> 3, 3 -> 4 has CPDAG 0 - 1, 0 - 2, 1 -> 3 <- 2, 3 -> 4.
    #[test]
    fn cpdag_of_sprinkler_graph() {
        let dag = Graph::from_directed(5, &[(0, 1), (0, 2), (1, 3), (2, 3), (3, 4)]);
        let cp = Graph::cpdag_of_dag(&dag);
        assert!(cp.is_undirected(0, 1) && cp.is_undirected(0, 2));
        assert!(cp.is_directed(1, 3) && cp.is_directed(2, 3) && cp.is_directed(3, 4));
    }
}
