//! A builder for CLI cases: files in a fresh temporary folder, one command, then assertions.
//! `Case::new().spec(yaml).file("w1.csv", csv).run(["run", "spec.yaml"]).success()`.

use std::path::{Path, PathBuf};
use std::process::Command;

pub struct Case {
    dir: tempfile::TempDir,
}

pub struct Outcome {
    pub code: Option<i32>,
    pub stdout: String,
    pub stderr: String,
    dir: PathBuf,
}

impl Case {
    pub fn new() -> Case {
        Case { dir: tempfile::tempdir().expect("temporary folder") }
    }

    pub fn path(&self) -> &Path {
        self.dir.path()
    }

    /// Writes a file relative to the case folder, creating parent folders.
    pub fn file(self, name: &str, contents: impl AsRef<[u8]>) -> Case {
        let path = self.dir.path().join(name);
        if let Some(parent) = path.parent() {
            std::fs::create_dir_all(parent).unwrap();
        }
        std::fs::write(path, contents).unwrap();
        self
    }

    pub fn spec(self, yaml: &str) -> Case {
        self.file("spec.yaml", yaml)
    }

    /// Copies a folder of the repository (for example `pipelines/transit`) into the case.
    pub fn copy_dir(self, from_repo: &str, to: &str) -> Case {
        let src = Path::new(env!("CARGO_MANIFEST_DIR")).join(from_repo);
        copy_tree(&src, &self.dir.path().join(to));
        self
    }

    pub fn run<I, S>(&self, args: I) -> Outcome
    where
        I: IntoIterator<Item = S>,
        S: AsRef<std::ffi::OsStr>,
    {
        self.run_env(args, &[])
    }

    /// Runs with extra environment variables.
    pub fn run_env<I, S>(&self, args: I, env: &[(&str, &str)]) -> Outcome
    where
        I: IntoIterator<Item = S>,
        S: AsRef<std::ffi::OsStr>,
    {
        let mut cmd = Command::new(env!("CARGO_BIN_EXE_construe"));
        cmd.args(args).current_dir(self.dir.path());
        for (k, _) in std::env::vars() {
            if k.starts_with("CONSTRUE_") {
                cmd.env_remove(k);
            }
        }
        cmd.envs(env.iter().copied());
        let out = cmd.output().expect("run construe");
        Outcome {
            code: out.status.code(),
            stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
            stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
            dir: self.dir.path().to_path_buf(),
        }
    }

    pub fn read(&self, name: &str) -> String {
        std::fs::read_to_string(self.dir.path().join(name)).unwrap_or_else(|e| panic!("read {name}: {e}"))
    }

    pub fn exists(&self, name: &str) -> bool {
        self.dir.path().join(name).exists()
    }
}

fn copy_tree(src: &Path, dst: &Path) {
    std::fs::create_dir_all(dst).unwrap();
    for entry in std::fs::read_dir(src).unwrap() {
        let entry = entry.unwrap();
        let name = entry.file_name();
        if name == "reports" {
            continue;
        }
        let target = dst.join(&name);
        if entry.file_type().unwrap().is_dir() {
            copy_tree(&entry.path(), &target);
        } else {
            std::fs::copy(entry.path(), target).unwrap();
        }
    }
}

impl Outcome {
    fn show(&self) -> String {
        format!("exit {:?}\n--- stdout\n{}\n--- stderr\n{}", self.code, self.stdout, self.stderr)
    }

    pub fn success(&self) -> &Outcome {
        assert_eq!(self.code, Some(0), "expected success\n{}", self.show());
        self
    }

    pub fn failure(&self, code: i32) -> &Outcome {
        assert_eq!(self.code, Some(code), "expected exit {code}\n{}", self.show());
        self
    }

    pub fn stderr_contains(&self, text: &str) -> &Outcome {
        assert!(self.stderr.contains(text), "stderr lacks {text:?}\n{}", self.show());
        self
    }

    pub fn stderr_lacks(&self, text: &str) -> &Outcome {
        assert!(!self.stderr.contains(text), "stderr has {text:?}\n{}", self.show());
        self
    }

    pub fn stdout_contains(&self, text: &str) -> &Outcome {
        assert!(self.stdout.contains(text), "stdout lacks {text:?}\n{}", self.show());
        self
    }

    /// Asserts that no report version folder exists under `reports/`.
    pub fn no_report(&self) -> &Outcome {
        let reports = self.dir.join("reports");
        let found: Vec<String> = walk(&reports)
            .into_iter()
            .map(|p| p.display().to_string())
            .filter(|p| p.ends_with("report.html") || p.ends_with("manifest.json"))
            .collect();
        assert!(found.is_empty(), "unexpected report files {found:?}\n{}", self.show());
        self
    }
}

/// Every file under `dir` (recursively; none if it does not exist).
pub fn walk(dir: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    if let Ok(entries) = std::fs::read_dir(dir) {
        for e in entries.flatten() {
            let p = e.path();
            if p.is_dir() {
                out.extend(walk(&p));
            } else {
                out.push(p);
            }
        }
    }
    out
}

/// A small synthetic panel: two constructs of 3 five-point items each and one continuous
/// item, from a fixed pseudo-random sequence (no RNG crate needed: a 64-bit LCG, Knuth MMIX
/// constants), so tests get realistic correlated data.
pub fn synthetic_csv(rows: usize, seed: u64, columns: &[&str]) -> String {
    let mut state = seed.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
    let mut uniform = move || {
        state = state.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        ((state >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    };
    let mut normal = move || {
        // Box-Muller from two uniforms.
        let (u, v) = (uniform(), uniform());
        (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
    };
    let mut out = String::from("rid,");
    out.push_str(&columns.join(","));
    out.push('\n');
    for r in 0..rows {
        let f1 = normal();
        let f2 = 0.5 * f1 + 0.8 * normal();
        let mut fields = vec![format!("{}", r + 1)];
        for (k, _) in columns.iter().enumerate() {
            let latent = if k < 3 { f1 } else { f2 };
            let x = 0.8 * latent + 0.6 * normal();
            if k == columns.len() - 1 {
                fields.push(format!("{:.4}", x * 10.0 + 50.0));
            } else {
                let cat = (x * 1.2 + 3.0).round().clamp(1.0, 5.0);
                fields.push(format!("{cat}"));
            }
        }
        out.push_str(&fields.join(","));
        out.push('\n');
    }
    out
}

/// A spec over `synthetic_csv` columns a1..a3, b1..b3, x.
pub const SMALL_SPEC: &str = "construe: 1
title: Small panel
data:
  waves:
    - {id: w1, file: w1.csv}
  id_column: rid
constructs:
  alpha: {items: [a1, a2, a3]}
  beta: {items: [b1, b2, b3, x]}
analyses:
  covariance: {missing: pairwise}
";

pub const SMALL_COLUMNS: &[&str] = &["a1", "a2", "a3", "b1", "b2", "b3", "x"];

pub fn small_case() -> Case {
    Case::new().spec(SMALL_SPEC).file("w1.csv", synthetic_csv(200, 7, SMALL_COLUMNS))
}

/// The transit demo copied into a case; `replicates` replaces the spec's bootstrap count
/// (`None` removes resampling, which keeps ordinary tests fast).
pub fn demo_case(replicates: Option<usize>) -> Case {
    let case = Case::new().copy_dir("pipelines/transit", "pipelines/transit");
    let spec = case.read("pipelines/transit/spec.yaml");
    let line = spec.lines().find(|l| l.trim_start().starts_with("resample:")).map(str::to_string).unwrap_or_default();
    let spec = match replicates {
        Some(r) => spec.replace(&line, &format!("  resample:   {{replicates: {r}, seed: 11}}")),
        None => spec.replace(&format!("{line}\n"), ""),
    };
    // Fewer prior draws keep the test run short; the grid sweep stays as shipped.
    case.file("pipelines/transit/spec.yaml", spec.replace("draws: 200", "draws: 12"))
}
