use nalgebra::DMatrix;

use super::*;
use crate::invariance::GroupDesign;

/// Items x0.. on constructs a, b, ..., groups g0, g1, reference g0.
fn design(construct: &[usize]) -> GroupDesign {
    let m = construct.iter().max().map_or(0, |&f| f + 1);
    GroupDesign {
        items: (0..construct.len()).map(|i| format!("x{i}")).collect(),
        constructs: (0..m).map(|f| format!("c{f}")).collect(),
        item_construct: construct.to_vec(),
        groups: vec!["g0".into(), "g1".into()],
        n: vec![0, 0],
        reference: 0,
    }
}

/// Two constructs of three items: 5, 5, 4 and 5, 3, 2 categories.
fn layout() -> Layout {
    Layout::new(&[0, 0, 0, 1, 1, 1], &[5, 5, 4, 5, 3, 2], 2, 0).unwrap()
}

/// A full parameter vector with group differences in every parameter family.
fn point(lay: &Layout) -> Vec<f64> {
    let mut full = vec![0.0; lay.groups * lay.per_group()];
    for g in 0..lay.groups {
        let gf = g as f64;
        for j in 0..lay.p {
            let jf = j as f64;
            for c in 0..lay.categories[j] - 1 {
                full[lay.tau(g, j, c)] = -1.2 + 0.9 * c as f64 + 0.05 * jf + 0.1 * gf;
            }
            full[lay.nu(g, j)] = 0.1 * gf * (jf - 2.0);
            full[lay.lambda(g, j)] = 0.8 + 0.1 * jf - 0.05 * gf;
            full[lay.theta(g, j)] = 1.0 + 0.2 * gf;
        }
        for a in 0..lay.m {
            full[lay.kappa(g, a)] = 0.3 * gf * (a as f64 + 1.0);
            full[lay.phi(g, a, a)] = 1.0 + 0.3 * gf;
        }
        full[lay.phi(g, 1, 0)] = 0.4 + 0.1 * gf;
    }
    full
}

#[test]
fn jacobian_matches_central_differences() {
    let lay = layout();
    let full = point(&lay);
    for g in 0..2 {
        let d = lay.jacobian(&full, g).unwrap();
        let h = 1e-6;
        for c in 0..lay.per_group() {
            let i = g * lay.per_group() + c;
            let (mut up, mut down) = (full.clone(), full.clone());
            up[i] += h;
            down[i] -= h;
            let num = (lay.implied(&up, g).unwrap() - lay.implied(&down, g).unwrap()) / (2.0 * h);
            for r in 0..lay.n_stats() {
                assert!((num[r] - d[(r, c)]).abs() < 1e-7, "group {g} stat {r} param {c}: {} vs {}", num[r], d[(r, c)]);
            }
        }
    }
}

/// Strict invariance in the population: group 1 differs only in latent means and covariances.
fn strict_truth(lay: &Layout) -> Vec<f64> {
    let mut full = point(lay);
    for j in 0..lay.p {
        for c in 0..lay.categories[j] - 1 {
            full[lay.tau(1, j, c)] = full[lay.tau(0, j, c)];
        }
        full[lay.lambda(1, j)] = full[lay.lambda(0, j)];
        for g in 0..2 {
            full[lay.nu(g, j)] = 0.0;
            full[lay.theta(g, j)] = 1.0;
        }
    }
    for a in 0..lay.m {
        full[lay.kappa(0, a)] = 0.0;
        full[lay.phi(0, a, a)] = 1.0;
    }
    full[lay.kappa(1, 0)] = 0.3;
    full[lay.kappa(1, 1)] = -0.2;
    full[lay.phi(1, 0, 0)] = 1.2;
    full[lay.phi(1, 1, 1)] = 0.8;
    full
}

/// Statistics exactly implied by `full`, with a made-up sampling covariance (diagonal plus a
/// little correlation) as for n of about 500.
fn exact_groups(lay: &Layout, full: &[f64]) -> OrdinalGroups {
    let k = lay.n_stats();
    let stats = (0..lay.groups)
        .map(|g| {
            let values = lay.implied(full, g).unwrap();
            let acov = DMatrix::from_fn(k, k, |a, b| {
                let v = |e: usize| 0.002 * (1.0 + 0.1 * (e % 7) as f64);
                if a == b { v(a) } else { 0.2 * (v(a) * v(b)).sqrt() * 0.5_f64.powi((a as i32 - b as i32).abs()) }
            });
            GroupStatistics { n: 500, values, acov }
        })
        .collect();
    OrdinalGroups::from_statistics(design(&lay.construct), stats, &lay.categories).unwrap()
}

fn level(n: usize) -> Equalities {
    Equalities { thresholds: n >= 1, loadings: n >= 2, intercepts: n >= 3, residuals: n >= 4, released: vec![] }
}

#[test]
fn every_level_fits_population_statistics_exactly_and_recovers_latent_moments() {
    let lay = layout();
    let truth = strict_truth(&lay);
    let groups = exact_groups(&lay, &truth);
    let mut previous: Option<GroupsFit> = None;
    for l in 0..5 {
        let fit = groups.fit_equalities(&level(l), previous.as_ref().map(|f| f.full.as_slice())).unwrap();
        assert!(fit.naive < 1e-12, "level {l}: T = {}", fit.naive);
        if l >= 2 {
            let i = lay.phi(1, 0, 0);
            assert!((fit.full[i] - 1.2).abs() < 1e-6, "level {l}: variance {}", fit.full[i]);
        }
        if l >= 3 {
            let latent = groups.latent(&fit);
            assert!((latent[2].mean - 0.3).abs() < 1e-6 && (latent[3].mean + 0.2).abs() < 1e-6, "{latent:?}");
            assert!(latent[2].mean_se.unwrap() > 0.0 && latent[0].mean_se.is_none());
        }
        previous = Some(fit);
    }
}
