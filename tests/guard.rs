//! Promises kept under abuse (issue 13, items 6-11): special files named as spec, model or
//! manifest, or found in the cache, are refused or replaced without blocking; the run lock
//! meets every spelling of a report folder and leaves nothing behind; reports and results
//! disclose no single respondent's value; spec text cannot inject Markdown, HTML or invisible
//! direction changes. Every command here runs under a time-out, so a regression fails
//! instead of hanging.

use std::io::Read;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use crate::harness::{Case, SMALL_COLUMNS, SMALL_SPEC, small_case, synthetic_csv};

/// Longest any command here may take before it counts as hanging.
const TIMEOUT: Duration = Duration::from_secs(8);

struct Ran {
    code: Option<i32>,
    stdout: String,
    stderr: String,
}

impl Ran {
    fn show(&self) -> String {
        format!("exit {:?}\n--- stdout\n{}\n--- stderr\n{}", self.code, self.stdout, self.stderr)
    }

    fn code(&self, code: i32) -> &Ran {
        assert_eq!(self.code, Some(code), "expected exit {code}\n{}", self.show());
        self
    }

    fn stderr_has(&self, text: &str) -> &Ran {
        assert!(self.stderr.contains(text), "stderr lacks {text:?}\n{}", self.show());
        self
    }
}

/// Runs `construe` in `dir`, killing it (and failing the test) if it outlives `TIMEOUT`.
fn run_in(dir: &Path, args: &[&str], env: &[(&str, &str)]) -> Ran {
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_construe"));
    cmd.args(args).current_dir(dir).stdin(Stdio::null()).stdout(Stdio::piped()).stderr(Stdio::piped());
    for (k, _) in std::env::vars() {
        if k.starts_with("CONSTRUE_") {
            cmd.env_remove(k);
        }
    }
    cmd.envs(env.iter().copied());
    let mut child = cmd.spawn().expect("start construe");
    let drain = |mut r: Box<dyn Read + Send>| {
        std::thread::spawn(move || {
            let mut s = String::new();
            let _ = r.read_to_string(&mut s);
            s
        })
    };
    let out = drain(Box::new(child.stdout.take().unwrap()));
    let err = drain(Box::new(child.stderr.take().unwrap()));
    let started = Instant::now();
    let status = loop {
        if let Some(status) = child.try_wait().unwrap() {
            break status;
        }
        if started.elapsed() > TIMEOUT {
            let _ = child.kill();
            let _ = child.wait();
            panic!("`construe {}` still running after {TIMEOUT:?}: it blocks", args.join(" "));
        }
        std::thread::sleep(Duration::from_millis(20));
    };
    Ran { code: status.code(), stdout: out.join().unwrap(), stderr: err.join().unwrap() }
}

fn mkfifo(path: &Path) {
    let _ = std::fs::remove_file(path);
    let ok = Command::new("mkfifo").arg(path).status().expect("mkfifo").success();
    assert!(ok, "mkfifo {}", path.display());
}

fn link_to_dev_zero(path: &Path) {
    let _ = std::fs::remove_file(path);
    std::os::unix::fs::symlink("/dev/zero", path).unwrap();
}

// ---------------------------------------------------------------- item 6: special files

#[test]
fn fifo_or_device_as_spec_is_refused_by_every_command() {
    let case = Case::new();
    let spec = case.path().join("spec.yaml");
    for make in [mkfifo as fn(&Path), link_to_dev_zero] {
        make(&spec);
        for command in ["check", "run", "plan"] {
            run_in(case.path(), &[command, "spec.yaml"], &[])
                .code(1)
                .stderr_has("cannot read spec file `spec.yaml`")
                .stderr_has("construe reads only regular files")
                .stderr_has("hint: name the file itself");
        }
    }
    assert!(!case.exists("reports"), "nothing written");
}

#[test]
fn fifo_as_spec_is_refused_by_verify() {
    let case = small_case();
    case.run(["run", "spec.yaml"]).success();
    mkfifo(&case.path().join("spec.yaml"));
    run_in(case.path(), &["verify", "reports/small-panel/v1"], &[]).code(1).stderr_has("named pipe (FIFO)");
}

#[test]
fn fifo_or_device_as_simulation_model_is_refused() {
    let case = Case::new();
    let model = case.path().join("model.yaml");
    for (make, kind) in [(mkfifo as fn(&Path), "a named pipe (FIFO)"), (link_to_dev_zero, "a device")] {
        make(&model);
        run_in(case.path(), &["simulate", "model.yaml", "--out", "out.csv"], &[])
            .code(1)
            .stderr_has("cannot read model file `model.yaml`")
            .stderr_has(kind)
            .stderr_has("hint: name the file itself");
    }
    assert!(!case.exists("out.csv"));
}

#[test]
fn fifo_or_device_in_a_version_folder_is_refused_by_diff() {
    let case = small_case();
    case.run(["run", "spec.yaml"]).success();
    let other = case.path().join("other");
    std::fs::create_dir(&other).unwrap();
    std::fs::copy(case.path().join("reports/small-panel/v1/results.json"), other.join("results.json")).unwrap();
    mkfifo(&other.join("manifest.json"));
    run_in(case.path(), &["diff", "reports/small-panel/v1", "other"], &[])
        .code(1)
        .stderr_has("other/manifest.json")
        .stderr_has("named pipe (FIFO)")
        .stderr_has("hint:");
    link_to_dev_zero(&other.join("results.json"));
    run_in(case.path(), &["diff", "reports/small-panel/v1", "other"], &[])
        .code(1)
        .stderr_has("other/results.json")
        .stderr_has("a device");
}

/// Every file of the cache (entries only, not folders).
fn cache_entries(root: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    for format in std::fs::read_dir(root).unwrap().flatten() {
        for prefix in std::fs::read_dir(format.path()).unwrap().flatten() {
            for entry in std::fs::read_dir(prefix.path()).unwrap().flatten() {
                out.push(entry.path());
            }
        }
    }
    out.sort();
    out
}

/// Runs the small case, damages every cache entry with `damage`, and checks that the next run
/// warns, recomputes every step, repairs the entries and finds the results unchanged.
fn recovers_from_damaged_entries(damage: impl Fn(&Path)) {
    let case = small_case();
    case.run(["run", "spec.yaml"]).success();
    let cache = case.path().join("cache");
    let entries = cache_entries(&cache);
    assert_eq!(entries.len(), 2, "load and covariance");
    for e in &entries {
        damage(e);
    }
    // `plan` looks without touching: nothing counts as cached, nothing blocks.
    let plan = run_in(case.path(), &["plan", "spec.yaml"], &[]);
    plan.code(0);
    assert_eq!(plan.stdout.matches("not in the cache (computed for v1)").count(), 2, "{}", plan.show());
    let second = run_in(case.path(), &["run", "spec.yaml"], &[]);
    second.code(0).stderr_has("recomputing").stderr_has("nothing changed since v1");
    assert_eq!(second.stderr.matches("load         computed").count(), 1, "{}", second.show());
    assert_eq!(second.stderr.matches("covariance   computed").count(), 1, "{}", second.show());
    for e in &entries {
        assert!(std::fs::symlink_metadata(e).unwrap().is_file(), "{} repaired", e.display());
    }
    // And the run after that is served from the repaired cache.
    let third = run_in(case.path(), &["run", "spec.yaml"], &[]);
    third.code(0);
    assert!(!third.stderr.contains("computed"), "{}", third.show());
    run_in(case.path(), &["verify", "reports/small-panel/v1"], &[]).code(0);
}

#[test]
fn fifo_cache_entry_is_replaced_without_blocking() {
    recovers_from_damaged_entries(mkfifo);
}

#[test]
fn device_cache_entry_is_replaced_without_reading_forever() {
    recovers_from_damaged_entries(link_to_dev_zero);
}

#[test]
fn folder_in_place_of_a_cache_entry_is_replaced() {
    recovers_from_damaged_entries(|e| {
        std::fs::remove_file(e).unwrap();
        std::fs::create_dir_all(e.join("inside")).unwrap();
    });
}

#[test]
fn file_in_place_of_a_cache_folder_is_replaced() {
    recovers_from_damaged_entries(|e| {
        let folder = e.parent().unwrap();
        if folder.is_dir() {
            std::fs::remove_dir_all(folder).unwrap();
            std::fs::write(folder, b"not a folder").unwrap();
        }
    });
}

// ---------------------------------------------------------------- items 7, 8: the run lock

/// The small case with its spec and data in `D/`.
fn nested_case() -> Case {
    Case::new().file("D/spec.yaml", SMALL_SPEC).file("D/w1.csv", synthetic_csv(200, 7, SMALL_COLUMNS))
}

#[test]
fn lock_meets_every_spelling_of_the_report_folder() {
    let case = nested_case();
    let base = case.path();
    std::os::unix::fs::symlink(base.join("D"), base.join("L")).unwrap();
    // Held through a symbolic link, as another run started from elsewhere would.
    let held = construe::pipeline::lock::RunLock::acquire(&base.join("L/reports/small-panel")).unwrap();
    let absolute = base.join("D/spec.yaml").display().to_string();
    let spellings: [(&Path, &str); 4] = [
        (&base.join("D"), "spec.yaml"),
        (base, "D/spec.yaml"),
        (base, &absolute),
        (&base.join("L"), "../D/./spec.yaml"),
    ];
    for (cwd, spec) in spellings {
        run_in(cwd, &["run", spec], &[]).code(1).stderr_has("another `construe run` is writing");
    }
    assert!(!base.join("D/reports/small-panel/v1").exists());
    drop(held);
    run_in(&base.join("D"), &["run", "spec.yaml"], &[]).code(0).stderr_has("wrote report v1");
}

#[test]
fn runs_leave_nothing_in_the_temp_folder_and_release_the_lock() {
    let case = small_case();
    let tmp = case.path().join("tmp");
    std::fs::create_dir(&tmp).unwrap();
    let tmp_s = tmp.display().to_string();
    let env = [("TMPDIR", tmp_s.as_str())];
    run_in(case.path(), &["run", "spec.yaml"], &env).code(0);
    std::fs::write(case.path().join("spec.yaml"), SMALL_SPEC.replace("pairwise", "listwise")).unwrap();
    run_in(case.path(), &["run", "spec.yaml"], &env).code(0).stderr_has("wrote report v2");
    let left: Vec<_> = std::fs::read_dir(&tmp).unwrap().flatten().map(|e| e.path()).collect();
    assert!(left.is_empty(), "left in the temp folder: {left:?}");
    let root = case.path().join("reports/small-panel");
    let mut names: Vec<String> =
        std::fs::read_dir(&root).unwrap().flatten().map(|e| e.file_name().to_string_lossy().into_owned()).collect();
    names.sort();
    assert_eq!(names, ["v1", "v2"], "only the versions remain in the report folder");
    // Released: the library takes it at once.
    drop(construe::pipeline::lock::RunLock::acquire(&root).unwrap());
}

#[test]
fn a_failed_run_leaves_no_report_folder() {
    // A constant item fails `load` after the lock was taken.
    let csv = synthetic_csv(60, 3, SMALL_COLUMNS);
    let mut lines: Vec<String> = csv.lines().map(str::to_string).collect();
    for line in lines.iter_mut().skip(1) {
        let mut fields: Vec<&str> = line.split(',').collect();
        fields[1] = "3";
        *line = fields.join(",");
    }
    let case = Case::new().spec(SMALL_SPEC).file("w1.csv", lines.join("\n") + "\n");
    run_in(case.path(), &["run", "spec.yaml"], &[]).code(1).stderr_has("a1");
    assert!(!case.exists("reports"), "no empty report folder after a failed run");
}

// ---------------------------------------------------------------- item 10: privacy

const EXTREME: &str = "987654.321";

/// The small panel with one respondent's `x` set to a unique extreme and one respondent's `a1`
/// set to a level nobody else gave (7 on a 1-5 scale).
fn privacy_case() -> Case {
    let csv = synthetic_csv(200, 7, SMALL_COLUMNS);
    let mut lines: Vec<String> = csv.lines().map(str::to_string).collect();
    let set = |line: &mut String, column: usize, value: &str| {
        let mut fields: Vec<String> = line.split(',').map(str::to_string).collect();
        fields[column] = value.to_string();
        *line = fields.join(",");
    };
    set(&mut lines[17], 7, EXTREME);
    set(&mut lines[5], 1, "7");
    Case::new().spec(SMALL_SPEC).file("w1.csv", lines.join("\n") + "\n")
}

fn numbers(v: &serde_json::Value, out: &mut Vec<f64>) {
    match v {
        serde_json::Value::Number(n) => out.extend(n.as_f64()),
        serde_json::Value::Array(a) => a.iter().for_each(|x| numbers(x, out)),
        serde_json::Value::Object(m) => m.values().for_each(|x| numbers(x, out)),
        _ => {}
    }
}

#[test]
fn no_single_respondents_value_in_results_reports_or_manifest() {
    let case = privacy_case();
    run_in(case.path(), &["run", "spec.yaml"], &[]).code(0);
    let dir = "reports/small-panel/v1";
    for file in ["results.json", "report.html", "report.md", "manifest.json"] {
        let text = case.read(&format!("{dir}/{file}"));
        assert!(!text.contains("987654"), "the extreme answer appears in {file}");
        assert!(!text.contains("987,654"), "the extreme answer appears in {file}");
    }
    let results: serde_json::Value = serde_json::from_str(&case.read(&format!("{dir}/results.json"))).unwrap();
    let mut all = Vec::new();
    numbers(&results, &mut all);
    // Variances are allowed to be large; a number equal to the answer (to a unit) is not.
    assert!(!all.iter().any(|v| (v - 987_654.321).abs() < 1.0), "the extreme answer as a number in results.json");
    let items = results["data"]["items"].as_array().unwrap();
    for item in items {
        let keys: Vec<&String> = item.as_object().unwrap().keys().collect();
        for forbidden in ["min", "max", "categories"] {
            assert!(!keys.iter().any(|k| *k == forbidden), "`{forbidden}` in {item}");
        }
    }
    let x = items.iter().find(|i| i["name"] == "x").unwrap();
    assert_eq!(x["kind"], "continuous");
    let (p5, p95) = (x["p5"].as_f64().unwrap(), x["p95"].as_f64().unwrap());
    assert!(p5 < p95 && p95 < 100.0, "percentiles of x: {p5}, {p95}");
    let a1 = items.iter().find(|i| i["name"] == "a1").unwrap();
    let groups = a1["responses"].as_array().unwrap();
    assert!(groups.len() >= 2, "{a1}");
    for g in groups {
        assert!(g["count"].as_u64().unwrap() >= 5, "a response group under 5 respondents: {g}");
        assert_ne!(g["from"], 7.0, "the lone answer 7 is shown: {g}");
        assert_ne!(g["to"], 7.0, "the lone answer 7 is shown: {g}");
    }
    let top = groups.last().unwrap();
    assert!(top["label"].as_str().unwrap().starts_with('≥'), "{top}");
    let total: u64 = groups.iter().map(|g| g["count"].as_u64().unwrap()).sum();
    assert_eq!(total, a1["n"].as_u64().unwrap());
    let md = case.read(&format!("{dir}/report.md"));
    assert!(md.contains("No value in this report is a single respondent's answer"), "{md}");
    assert!(case.read(&format!("{dir}/report.html")).contains("No value in this report is a single respondent"));
}

// ---------------------------------------------------------------- item 11: injection

const RLO: char = '\u{202E}';

fn injection_case() -> Case {
    let title = format!("<img src=x onerror=alert(1)> *Panel* {RLO}gnp.exe");
    let spec = SMALL_SPEC
        .replace("title: Small panel", &format!("title: \"{title}\""))
        .replace("{id: w1, file: w1.csv}", "{id: \"<b>w1</b>\", file: w1.csv}")
        .replace("analyses:", "knowledge:\n  tiers: [[alpha], [beta]]\nanalyses:");
    Case::new().spec(&spec).file("w1.csv", synthetic_csv(200, 7, SMALL_COLUMNS))
}

fn only_report_dir(case: &Case) -> PathBuf {
    let reports = case.path().join("reports");
    let dirs: Vec<PathBuf> = std::fs::read_dir(&reports).unwrap().flatten().map(|e| e.path()).collect();
    assert_eq!(dirs.len(), 1, "{dirs:?}");
    dirs[0].join("v1")
}

#[test]
fn spec_text_cannot_inject_html_or_markdown_into_report_md() {
    let case = injection_case();
    run_in(case.path(), &["run", "spec.yaml"], &[]).code(0);
    let md = std::fs::read_to_string(only_report_dir(&case).join("report.md")).unwrap();
    for raw in ["<img", "<b>", "</b>", "*Panel*"] {
        assert!(!md.contains(raw), "raw {raw:?} in report.md");
    }
    assert!(md.starts_with("# &lt;img src=x onerror=alert(1)&gt; \\*Panel\\* "), "{md}");
    assert!(md.contains("| &lt;b&gt;w1&lt;/b&gt; |"), "{md}");
}

#[test]
fn direction_overrides_are_shown_not_passed_in_both_reports() {
    let case = injection_case();
    run_in(case.path(), &["run", "spec.yaml"], &[]).code(0);
    let dir = only_report_dir(&case);
    let md = std::fs::read_to_string(dir.join("report.md")).unwrap();
    let html = std::fs::read_to_string(dir.join("report.html")).unwrap();
    for (name, text) in [("report.md", &md), ("report.html", &html)] {
        assert!(!text.contains(RLO), "a raw right-to-left override in {name}");
        assert!(text.contains("&lt;U+202E&gt;gnp.exe"), "the override is not shown in {name}");
    }
}
