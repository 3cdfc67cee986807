use nalgebra::{DMatrix, DVector};

use super::*;
use crate::invariance::{GroupDesign, ParamKind, Release};

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

/// The full-vector index of a parameter named as the fixture's generator names it
/// (tau{g}_{j}_{c}, nu{g}_{j}, lam{g}_{j}, theta{g}_{j}, kappa{g}_{f}, phi{g}_{a}{b}).
fn index_of(lay: &Layout, name: &str) -> usize {
    let (kind, rest) = name.split_at(name.find(|c: char| c.is_ascii_digit()).unwrap());
    let g = usize::from(rest.as_bytes()[0] - b'0');
    let tail = &rest[2..];
    let nums: Vec<usize> = tail.split('_').map(|x| x.parse().unwrap()).collect();
    match kind {
        "tau" => lay.tau(g, nums[0], nums[1]),
        "nu" => lay.nu(g, nums[0]),
        "lam" => lay.lambda(g, nums[0]),
        "theta" => lay.theta(g, nums[0]),
        "kappa" => lay.kappa(g, nums[0]),
        "phi" => {
            let ab = rest[1..].trim_start_matches('_');
            lay.phi(g, usize::from(ab.as_bytes()[0] - b'0'), usize::from(ab.as_bytes()[1] - b'0'))
        }
        _ => panic!("unknown parameter {name}"),
    }
}

fn kind_of(name: &str) -> ParamKind {
    match name {
        "threshold" => ParamKind::Threshold,
        "loading" => ParamKind::Loading,
        "intercept" => ParamKind::Intercept,
        "residual" => ParamKind::Residual,
        _ => panic!("unknown kind {name}"),
    }
}

fn close(what: &str, ours: f64, theirs: f64, tol: f64) {
    assert!((ours - theirs).abs() <= tol * (1.0 + theirs.abs()), "{what}: ours {ours}, reference {theirs}");
}

/// Against an independent numpy/scipy implementation (tests/reference/invariance_ordinal/
/// generate.py: scipy least_squares on the DWLS residuals, numerical Jacobians): two groups,
/// items of 5, 5, 4 | 5, 3, 2 categories on two constructs, at configural, thresholds, then
/// loadings, intercepts and unique variances added, and two partial models. The discrepancy to
/// 1e-5, every parameter to 1e-4, sandwich SEs, tr(UV) and tr((UV)²), the robust difference
/// tests between consecutive levels and the score tests of loadings and intercepts to 1e-4
/// (relative beyond 1).
#[test]
fn matches_the_independent_scipy_implementation() {
    let reference: serde_json::Value = serde_json::from_str(include_str!(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/invariance_ordinal/reference.json"
    )))
    .unwrap();
    let ints = |v: &serde_json::Value| -> Vec<usize> {
        v.as_array().unwrap().iter().map(|x| x.as_u64().unwrap() as usize).collect()
    };
    let floats =
        |v: &serde_json::Value| -> Vec<f64> { v.as_array().unwrap().iter().map(|x| x.as_f64().unwrap()).collect() };
    let categories = ints(&reference["categories"]);
    let construct = ints(&reference["construct"]);
    let stats: Vec<GroupStatistics> = reference["groups"]
        .as_array()
        .unwrap()
        .iter()
        .map(|g| {
            let values = DVector::from_vec(floats(&g["values"]));
            let rows: Vec<Vec<f64>> = g["acov"].as_array().unwrap().iter().map(&floats).collect();
            GroupStatistics { n: g["n"].as_u64().unwrap() as usize, values, acov: crate::testkit::matrix(&rows) }
        })
        .collect();
    let groups = OrdinalGroups::from_statistics(design(&construct), stats, &categories).unwrap();
    let lay = groups.layout().clone();
    let mut fits = Vec::new();
    for level in reference["levels"].as_array().unwrap() {
        let n = level["level"].as_u64().unwrap() as usize;
        let mut eq = self::level(n);
        for r in level["released"].as_array().unwrap() {
            let item = r[1].as_u64().unwrap() as usize;
            eq.released.push(Release { item, kind: kind_of(r[0].as_str().unwrap()), group: 1 });
        }
        let fit = groups.fit_equalities(&eq, None).unwrap();
        let what = format!("level {n} {:?}", eq.released);
        close(&format!("{what} discrepancy"), fit.naive, level["discrepancy"].as_f64().unwrap(), 1e-5);
        assert_eq!(fit.df, level["df"].as_u64().unwrap() as usize, "{what} df");
        assert_eq!(fit.map.free, level["free"].as_u64().unwrap() as usize, "{what} free parameters");
        for (name, value) in level["estimates"].as_object().unwrap() {
            close(&format!("{what} {name}"), fit.full[index_of(&lay, name)], value.as_f64().unwrap(), 1e-4);
        }
        for (name, value) in level["se"].as_object().unwrap() {
            let se = fit.se(index_of(&lay, name)).unwrap_or_else(|| panic!("{what} {name} is not free"));
            close(&format!("{what} se {name}"), se, value.as_f64().unwrap(), 1e-4);
        }
        close(&format!("{what} tr(UV)"), fit.correction.trace, level["trace"].as_f64().unwrap(), 1e-4);
        close(
            &format!("{what} tr((UV)^2)"),
            fit.correction.trace_squared.unwrap(),
            level["trace_squared"].as_f64().unwrap(),
            1e-4,
        );
        fits.push((n, eq.released.is_empty(), fit));
    }
    let plain = |n: usize| &fits.iter().find(|f| f.0 == n && f.1).unwrap().2;
    for d in reference["differences"].as_array().unwrap() {
        let (r, g) = (d["restricted"].as_u64().unwrap() as usize, d["general"].as_u64().unwrap() as usize);
        let test = groups.difference_test(plain(r), plain(g)).unwrap();
        let what = format!("difference {r} vs {g}");
        assert_eq!(test.df, d["df"].as_u64().unwrap() as usize, "{what} df");
        close(&format!("{what} naive"), test.naive, d["naive"].as_f64().unwrap(), 1e-5);
        close(&format!("{what} trace"), test.trace, d["trace"].as_f64().unwrap(), 1e-4);
        close(&format!("{what} trace squared"), test.trace_squared, d["trace_squared"].as_f64().unwrap(), 1e-4);
        close(&format!("{what} statistic"), test.statistic, d["statistic"].as_f64().unwrap(), 1e-4);
        close(&format!("{what} p"), test.p_value, d["p"].as_f64().unwrap(), 1e-4);
    }
    for s in reference["scores"].as_array().unwrap() {
        let n = s["level"].as_u64().unwrap() as usize;
        let release = Release {
            item: s["item"].as_u64().unwrap() as usize,
            kind: kind_of(s["kind"].as_str().unwrap()),
            group: 1,
        };
        let fit = plain(n);
        let test = groups.score_release(&fit.equalities, &fit.full, release).unwrap();
        let what = format!("score {release:?} at level {n}");
        assert_eq!(test.df, s["df"].as_u64().unwrap() as usize, "{what} df");
        close(&format!("{what} naive"), test.naive, s["naive"].as_f64().unwrap(), 1e-4);
        close(&format!("{what} statistic"), test.statistic, s["statistic"].as_f64().unwrap(), 1e-4);
    }
}

/// Codes of `p` items on one factor (standardized loading 0.7) cut at `cuts` (shifted by
/// 0.1 per item), n rows.
fn one_factor_codes(p: usize, n: usize, cuts: &[f64], rng: &mut impl rand::Rng) -> Vec<Vec<u8>> {
    use rand_distr::{Distribution, StandardNormal};
    let mut items: Vec<Vec<u8>> = (0..p).map(|_| Vec::with_capacity(n)).collect();
    for _ in 0..n {
        let eta: f64 = StandardNormal.sample(rng);
        for (j, column) in items.iter_mut().enumerate() {
            let e: f64 = StandardNormal.sample(rng);
            let y = 0.7 * eta + 0.51_f64.sqrt() * e;
            let code = cuts.iter().filter(|&&t| y >= t + 0.1 * j as f64).count();
            column.push(u8::try_from(code).unwrap());
        }
    }
    items
}

/// The joint sampling covariance of thresholds and polychorics from respondents'
/// contributions against the Monte Carlo covariance of the estimates over 2,000 seeded samples
/// (three 5-point items, n = 400): every variance within 20%, and the correlations of the
/// estimates (threshold-threshold, threshold-polychoric, polychoric-polychoric) within 0.1 (4.5 Monte Carlo SEs).
#[test]
fn joint_sampling_covariance_matches_monte_carlo() {
    let (reps, n) = (2000, 400);
    let cuts = [-1.2, -0.4, 0.4, 1.2];
    let mut rng = crate::testkit::seeded(1818);
    let k = 4 * 3 + 3;
    let mut draws = DMatrix::zeros(reps, k);
    let mut mean_acov = DMatrix::zeros(k, k);
    for r in 0..reps {
        let codes = one_factor_codes(3, n, &cuts, &mut rng);
        let s = GroupStatistics::from_codes(&codes, &[5, 5, 5]).unwrap();
        draws.row_mut(r).copy_from(&s.values.transpose());
        mean_acov += s.acov / reps as f64;
    }
    let centred = DMatrix::from_fn(reps, k, |r, c| draws[(r, c)] - draws.column(c).mean());
    let empirical = centred.transpose() * &centred / (reps as f64 - 1.0);
    for a in 0..k {
        let ratio = mean_acov[(a, a)] / empirical[(a, a)];
        assert!((0.8..1.25).contains(&ratio), "variance of statistic {a}: ratio {ratio}");
        for b in 0..a {
            let ours = mean_acov[(a, b)] / (mean_acov[(a, a)] * mean_acov[(b, b)]).sqrt();
            let mc = empirical[(a, b)] / (empirical[(a, a)] * empirical[(b, b)]).sqrt();
            assert!((ours - mc).abs() < 0.1, "correlation of statistics {a}, {b}: {ours} vs {mc}");
        }
    }
}

/// Binary items (Wu & Estabrook 2016): equal thresholds impose nothing (the intercept takes up
/// the one threshold), so the thresholds level has the configural df; equal loadings then do.
#[test]
fn binary_thresholds_step_imposes_nothing() {
    let lay = Layout::new(&[0, 0, 0, 1, 1, 1], &[2; 6], 2, 0).unwrap();
    let truth = strict_truth(&lay);
    let groups = exact_groups(&lay, &truth);
    let configural = groups.fit_equalities(&level(0), None).unwrap();
    let thresholds = groups.fit_equalities(&level(1), None).unwrap();
    let metric = groups.fit_equalities(&level(2), None).unwrap();
    assert_eq!(configural.df, thresholds.df);
    assert!(metric.df > thresholds.df);
    // Strict adds nothing for binary items: their unique variances are 1 throughout.
    let scalar = groups.fit_equalities(&level(3), None).unwrap();
    let strict = groups.fit_equalities(&level(4), None).unwrap();
    assert_eq!(scalar.df, strict.df);
    assert!(strict.naive < 1e-12);
}

/// A category one group never used is merged with its neighbour in both groups; a code
/// beyond the item's categories is an error naming the item.
#[test]
fn categories_are_merged_alike_in_every_group_and_bad_codes_refused() {
    let mut rng = crate::testkit::seeded(7);
    let first = one_factor_codes(4, 300, &[-1.0, 0.0, 1.0], &mut rng);
    let mut second = one_factor_codes(4, 300, &[-1.0, 0.0, 1.0], &mut rng);
    // Nobody in the second group answers category 3 of item 2.
    for c in &mut second[2] {
        *c = (*c).min(2);
    }
    let data = |a: &[Vec<u8>], b: &[Vec<u8>]| -> Vec<GroupData<'static>> {
        [a, b]
            .iter()
            .map(|g| GroupData { items: g.iter().map(|c| std::borrow::Cow::Owned(c.clone())).collect() })
            .collect()
    };
    let groups = OrdinalGroups::new(design(&[0, 0, 1, 1]), &data(&first, &second), &[4; 4]).unwrap();
    assert_eq!(groups.merges(), &[CategoryMerge { item: 2, empty: 3, into: 2 }]);
    assert_eq!(groups.layout().categories, vec![4, 4, 3, 4]);
    assert_eq!(groups.group_sizes(), &[300, 300]);
    second[1][5] = 4;
    let err = OrdinalGroups::new(design(&[0, 0, 1, 1]), &data(&first, &second), &[4; 4]).unwrap_err();
    assert_eq!(err.to_string(), "invalid input: item 1: code 4 outside 4 categories");
}
