//! Causal search among latent constructs: conditional-independence tests (`ci`), background
//! knowledge (`knowledge`), the stable PC search (`pc`), Meek's orientation rules (`meek`), the
//! graph type with CPDAG and d-separation (`graph`), and enumeration of an equivalence class
//! (`enumerate`). Central entry point: `pc::pc`, which returns a `PcResult`.
//! Everything works on node indices and matrices; names, specs and reports live elsewhere.

pub mod ci;
pub mod conflicts;
pub mod enumerate;
pub mod graph;
pub mod knowledge;
pub mod meek;
pub mod pc;

pub use ci::{CiResult, CiTest, DSepOracle, FisherZ, WaldPartial};
pub use conflicts::{TripleConflict, TripleConflictKind, triple_conflicts};
pub use enumerate::{Enumeration, enumerate_dags};
pub use graph::{Edge, EdgeKind, Graph, Link};
pub use knowledge::{Knowledge, KnowledgeError};
pub use meek::MeekOrientation;
pub use pc::{
    ColliderRule, Conflict, ConflictKind, PcEdge, PcOptions, PcResult, Reason, Removed, Triple, TripleKind, pc,
};
