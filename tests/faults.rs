//! Faults: a `run` killed with SIGKILL at any moment leaves no damaged cache entry and no
//! incomplete version folder (a version folder has its manifest, written last, or does not
//! exist); the next run completes.

use std::process::Command;
use std::time::Duration;

use construe::pipeline::cache::{Cache, Lookup};
use construe::pipeline::key::Key;

use crate::harness::demo_case;

fn cache_entries(dir: &std::path::Path) -> Vec<std::path::PathBuf> {
    let mut out = Vec::new();
    for shard in std::fs::read_dir(dir).into_iter().flatten().flatten() {
        for e in std::fs::read_dir(shard.path()).into_iter().flatten().flatten() {
            out.push(e.path());
        }
    }
    out
}

#[test]
fn sigkill_leaves_no_corrupt_cache_entry_or_partial_report() {
    // A fixed pseudo-random sequence of kill delays (64-bit LCG), so a failure can be replayed.
    let mut state: u64 = 0x5eed;
    let mut next_delay = move || {
        state = state.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        Duration::from_millis((state >> 33) % 900)
    };
    let mut case = demo_case(Some(30));
    let spec = case.read("pipelines/transit/spec.yaml");
    for round in 0..20 {
        // A new bootstrap seed each round, so every run has work left to be interrupted in.
        case = case.file("pipelines/transit/spec.yaml", spec.replace("seed: 11}", &format!("seed: {}}}", 100 + round)));
        let mut child = Command::new(env!("CARGO_BIN_EXE_construe"))
            .args(["run", "pipelines/transit/spec.yaml"])
            .current_dir(case.path())
            .env_remove("CONSTRUE_CACHE")
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(next_delay());
        let _ = child.kill();
        let _ = child.wait();
        let cache = Cache::at(case.path().join("cache"));
        for entry in cache_entries(&case.path().join("cache").join("v1")) {
            let name = entry.file_name().unwrap().to_string_lossy().into_owned();
            if name.starts_with(".partial-") {
                continue; // an unfinished temporary file, never read as an entry
            }
            let key = Key::parse(&name).unwrap_or_else(|| panic!("round {round}: stray file {name}"));
            assert!(!matches!(cache.get(&key), Lookup::Damaged { .. }), "round {round}: damaged entry {name}");
        }
        let root = case.path().join("reports").join("transit-rider-panel");
        for v in std::fs::read_dir(&root).into_iter().flatten().flatten() {
            let name = v.file_name().to_string_lossy().into_owned();
            if name.starts_with('v') {
                assert!(v.path().join("manifest.json").exists(), "round {round}: {name} has no manifest");
                assert!(v.path().join("report.html").exists(), "round {round}: {name} has no report");
            }
        }
    }
    case.run(["run", "pipelines/transit/spec.yaml"]).success();
    let root = case.path().join("reports").join("transit-rider-panel");
    let stale: Vec<String> = std::fs::read_dir(&root)
        .unwrap()
        .flatten()
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with(".partial"))
        .collect();
    assert!(stale.is_empty(), "staging folders left after a completed run: {stale:?}");
}
