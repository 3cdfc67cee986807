//! Causal search among latent constructs: conditional-independence tests (`ci`), background
//! knowledge (`knowledge`), the stable PC search (`pc`), Meek's orientation rules (`meek`), the
//! graph type with CPDAG and d-separation (`graph`), and enumeration of an equivalence class
//! (`enumerate`); the FCI search for hidden common causes (`fci`, rules in `fci_rules`) and its
//! partial ancestral graphs (`pag`). Central entry points: `pc::pc`, which returns a
//! `PcResult`, and `fci::fci`, which returns an `FciResult`.
//! Everything works on node indices and matrices; names, specs and reports live elsewhere.

pub mod ci;
pub mod conflicts;
pub mod enumerate;
pub mod fci;
mod fci_rules;
pub mod graph;
pub mod knowledge;
pub mod meek;
pub mod pag;
pub mod pc;

pub use ci::{CiResult, CiTest, DSepOracle, FisherZ, WaldPartial};
pub use conflicts::{TripleConflict, TripleConflictKind, triple_conflicts};
pub use enumerate::{Enumeration, enumerate_dags};
pub use fci::{FciOptions, FciResult, HiddenDSepOracle, MarkReason, fci};
pub use graph::{Edge, EdgeKind, Graph, Link};
pub use knowledge::{Knowledge, KnowledgeError};
pub use meek::MeekOrientation;
pub use pag::{Mark, Pag, PagEdge, PagEdgeKind};
pub use pc::{
    ColliderRule, Conflict, ConflictKind, PcEdge, PcOptions, PcResult, Reason, Removed, Triple, TripleKind, pc,
};
