//! Robustness: thousands of mutated specs and data files (seeded byte flips, deletions,
//! insertions and truncations of the demo's own files) never make the parser or the loader
//! panic; each input either parses or yields a diagnostic. Not coverage-guided fuzzing, but
//! it runs on the stable toolchain in every test run.

use std::panic::{AssertUnwindSafe, catch_unwind};
use std::path::Path;

use construe::data::{column_names, read_numeric_columns};
use construe::spec::SpecFile;

/// A 64-bit LCG (Knuth's MMIX constants): reproducible mutations without an RNG crate.
struct Lcg(u64);

impl Lcg {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        self.0 >> 11
    }
    fn below(&mut self, n: usize) -> usize {
        (self.next() % n.max(1) as u64) as usize
    }
}

/// Multiplies the case counts; `ROBUSTNESS_SCALE=20 cargo test --release --test main robustness`
/// runs a long session.
fn scale() -> usize {
    std::env::var("ROBUSTNESS_SCALE").ok().and_then(|s| s.parse().ok()).unwrap_or(1)
}

const NASTY: &[&[u8]] = &[
    b"\"", b"'", b"{", b"}", b"[", b"]", b":", b",", b"-", b"\n", b"\t", b"&a", b"*a", b"!!", b"NaN", b"1e999",
    b"\xff", b"#", b"|", b">", b"\r\n", b"\x00",
];

fn mutate(rng: &mut Lcg, original: &[u8]) -> Vec<u8> {
    let mut b = original.to_vec();
    for _ in 0..1 + rng.below(4) {
        if b.is_empty() {
            break;
        }
        let at = rng.below(b.len());
        match rng.below(5) {
            0 => b[at] ^= 1 << rng.below(8),
            1 => {
                let end = (at + 1 + rng.below(8)).min(b.len());
                b.drain(at..end);
            }
            2 => {
                let piece = NASTY[rng.below(NASTY.len())];
                b.splice(at..at, piece.iter().copied());
            }
            3 => b.truncate(at),
            _ => {
                let from = rng.below(b.len());
                let len = rng.below(16).min(b.len() - from);
                let chunk: Vec<u8> = b[from..from + len].to_vec();
                b.splice(at..at, chunk);
            }
        }
    }
    b
}

#[test]
fn mutated_specs_never_panic() {
    let demo = std::fs::read(Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines/transit/spec.yaml")).unwrap();
    let mut rng = Lcg(17);
    let mut parsed = 0;
    for i in 0..3000 * scale() {
        let bytes = mutate(&mut rng, &demo);
        let text = String::from_utf8_lossy(&bytes).into_owned();
        let result = catch_unwind(AssertUnwindSafe(|| {
            SpecFile::parse(Path::new("spec.yaml"), text.clone()).map(|s| s.spec.title.len())
        }));
        match result {
            Ok(Ok(_)) => parsed += 1,
            Ok(Err(report)) => assert!(report.has_errors(), "case {i}: a refused spec must carry an error"),
            Err(_) => panic!("case {i}: the spec parser panicked on:\n{text}"),
        }
    }
    assert!(parsed > 0, "some mutations should still parse");
}

#[test]
fn mutated_data_files_never_panic() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines/transit/data");
    let dir = tempfile::tempdir().unwrap();
    let items: Vec<String> = ["cr1", "pu4", "tr3", "fare_share"].iter().map(|s| s.to_string()).collect();
    let mut rng = Lcg(23);
    for (name, count) in [("riders-spring.csv", 600), ("riders-autumn.parquet", 300)] {
        let original = std::fs::read(root.join(name)).unwrap();
        for i in 0..count * scale() {
            let path = dir.path().join(name);
            std::fs::write(&path, mutate(&mut rng, &original)).unwrap();
            let result = catch_unwind(AssertUnwindSafe(|| {
                let _ = column_names(&path);
                let _ = read_numeric_columns(&path, &items);
            }));
            assert!(result.is_ok(), "{name} case {i}: the loader panicked");
        }
    }
}

#[test]
fn a_footer_that_declares_a_huge_list_is_a_diagnostic_not_an_abort() {
    // Found by the parquet_loader fuzz target: a mutated demo wave whose footer declares a list
    // so long that polars asked for 64 GB and the process aborted. It must be refused first.
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/damaged-footer.parquet");
    let err = column_names(&path).unwrap_err().to_string();
    assert!(err.contains("damaged-footer.parquet") && err.contains("damaged Parquet footer"), "{err}");
    let items = vec!["cr1".to_string()];
    let err = read_numeric_columns(&path, &items).unwrap_err().to_string();
    assert!(err.contains("damaged Parquet footer"), "{err}");
}
