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
