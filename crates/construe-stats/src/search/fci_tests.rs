//! Tests of the FCI search: oracle checks on published graphs with hidden variables, a
//! brute-force soundness check on random DAGs with hidden nodes, agreement with PC when
//! nothing is hidden, knowledge, and the sample version.

use super::*;
use crate::search::ci::{DSepOracle, FisherZ};
use crate::search::graph::tests::random_dag;
use crate::search::pag::PagEdgeKind;
use crate::search::pc::{ColliderRule, PcOptions, pc};
use crate::testkit::{linear_gaussian_cov, sample_cov_of_draws, seeded};

fn run(test: &dyn CiTest, k: &Knowledge) -> FciResult {
    fci(test, k, &FciOptions { alpha: 0.01, ..FciOptions::default() }).unwrap()
}

/// FCI on the observed nodes of `dag` (`hidden` hidden) with an oracle, compared with the
/// expected PAG written from the source (observed nodes renumbered 0.. in ascending order).
fn check(name: &str, dag: Graph, hidden: &[usize], expected: &[(usize, &str, usize)]) {
    let oracle = HiddenDSepOracle::hiding(dag, hidden);
    let n = oracle.n_vars();
    let r = run(&oracle, &Knowledge::new(n));
    let want = Pag::from_symbols(n, expected);
    assert_eq!(r.pag, want, "{name}: got {}, expected {}", r.pag.describe(), want.describe());
    assert!(r.conflicts.is_empty(), "{name}: {:?}", r.conflicts);
}

// Examples from the literature, each named by the source of its graph (recalled from memory,
// figure numbers not given). Each expected PAG is derived by hand from the definitions
// (ancestral graph: Richardson & Spirtes 2002; PAG marks: Zhang 2008), never from this code's
// output; the derivation is in the comment. Indices are ours, hidden nodes last.

// 1. A hidden common cause between two variables that each have an independent cause: the
// canonical example of a bidirected edge in a PAG (Spirtes, Glymour & Scheines 2000, ch. 6;
// Zhang 2008, introduction). DAG A -> B <- L -> C <- D, L hidden; PAG A o-> B <-> C <-o D.
#[test]
fn oracle_instrumented_hidden_confounder() {
    let (a, b, c, d, l) = (0, 1, 2, 3, 4);
    let dag = Graph::from_directed(5, &[(a, b), (l, b), (l, c), (d, c)]);
    check("hidden confounder", dag, &[l], &[(a, "o->", b), (b, "<->", c), (d, "o->", c)]);
}

// 2. The Y-structure (Mani, Cooper & Spirtes 2006): W1 -> X <- W2, X -> Z. The tail of X -> Z
// is identified even when hidden variables are allowed; here a hidden L also causes Z and a
// fifth variable V, which only adds V o-> Z. PAG W1 o-> X <-o W2, X -> Z, V o-> Z.
#[test]
fn oracle_y_structure_with_hidden_cause_of_the_effect() {
    let (w1, w2, x, z, v, l) = (0, 1, 2, 3, 4, 5);
    let dag = Graph::from_directed(6, &[(w1, x), (w2, x), (x, z), (l, z), (l, v)]);
    check("Y-structure", dag, &[l], &[(w1, "o->", x), (w2, "o->", x), (x, "->", z), (v, "o->", z)]);
}

// 3. The discriminating path (Spirtes, Meek & Richardson 1995; rule R4 of Zhang 2008):
// D -> A <- L -> B, A -> C <- B with L hidden, so A <-> B in the ancestral graph. On the
// discriminating path <D, A, B, C> for B, B lies in the set separating D and C ({A, B}), so
// B -> C; R1 gives A -> C. B -> A is Markov equivalent to A <-> B, so the mark at B stays a
// circle. PAG D o-> A <-o B, A -> C, B -> C.
#[test]
fn oracle_discriminating_path() {
    let (d, a, b, c, l) = (0, 1, 2, 3, 4);
    let dag = Graph::from_directed(5, &[(d, a), (l, a), (l, b), (a, c), (b, c)]);
    check("discriminating path", dag, &[l], &[(d, "o->", a), (b, "o->", a), (a, "->", c), (b, "->", c)]);
}

// 4. The M-structure of "M-bias" (Greenland, Pearl & Robins 1999): A <- L1 -> M <- L2 -> Y
// with L1, L2 hidden. M is a collider of two hidden causes; its ancestral graph is
// A <-> M <-> Y and the PAG A o-> M <-o Y (A -> M would explain the same independences).
#[test]
fn oracle_m_structure() {
    let (a, m, y, l1, l2) = (0, 1, 2, 3, 4);
    let dag = Graph::from_directed(5, &[(l1, a), (l1, m), (l2, m), (l2, y)]);
    check("M-structure", dag, &[l1, l2], &[(a, "o->", m), (y, "o->", m)]);
}

// 5. An inducing path (Verma & Pearl 1990; Richardson & Spirtes 2002, section 4): X -> B <- L
// -> Y and B -> Y with L hidden. X and Y are not adjacent in the DAG, but no set of observed
// variables separates them (X -> B <- L -> Y is an inducing path: B is a collider and an
// ancestor of Y, L is hidden), so the PAG joins them. W -> X is separated from B and Y by X,
// so W-X-B and W-X-Y are non-colliders, X, B, Y form a triangle, and every mark stays a
// circle: W o-o X, X o-o B, B o-o Y, X o-o Y.
#[test]
fn oracle_inducing_path_keeps_an_edge_the_dag_lacks() {
    let (w, x, b, y, l) = (0, 1, 2, 3, 4);
    let dag = Graph::from_directed(5, &[(w, x), (x, b), (l, b), (l, y), (b, y)]);
    check("inducing path", dag, &[l], &[(w, "o-o", x), (x, "o-o", b), (b, "o-o", y), (x, "o-o", y)]);
}

// 6. Two hidden common causes in a row, each end with a cause of its own (the bidirected paths
// of Richardson & Spirtes 2002; this instance is ours): A -> B <- L1 -> C <- L2 -> D <- E.
// A and C, B and D, C and E are separated by the empty set, so B, C and D are colliders:
// PAG A o-> B <-> C <-> D <-o E.
#[test]
fn oracle_bidirected_chain() {
    let (a, b, c, d, e, l1, l2) = (0, 1, 2, 3, 4, 5, 6);
    let dag = Graph::from_directed(7, &[(a, b), (l1, b), (l1, c), (l2, c), (l2, d), (e, d)]);
    check("bidirected chain", dag, &[l1, l2], &[(a, "o->", b), (b, "<->", c), (c, "<->", d), (e, "o->", d)]);
}

// Without hidden variables, derived by hand from the rules' statements (Zhang 2008):
// E -> B <- A -> D <- F, B -> C <- D, A -> C. R0 gives the colliders at B, D and C; R1 orients
// B -> C and D -> C; R2 gives A *-> C; the tail at A then follows from the discriminating path
// <E, B, A, C> for A (R4: A is in the set separating E and C). PAG E o-> B <-o A,
// F o-> D <-o A, B -> C <- D, A -> C, as PC's CPDAG with circles at the three sources.
#[test]
fn oracle_two_colliders_and_a_discriminating_path() {
    let (a, b, c, d, e, f) = (0, 1, 2, 3, 4, 5);
    let dag = Graph::from_directed(6, &[(e, b), (a, b), (a, d), (f, d), (b, c), (d, c), (a, c)]);
    check(
        "two colliders",
        dag,
        &[],
        &[(e, "o->", b), (a, "o->", b), (f, "o->", d), (a, "o->", d), (b, "->", c), (d, "->", c), (a, "->", c)],
    );
}

// A graph that needs the Possible-D-SEP stage (constructed; derivation by hand): hidden L1
// causes X and U1, hidden L2 causes U2 and Y; V -> U1 -> Y, V -> U2 -> X. X and Y are separated
// only by {U1, U2, V}, and V is adjacent to neither, so no subset of X's or Y's adjacencies
// separates them and the edge survives the adjacency stage; V is in Possible-D-SEP(X) through
// the collider X *-> U1 <-* V. Separating sets are unique: {U2} for V, X; {U1} for V, Y; {V}
// for U1, U2. R0 gives colliders at X (U1, U2), Y (U1, U2), U1 (V, X) and U2 (V, Y); R1 turns
// U1 o-> Y and U2 o-> X into U1 -> Y and U2 -> X. PAG X <-> U1, U2 -> X, U1 -> Y, U2 <-> Y,
// V o-> U1, V o-> U2.
#[test]
fn oracle_possible_d_sep_removes_an_edge_the_adjacency_stage_keeps() {
    let (x, y, u1, u2, v, l1, l2) = (0, 1, 2, 3, 4, 5, 6);
    let edges = [(l1, x), (l1, u1), (l2, u2), (l2, y), (v, u1), (v, u2), (u1, y), (u2, x)];
    let dag = Graph::from_directed(7, &edges);
    check(
        "possible-d-sep",
        dag.clone(),
        &[l1, l2],
        &[(x, "<->", u1), (u2, "->", x), (u1, "->", y), (u2, "<->", y), (v, "o->", u1), (v, "o->", u2)],
    );
    let oracle = HiddenDSepOracle::hiding(dag, &[l1, l2]);
    let r = run(&oracle, &Knowledge::new(5));
    let xy = r.removed.iter().find(|rem| (rem.a, rem.b) == (x, y)).unwrap();
    assert_eq!((xy.stage, xy.sepset.clone()), (Stage::PossibleDSep, vec![u1, u2, v]));
    let without =
        fci(&oracle, &Knowledge::new(5), &FciOptions { alpha: 0.01, possible_dsep: false, ..FciOptions::default() })
            .unwrap();
    assert!(without.pag.is_adjacent(x, y));
}

/// Runs the rules on a hand-made PAG (no separating sets) and returns it with the log.
fn close(edges: &[(usize, &str, usize)], n: usize) -> (Pag, Vec<MarkSet>) {
    let mut o = crate::search::fci_rules::Orienter::keeping(Pag::from_symbols(n, edges));
    o.close();
    (o.g, o.marks)
}

// R8, R9 and R10 on the smallest configurations their statements describe (Zhang 2008,
// section 4), each expected result read off the rule.
#[test]
fn rules_eight_to_ten_orient_tails() {
    // R8: a -> b -> c and a o-> c => a -> c; and with a -o b
    let (g, log) = close(&[(0, "->", 1), (1, "->", 2), (0, "o->", 2)], 3);
    assert!(g.is_directed(0, 2));
    assert_eq!(log, vec![MarkSet { other: 2, at: 0, mark: Mark::Tail, reason: MarkReason::Rule(8) }]);
    let (g, _) = close(&[(0, "-o", 1), (1, "->", 2), (0, "o->", 2)], 3);
    assert!(g.is_directed(0, 2));
    // R9: a o-> c with the uncovered p.d. path <a, b, x, c>, b and c non-adjacent => a -> c
    // (and, by the same rule on <x, b, a, c>, x -> c)
    let (a, c, b, x) = (0, 1, 2, 3);
    let (g, log) = close(&[(a, "o->", c), (a, "o-o", b), (b, "o-o", x), (x, "o->", c)], 4);
    assert!(g.is_directed(a, c) && g.is_directed(x, c));
    assert!(log.iter().all(|m| m.reason == MarkReason::Rule(9)));
    assert_eq!(g.mark(a, b), Some(Mark::Circle));
    // R10: a o-> c, b -> c <- d, paths <a, b> and <a, d> with b, d non-adjacent => a -> c
    let (a, b, c, d) = (0, 1, 2, 3);
    let (g, log) = close(&[(a, "o->", c), (b, "->", c), (d, "->", c), (a, "o->", b), (a, "o->", d)], 4);
    assert!(g.is_directed(a, c));
    assert_eq!(log, vec![MarkSet { other: c, at: a, mark: Mark::Tail, reason: MarkReason::Rule(10) }]);
    // R10 needs the two first nodes non-adjacent: with b - d joined nothing changes
    let (g, _) = close(&[(a, "o->", c), (b, "->", c), (d, "->", c), (a, "o->", b), (a, "o->", d), (b, "o-o", d)], 4);
    assert_eq!(g.mark(c, a), Some(Mark::Circle));
}

// R5-R7 concern selection bias only (Zhang 2008): an uncovered circle cycle a o-o c o-o d o-o
// b o-o a becomes undirected (R5); a - b o-* c gives b -* c (R6); a -o b o-* c with a, c
// non-adjacent gives b -* c (R7).
#[test]
fn rules_five_to_seven_for_selection() {
    let (g, log) = close(&[(0, "o-o", 1), (1, "o-o", 2), (2, "o-o", 3), (3, "o-o", 0)], 4);
    for (p, q) in [(0, 1), (1, 2), (2, 3), (3, 0)] {
        assert_eq!((g.mark(p, q), g.mark(q, p)), (Some(Mark::Tail), Some(Mark::Tail)));
    }
    assert!(log.iter().all(|m| m.reason == MarkReason::Rule(5)));
    let (g, _) = close(&[(0, "-", 1), (1, "o-o", 2), (0, "o-o", 2)], 3);
    assert_eq!(g.mark(2, 1), Some(Mark::Tail));
    let (g, log) = close(&[(0, "-o", 1), (1, "o->", 2)], 3);
    assert_eq!(g.mark(2, 1), Some(Mark::Tail));
    assert_eq!(log[0].reason, MarkReason::Rule(7));
}

/// The ancestral relations of a DAG: anc[a][b] when a is an ancestor of b (a != b).
fn ancestors(dag: &Graph) -> Vec<Vec<bool>> {
    let n = dag.n();
    (0..n).map(|a| (0..n).map(|b| a != b && dag.has_directed_path(a, b)).collect()).collect()
}

// Soundness on random DAGs with hidden nodes, against brute force (Richardson & Spirtes 2002):
// two observed nodes are adjacent in the ancestral graph iff no set of other observed nodes
// d-separates them; an arrowhead at b on a *-> b is correct iff b is not an ancestor of a, a
// tail at a iff a is an ancestor of b. The PAG's skeleton must equal the ancestral graph's,
// and every non-circle mark must hold. (Graphs that need the Possible-D-SEP stage are rare
// among small random DAGs; `oracle_possible_d_sep_removes_an_edge_the_adjacency_stage_keeps`
// covers that stage.)
#[test]
fn oracle_pag_is_sound_on_random_graphs_with_hidden_nodes() {
    let mut arrows = 0;
    let mut tails = 0;
    for seed in 0..60u64 {
        let n = 7 + (seed % 3) as usize;
        let dag = random_dag(n, 0.35, 5000 + seed);
        let hidden = [0, 1];
        let oracle = HiddenDSepOracle::hiding(dag.clone(), &hidden);
        let obs: Vec<usize> = (2..n).collect();
        let m = obs.len();
        let r = run(&oracle, &Knowledge::new(m));
        let anc = ancestors(&dag);
        for i in 0..m {
            for j in (i + 1)..m {
                let others: Vec<usize> = (0..m).filter(|&k| k != i && k != j).collect();
                let separable = (0..=others.len())
                    .any(|l| combinations(&others, l).iter().any(|s| oracle.test(i, j, s).unwrap().p > 0.5));
                assert_eq!(r.pag.is_adjacent(i, j), !separable, "seed {seed}: adjacency {i} {j}");
            }
        }
        for e in &r.edges {
            let (a, b) = (obs[e.from], obs[e.to]);
            let check_mark = |at: usize, other: usize, mark: Mark| match mark {
                Mark::Arrow => assert!(!anc[at][other], "seed {seed}: arrowhead at {at} but it causes {other}"),
                Mark::Tail => assert!(anc[at][other], "seed {seed}: tail at {at} but it does not cause {other}"),
                Mark::Circle => {}
            };
            check_mark(b, a, e.mark_to);
            check_mark(a, b, e.mark_from);
            arrows += [e.mark_from, e.mark_to].iter().filter(|&&k| k == Mark::Arrow).count();
            tails += [e.mark_from, e.mark_to].iter().filter(|&&k| k == Mark::Tail).count();
        }
        assert!(r.conflicts.is_empty(), "seed {seed}: {:?}", r.conflicts);
    }
    assert!(arrows > 50 && tails > 10, "too few marks to test: {arrows} arrowheads, {tails} tails");
}

// Without hidden variables FCI and PC agree (Spirtes, Glymour & Scheines 2000, ch. 6: the PAG
// of a DAG represents its Markov equivalence class): same skeleton, no bidirected edge, and
// every tail or arrowhead of the PAG matches a directed edge of PC's CPDAG.
#[test]
fn without_hidden_variables_fci_is_consistent_with_pc() {
    for seed in 0..20u64 {
        let dag = random_dag(5 + (seed % 4) as usize, 0.4, 1000 + seed);
        let oracle = DSepOracle::new(dag.clone());
        let k = Knowledge::new(dag.n());
        let f = run(&oracle, &k);
        let p = pc(&oracle, &k, &PcOptions { alpha: 0.01, max_cond: None, colliders: ColliderRule::Standard }).unwrap();
        assert_eq!(f.pag.edge_count(), p.graph.edge_count(), "seed {seed}");
        for e in &f.edges {
            assert!(p.graph.is_adjacent(e.from, e.to), "seed {seed}");
            assert_ne!(e.kind, PagEdgeKind::Bidirected, "seed {seed}");
            if e.mark_to == Mark::Arrow {
                assert!(p.graph.is_directed(e.from, e.to), "seed {seed}: {}", e.symbol());
            }
            if e.mark_from == Mark::Tail {
                assert!(p.graph.is_directed(e.from, e.to), "seed {seed}: {}", e.symbol());
            }
        }
    }
}

// Knowledge as marks (documented in `fci`): on the hidden-confounder graph, tiers [A], [B]
// put an arrowhead at B (already there) and nothing at A; tiers [B, C], [A, D] put arrowheads
// at A and D, making A <-> B and C <-> D (the later construct is not a cause of the earlier).
// Requiring D -> C gives D -> C. Forbidding A -> B gives A <-> B. A pair forbidden both ways
// that the data join stays joined (as <->), unlike in PC.
#[test]
fn knowledge_sets_marks() {
    let (a, b, c, d, l) = (0, 1, 2, 3, 4);
    let oracle = HiddenDSepOracle::hiding(Graph::from_directed(5, &[(a, b), (l, b), (l, c), (d, c)]), &[l]);
    let mut k = Knowledge::new(4);
    k.set_tiers(&[vec![b, c], vec![a, d]]).unwrap();
    let r = run(&oracle, &k);
    assert_eq!(r.pag, Pag::from_symbols(4, &[(a, "<->", b), (b, "<->", c), (d, "<->", c)]), "{}", r.pag.describe());
    assert!(r.marks.iter().any(|m| m.at == a && m.reason == MarkReason::Tier));

    let mut k = Knowledge::new(4);
    k.require(d, c).unwrap();
    let r = run(&oracle, &k);
    assert_eq!(r.pag, Pag::from_symbols(4, &[(a, "o->", b), (b, "<->", c), (d, "->", c)]), "{}", r.pag.describe());

    let mut k = Knowledge::new(4);
    k.forbid(a, b).unwrap();
    let r = run(&oracle, &k);
    assert_eq!(r.pag.mark(b, a), Some(Mark::Arrow));
    assert_eq!(r.marks.iter().find(|m| m.at == a).unwrap().reason, MarkReason::Forbidden);

    let mut k = Knowledge::new(4);
    k.forbid(b, c).unwrap();
    k.forbid(c, b).unwrap();
    let r = run(&oracle, &k);
    assert!(r.pag.is_adjacent(b, c));
    assert_eq!(r.edges.iter().find(|e| (e.from, e.to) == (b, c)).unwrap().kind, PagEdgeKind::Bidirected);
}

// A required edge keeps a pair the data separate, and a collider that would put an arrowhead
// where the knowledge put a tail is logged as a conflict with the knowledge's mark kept.
#[test]
fn required_edge_against_a_collider_is_a_conflict() {
    // A -> B <- C: collider at B; requiring B -> A puts a tail at B
    let oracle = HiddenDSepOracle::hiding(Graph::from_directed(3, &[(0, 1), (2, 1)]), &[]);
    let mut k = Knowledge::new(3);
    k.require(1, 0).unwrap();
    let r = run(&oracle, &k);
    assert!(r.pag.is_directed(1, 0));
    assert_eq!(
        r.conflicts,
        vec![MarkConflict { other: 0, at: 1, wanted: Mark::Arrow, kept: Mark::Tail, reason: MarkReason::Collider }]
    );
    let mut k = Knowledge::new(3);
    k.require(0, 2).unwrap();
    let r = run(&oracle, &k);
    assert!(r.pag.is_directed(0, 2));
}

// The sample version: a hidden common cause of two constructs, each with its own cause, at a
// large n is found as <-> (Fisher-z on draws from a linear Gaussian model of the DAG).
#[test]
fn sample_version_finds_the_hidden_confounder() {
    let (a, b, c, d, l) = (0, 1, 2, 3, 4);
    let dag = Graph::from_directed(5, &[(a, b), (l, b), (l, c), (d, c)]);
    let sigma = linear_gaussian_cov(&dag, 3);
    let s = sample_cov_of_draws(&sigma, 5000, &mut seeded(4));
    let obs = s.view((0, 0), (4, 4)).into_owned();
    let r = run(&FisherZ::new(obs, 5000.0).unwrap(), &Knowledge::new(4));
    assert_eq!(r.pag, Pag::from_symbols(4, &[(a, "o->", b), (b, "<->", c), (d, "o->", c)]), "{}", r.pag.describe());
    assert!(r.tests_run > 0);
}

#[test]
fn bad_input_is_rejected() {
    let oracle = HiddenDSepOracle::hiding(Graph::new(3), &[]);
    assert!(fci(&oracle, &Knowledge::new(3), &FciOptions { alpha: 0.0, ..FciOptions::default() }).is_err());
    assert!(matches!(fci(&oracle, &Knowledge::new(2), &FciOptions::default()), Err(StatsError::SizeMismatch { .. })));
    assert!(HiddenDSepOracle::new(Graph::new(3), vec![0, 0]).is_err());
    assert!(HiddenDSepOracle::new(Graph::new(3), vec![3]).is_err());
    assert!(oracle.test(0, 0, &[]).is_err());
}

#[test]
fn possible_d_sep_follows_colliders_and_triangles() {
    // 0 *-> 1 <-* 2 *-* 3: 2 is reachable from 0 through the collider at 1, 3 is not (2 is not a
    // collider on <1, 2, 3> and 1, 3 are not adjacent)
    let g = Pag::from_symbols(4, &[(0, "o->", 1), (2, "o->", 1), (2, "o-o", 3)]);
    assert_eq!(possible_d_sep(&g, 0), vec![1, 2]);
    let g = Pag::from_symbols(4, &[(0, "o-o", 1), (1, "o-o", 2), (0, "o-o", 2), (2, "o-o", 3)]);
    assert_eq!(possible_d_sep(&g, 0), vec![1, 2]);
    let g = Pag::from_symbols(4, &[(0, "o-o", 1), (1, "o-o", 2), (0, "o-o", 2), (2, "o-o", 3), (1, "o-o", 3)]);
    assert_eq!(possible_d_sep(&g, 0), vec![1, 2, 3]);
}
