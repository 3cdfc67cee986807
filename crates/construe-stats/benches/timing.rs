//! Timings of the numerics' hot spots at the project's performance targets, against nothing but
//! the clock (the peers with numpy/scipy are in the repository's `bench/`). Run with
//! `cargo bench -p construe-stats` (release build); figures go to `bench/README.md`.
//! Moved here from ignored unit tests, so `cargo test` holds no timing loops.

use nalgebra::DMatrix;
use rand::seq::SliceRandom;

use construe_stats::cluster::{ClusterOptions, find_clusters};
use construe_stats::mixed::mixed_correlation;
use construe_stats::polychoric::OrdinalFit;
use construe_stats::purify::{PurifyOptions, purify};
use construe_stats::sem::{FitOptions, Identification, SemModel};
use construe_stats::testkit::{cluster_pool, draw_normal, one_factor_columns, sample_cov, seeded};
use construe_stats::tetrad::{TetradTestKind, TetradTester};

fn main() {
    // `cargo bench` passes `--bench`; a name argument selects one section.
    let only: Vec<String> = std::env::args().skip(1).filter(|a| !a.starts_with("--")).collect();
    let wanted = |name: &str| only.is_empty() || only.iter().any(|o| name.contains(o.as_str()));
    if wanted("clusters") {
        clusters();
    }
    if wanted("polychoric") {
        polychoric();
    }
    if wanted("cfa") {
        cfa();
    }
    if wanted("em") {
        em_mar(100_000, 50);
    }
    // `acov` alone runs both sizes; `acov100` / `acov500` one; `acov-export DIR` writes the
    // numpy peer's inputs (never part of a default run: it writes 400 MB).
    if only.is_empty() || only.iter().any(|o| o == "acov" || o == "acov100") {
        acov(100, 10_000, None);
    }
    if only.is_empty() || only.iter().any(|o| o == "acov" || o == "acov500") {
        acov(500, 2_000, None);
    }
    if let Some(at) = only.iter().position(|o| o == "acov-export") {
        let dir = only.get(at + 1).expect("acov-export needs a folder");
        acov(100, 10_000, Some(std::path::Path::new(dir)));
    }
}

/// Issue 17's performance target: `n` rows x `p` continuous items (one factor, loadings 0.7)
/// with about 30% of the values of items 1.. missing, more often where item 0 is high (MAR):
/// EM for the mean and covariance. Prints the patterns, iterations and time.
fn em_mar(n: usize, p: usize) {
    use construe_stats::missing::{EmOptions, Patterns, em_patterns};
    use rand::Rng;
    let mut rng = seeded(17);
    let sigma = DMatrix::from_fn(p, p, |i, j| if i == j { 1.0 } else { 0.49 });
    let x = draw_normal(&sigma, n, &mut rng);
    let mut cols: Vec<Vec<f64>> = (0..p).map(|j| x.column(j).iter().copied().collect()).collect();
    for i in 0..n {
        let rate = if x[(i, 0)] > 0.0 { 0.5 } else { 0.1 };
        for col in cols.iter_mut().skip(1) {
            if rng.random::<f64>() < rate {
                col[i] = f64::NAN;
            }
        }
    }
    let views: Vec<&[f64]> = cols.iter().map(Vec::as_slice).collect();
    let t0 = std::time::Instant::now();
    let patterns = Patterns::new(&views).unwrap();
    let est = em_patterns(&views, &patterns, &EmOptions::default()).unwrap();
    let secs = t0.elapsed().as_secs_f64();
    println!(
        "em {n} x {p}, {} patterns: {} iterations, converged {}, {secs:.2} s ({:.3} s per iteration)",
        patterns.len(),
        est.iterations,
        est.converged,
        secs / est.iterations as f64
    );
}

/// Issue 15's performance target: `p` five-point items x `n` rows, polychoric correlations,
/// their distribution-free sampling covariance (`Contributions`) and the sandwich A' V A with a
/// random k x 200 A (k = p(p-1)/2 correlations), never forming V. With `export`, also writes
/// the contribution matrix C (n x k) and A as .npy files for `bench/acov_peer.py`, which forms
/// V = C'C (k x k) and A' V A with numpy.
fn acov(p: usize, n: usize, export: Option<&std::path::Path>) {
    use construe_stats::acov::{Contributions, SamplingCovariance, all_elements};
    use rand::Rng;
    let cols = one_factor_columns(n, p, 0, 0.0, 11);
    let t0 = std::time::Instant::now();
    let m = mixed_correlation(&cols, OrdinalFit::TwoStep).unwrap();
    let t1 = std::time::Instant::now();
    let v = Contributions::correlations(&cols, &m).unwrap();
    let t2 = std::time::Instant::now();
    let elements = all_elements(p, true);
    let k = elements.len();
    let mut rng = seeded(5);
    let a = DMatrix::from_fn(k, 200, |_, _| rng.random::<f64>() * 2.0 - 1.0);
    let t3 = std::time::Instant::now();
    let s = v.sandwich(&elements, &a).unwrap();
    let t4 = std::time::Instant::now();
    let secs = |a: std::time::Instant, b: std::time::Instant| (b - a).as_secs_f64();
    println!(
        "acov {p} five-point items x {n} rows, k = {k}: correlations {:.3} s, contributions {:.3} s, sandwich (k x 200) {:.3} s; \
         correlations + sampling covariance + sandwich {:.3} s on {} threads; S[0,0] = {:.12e}, trace S = {:.12e}",
        secs(t0, t1),
        secs(t1, t2),
        secs(t3, t4),
        secs(t0, t2) + secs(t3, t4),
        rayon::current_num_threads(),
        s[(0, 0)],
        s.trace()
    );
    if let Some(dir) = export {
        use std::io::Write;
        std::fs::create_dir_all(dir).unwrap();
        let mut c_file = std::io::BufWriter::new(std::fs::File::create(dir.join("c.npy")).unwrap());
        npy_header(&mut c_file, n, k);
        for start in (0..n).step_by(500) {
            let c = v.contributions(&elements, start..(start + 500).min(n)).unwrap().unwrap();
            for r in 0..c.nrows() {
                for e in 0..k {
                    c_file.write_all(&c[(r, e)].to_le_bytes()).unwrap();
                }
            }
        }
        let mut a_file = std::io::BufWriter::new(std::fs::File::create(dir.join("a.npy")).unwrap());
        npy_header(&mut a_file, k, 200);
        for r in 0..k {
            for c in 0..200 {
                a_file.write_all(&a[(r, c)].to_le_bytes()).unwrap();
            }
        }
        println!("wrote {}/c.npy ({n} x {k}) and a.npy ({k} x 200)", dir.display());
    }
}

/// A NumPy .npy v1.0 header for a C-order float64 matrix.
fn npy_header(out: &mut impl std::io::Write, rows: usize, cols: usize) {
    let mut dict = format!("{{'descr': '<f8', 'fortran_order': False, 'shape': ({rows}, {cols}), }}");
    while (10 + dict.len() + 1) % 64 != 0 {
        dict.push(' ');
    }
    dict.push('\n');
    out.write_all(b"\x93NUMPY\x01\x00").unwrap();
    out.write_all(&(dict.len() as u16).to_le_bytes()).unwrap();
    out.write_all(dict.as_bytes()).unwrap();
}

/// The 60-item, 4-factor CFA of `tests/reference/sem/cfa60x4.json` (n = 1000), fitted 41 times,
/// each fit timed alone with SEs and fit indices: the median resists a shared machine's spikes,
/// and the best is comparable with the scipy peer's "best of" (`python3 bench/cfa_reference.py
/// tests/reference/sem/cfa60x4.json`). Target: under 50 ms per fit.
fn cfa() {
    let case: serde_json::Value =
        serde_json::from_str(include_str!("../../../tests/reference/sem/cfa60x4.json")).expect("cfa60x4.json");
    let rows: Vec<Vec<f64>> = serde_json::from_value(case["cov"].clone()).expect("a covariance matrix");
    let s = DMatrix::from_fn(rows.len(), rows.len(), |i, j| rows[i][j]);
    let groups: Vec<Vec<usize>> = serde_json::from_value(case["model"]["groups"].clone()).expect("groups");
    let identification = match case["model"]["identification"].as_str() {
        Some("unit_latent_variance") => Identification::UnitLatentVariance,
        _ => Identification::UnitFirstLoading,
    };
    let model = SemModel::sem(&groups, s.nrows(), identification, &[]).expect("a CFA");
    let mut times = Vec::new();
    let mut iterations = 0;
    for _ in 0..41 {
        let t0 = std::time::Instant::now();
        let fit = model.fit(&s, 1000, &FitOptions::default()).expect("the fit");
        times.push(t0.elapsed().as_secs_f64());
        assert!(fit.converged);
        iterations = fit.iterations;
    }
    times.sort_by(f64::total_cmp);
    println!(
        "cfa 60 items x 4 factors: {:.2} ms per fit (median of 41; best {:.2} ms; {iterations} scoring steps, incl. SEs and indices)",
        times[times.len() / 2] * 1e3,
        times[0] * 1e3
    );
}

/// Pools of 50, 100, 200 and 500 items (clusters of 25 plus two cross-loading items, in a
/// shuffled order, n = 2000), adversarial pools, and purification of 30 items in 6 groups.
fn clusters() {
    for (k, label) in [(2, 50), (4, 100), (8, 200), (20, 500)] {
        let mut rng = seeded(label as u64);
        let sigma = cluster_pool(k, 25, 2, &mut rng);
        let p = sigma.nrows();
        let mut perm: Vec<usize> = (0..p).collect();
        perm.shuffle(&mut rng);
        let shuffled = DMatrix::from_fn(p, p, |a, b| sigma[(perm[a], perm[b])]);
        let x = draw_normal(&shuffled, 2000, &mut rng);
        let tester = TetradTester::wishart(&sample_cov(&x), 2000).unwrap();
        let pool: Vec<usize> = (0..p).collect();
        let start = std::time::Instant::now();
        let got = find_clusters(&tester, &pool, &ClusterOptions::default()).unwrap();
        let secs = start.elapsed().as_secs_f64();
        let mut truth: Vec<Vec<usize>> = (0..k)
            .map(|f| {
                let mut c: Vec<usize> = (0..p).filter(|&a| perm[a] / 25 == f && perm[a] < k * 25).collect();
                c.sort_unstable();
                c
            })
            .collect();
        truth.sort();
        let mut found = got.clusters.clone();
        found.sort();
        println!(
            "{p} items: {secs:.2} s, {} clusters, exact recovery {}, unclustered {}",
            got.clusters.len(),
            found == truth,
            got.unclustered.len()
        );
    }
    // Adversarial pools: 250 latents with two indicators each (no cluster of three exists,
    // so every correlated pair is tried as a seed), Wishart; and 200 items with the delta
    // test.
    for (k, size, delta) in [(250, 2, false), (100, 2, false), (8, 25, true)] {
        let mut rng = seeded(7 + k as u64);
        let sigma = cluster_pool(k, size, 0, &mut rng);
        let p = sigma.nrows();
        let x = draw_normal(&sigma, 2000, &mut rng);
        let tester = if delta {
            TetradTester::delta(&x).unwrap()
        } else {
            TetradTester::wishart(&sample_cov(&x), 2000).unwrap()
        };
        let pool: Vec<usize> = (0..p).collect();
        let start = std::time::Instant::now();
        let got = find_clusters(&tester, &pool, &ClusterOptions::default()).unwrap();
        println!(
            "{p} items ({k} latents x {size}, delta {delta}): {:.2} s, {} clusters",
            start.elapsed().as_secs_f64(),
            got.clusters.len()
        );
    }
    let mut rng = seeded(30);
    let sigma = cluster_pool(6, 5, 0, &mut rng);
    let x = draw_normal(&sigma, 2000, &mut rng);
    let s = sample_cov(&x);
    let groups: Vec<Vec<usize>> = (0..6).map(|g| (g * 5..g * 5 + 5).collect()).collect();
    for options in [PurifyOptions::default(), PurifyOptions { test: TetradTestKind::Delta, ..PurifyOptions::default() }]
    {
        let start = std::time::Instant::now();
        let r = purify(&s, 2000, Some(&x), &groups, &options).unwrap();
        println!(
            "purify 30 items ({:?}): {:.3} s, {} rounds, family {}",
            options.test,
            start.elapsed().as_secs_f64(),
            r.family_sizes.len(),
            r.family_sizes[0]
        );
    }
}

/// 100 five-point items, n = 10,000: 4,950 polychoric pairs (target: under 3 s on 2 cores).
fn polychoric() {
    let cols = one_factor_columns(10_000, 100, 0, 0.0, 11);
    let start = std::time::Instant::now();
    let m = mixed_correlation(&cols, OrdinalFit::TwoStep).unwrap();
    let secs = start.elapsed().as_secs_f64();
    let iters: usize = m.pairs.iter().map(|p| p.iterations).sum();
    println!(
        "100 ordinal items, n = 10000, {} pairs: {secs:.3} s on {} threads, mean {:.2} Newton iterations",
        m.pairs.len(),
        rayon::current_num_threads(),
        iters as f64 / m.pairs.len() as f64
    );
    assert_eq!(m.pairs.len(), 4950);
}
