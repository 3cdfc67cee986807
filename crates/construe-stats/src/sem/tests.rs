//! Reference and identity checks of the ML SEM engine.

use nalgebra::DMatrix;
use serde_json::Value;

use super::*;
use crate::StatsError;
use crate::testkit;

fn matrix(v: &Value) -> DMatrix<f64> {
    testkit::matrix(&serde_json::from_value::<Vec<Vec<f64>>>(v.clone()).expect("a matrix"))
}

fn floats(v: &Value) -> Vec<f64> {
    v.as_array().unwrap().iter().map(|x| x.as_f64().unwrap()).collect()
}

#[test]
fn one_factor_cfa_matches_r_factanal() {
    // R 4.2.2 stats::factanal(factors = 1) on datasets::ability.cov and the verbal subset of
    // datasets::Harman74.cor (tests/reference/sem/make_factanal.R).
    let fixture: Value = crate::reference!("sem/factanal.json");
    for case in ["ability_cov", "harman74_verbal"] {
        let c = &fixture[case];
        let s = matrix(&c["cov"]);
        let n = c["n"].as_u64().unwrap() as usize;
        let p = s.nrows();
        let model = SemModel::cfa(&[(0..p).collect()], p, Identification::UnitLatentVariance).unwrap();
        let fit = model.fit(&s, n, &FitOptions::default()).unwrap();
        assert!(fit.converged, "{case}");
        assert!((fit.discrepancy - c["objective"].as_f64().unwrap()).abs() < 1e-8, "{case}: F {}", fit.discrepancy);
        let loadings = floats(&c["loadings"]);
        let uniq = floats(&c["uniquenesses"]);
        for i in 0..p {
            let l = fit.entry(Matrix::Lambda, i, 0).unwrap().std.unwrap();
            let u = fit.entry(Matrix::Theta, i, i).unwrap().std.unwrap();
            assert!((l - loadings[i]).abs() < 1e-4, "{case} loading {i}: {l} vs {}", loadings[i]);
            assert!((u - uniq[i]).abs() < 1e-4, "{case} uniqueness {i}: {u} vs {}", uniq[i]);
        }
        // factanal's statistic is Bartlett-corrected: (n - 1 - (2p + 5)/6 - 2k/3) F.
        let bartlett = (n as f64 - 1.0 - (2.0 * p as f64 + 5.0) / 6.0 - 2.0 / 3.0) * fit.discrepancy;
        assert!((bartlett - c["statistic_bartlett"].as_f64().unwrap()).abs() < 1e-5);
        assert_eq!(fit.df as u64, c["dof"].as_u64().unwrap());
    }
}

fn build_model(desc: &Value) -> SemModel {
    let p = desc["p"].as_u64().unwrap() as usize;
    let groups: Vec<Vec<usize>> = desc["groups"]
        .as_array()
        .unwrap()
        .iter()
        .map(|g| g.as_array().unwrap().iter().map(|i| i.as_u64().unwrap() as usize).collect())
        .collect();
    let ident = match desc["identification"].as_str().unwrap() {
        "unit_latent_variance" => Identification::UnitLatentVariance,
        _ => Identification::UnitFirstLoading,
    };
    let paths: Vec<(usize, usize)> = desc
        .get("paths")
        .and_then(Value::as_array)
        .map(|a| a.iter().map(|x| (x[0].as_u64().unwrap() as usize, x[1].as_u64().unwrap() as usize)).collect())
        .unwrap_or_default();
    let mut model = SemModel::sem(&groups, p, ident, &paths).unwrap();
    if let Some(fixed) = desc.get("fixed_error_variances").and_then(Value::as_object) {
        for (i, v) in fixed {
            model.fix_error_variance(i.parse().unwrap(), v.as_f64().unwrap());
        }
    }
    if let Some(covs) = desc.get("error_covariances").and_then(Value::as_array) {
        for x in covs {
            model.free_error_covariance(x[0].as_u64().unwrap() as usize, x[1].as_u64().unwrap() as usize);
        }
    }
    if let Some(eq) = desc.get("equal_loadings").and_then(Value::as_object) {
        for (label, cells) in eq {
            for c in cells.as_array().unwrap() {
                model.set_loading(
                    c[0].as_u64().unwrap() as usize,
                    c[1].as_u64().unwrap() as usize,
                    Param::labelled(label),
                );
            }
        }
    }
    model
}

fn matrix_kind(name: &str) -> Matrix {
    match name {
        "lambda" => Matrix::Lambda,
        "beta" => Matrix::Beta,
        "psi" => Matrix::Psi,
        _ => Matrix::Theta,
    }
}

fn sem_fixture() -> Value {
    crate::reference!("sem/sem.json")
}

/// Compare one fitted case with the independent scipy fit: estimates 1e-4, SEs 1e-3, F and fit
/// indices 1e-4 (numpy / scipy versions recorded in sem.json; make_fixtures.py).
fn check_against_scipy(case: &Value, name: &str) -> SemFit {
    let s = matrix(&case["cov"]);
    let n = case["n"].as_u64().unwrap() as usize;
    let fit = build_model(&case["model"]).fit(&s, n, &FitOptions::default()).unwrap();
    assert!(fit.converged, "{name}");
    let labels: Vec<&str> = case["labels"].as_array().unwrap().iter().map(|x| x.as_str().unwrap()).collect();
    assert_eq!(fit.layout.len(), labels.len(), "{name}: number of free parameters");
    let (values, ses) = (floats(&case["values"]), floats(&case["se"]));
    for cell in case["cells"].as_array().unwrap() {
        let t = labels.iter().position(|l| *l == cell["label"].as_str().unwrap()).unwrap();
        let (row, col) = (cell["row"].as_u64().unwrap() as usize, cell["col"].as_u64().unwrap() as usize);
        let e = fit.entry(matrix_kind(cell["matrix"].as_str().unwrap()), row, col).unwrap();
        assert!((e.est - values[t]).abs() < 1e-4, "{name} {cell}: est {} vs {}", e.est, values[t]);
        let se = e.se.unwrap();
        assert!((se - ses[t]).abs() < 1e-3, "{name} {cell}: se {se} vs {}", ses[t]);
    }
    assert!((fit.discrepancy - case["F"].as_f64().unwrap()).abs() < 1e-4 * case["F"].as_f64().unwrap().max(1.0));
    let ix = &case["indices"];
    let close = |got: f64, key: &str| {
        let want = ix[key].as_f64().unwrap();
        assert!((got - want).abs() < 1e-4 * want.abs().max(1.0), "{name} {key}: {got} vs {want}");
    };
    close(fit.indices.chisq, "chisq");
    close(fit.indices.p_value, "p_value");
    close(fit.indices.rmsea, "rmsea");
    close(fit.indices.cfi, "cfi");
    close(fit.indices.tli, "tli");
    close(fit.indices.srmr, "srmr");
    close(fit.baseline.chisq, "baseline_chisq");
    assert_eq!(fit.df as u64, ix["df"].as_u64().unwrap());
    let ci = floats(&ix["rmsea_ci"]);
    assert!(
        (fit.indices.rmsea_ci.0 - ci[0]).abs() < 1e-4 && (fit.indices.rmsea_ci.1 - ci[1]).abs() < 1e-4,
        "{name} ci {:?} vs {ci:?}",
        fit.indices.rmsea_ci
    );
    fit
}

#[test]
fn three_factor_cfa_with_correlated_error_matches_scipy() {
    let fixture = sem_fixture();
    let fit = check_against_scipy(&fixture["cfa3"], "cfa3");
    assert!(fit.heywood.is_empty());
    // First-order optimality, recomputed from the fitted state (common practice).
    let g = fit.gradient(&matrix(&fixture["cfa3"]["cov"])).unwrap();
    assert!(g.amax() < 1e-6 && (g.amax() - fit.gradient_norm).abs() < 1e-12);
    // The fixture was built to misfit (an omitted cross-loading): a non-zero RMSEA lower bound.
    assert!(fit.indices.rmsea_ci.0 > 0.0);
}

#[test]
fn structural_models_match_scipy_including_latent_covariance_acov() {
    let fixture = sem_fixture();
    for name in ["path2", "chain3"] {
        let case = &fixture[name];
        let fit = check_against_scipy(case, name);
        // Delta-method covariance of the implied latent covariances, against scipy's
        // complex-step jacobian times its inverse information (make_fixtures.py).
        let lm = fit.latent_moments();
        let want_c = matrix(&case["latent"]["covariance"]);
        let want_acov = matrix(&case["latent"]["covariance_acov"]);
        let want_pairs: Vec<(usize, usize)> = case["latent"]["pairs"]
            .as_array()
            .unwrap()
            .iter()
            .map(|x| (x[0].as_u64().unwrap() as usize, x[1].as_u64().unwrap() as usize))
            .collect();
        assert_eq!(lm.pairs, want_pairs);
        assert!((&lm.covariance - &want_c).amax() < 1e-4, "{name} latent covariance");
        assert!(
            (&lm.covariance_acov - &want_acov).amax() < 1e-5,
            "{name} latent acov {} vs {}",
            lm.covariance_acov,
            want_acov
        );
    }
}

#[test]
fn latent_correlation_acov_matches_numerical_delta_method() {
    // Internal consistency (common practice, no single source): the analytic correlation
    // jacobian equals central differences of C_ij / sqrt(C_ii C_jj) through the model.
    let fixture = sem_fixture();
    let case = &fixture["path2"];
    let model = build_model(&case["model"]);
    let fit = model.fit(&matrix(&case["cov"]), case["n"].as_u64().unwrap() as usize, &FitOptions::default()).unwrap();
    let lm = fit.latent_moments();
    let corr = |v: &[f64]| {
        let imp = implied::implied(&model.matrices(&fit.layout, v)).unwrap();
        let c = imp.latent_cov;
        c[(1, 0)] / (c[(0, 0)] * c[(1, 1)]).sqrt()
    };
    let q = fit.values.len();
    let mut grad = nalgebra::DVector::zeros(q);
    for t in 0..q {
        let h = 1e-6;
        let (mut up, mut dn) = (fit.values.clone(), fit.values.clone());
        up[t] += h;
        dn[t] -= h;
        grad[t] = (corr(&up) - corr(&dn)) / (2.0 * h);
    }
    let var = (grad.transpose() * &fit.acov * &grad)[(0, 0)];
    let row = lm.pairs.iter().position(|&x| x == (1, 0)).unwrap();
    assert!((lm.correlation_acov[(row, row)] - var).abs() < 1e-8 * var.max(1e-3));
    assert!((lm.correlation[(1, 0)] - corr(&fit.values)).abs() < 1e-12);
}

#[test]
fn analytic_gradient_matches_finite_differences() {
    // Internal consistency (common practice): dF/dtheta against central differences of F at a
    // point away from the optimum, for a model with loadings, paths, Psi and Theta entries.
    let fixture = sem_fixture();
    let case = &fixture["chain3"];
    let s = matrix(&case["cov"]);
    let mut model = build_model(&case["model"]);
    model.free_error_covariance(4, 5);
    let layout = model.layout().unwrap();
    let start = start::start_values(&model, &layout, &s);
    let ln_det_s = s.clone().cholesky().unwrap().l().diagonal().iter().map(|d| 2.0 * d.ln()).sum::<f64>();
    let f = |v: &[f64]| {
        let imp = implied::implied(&model.matrices(&layout, v)).unwrap();
        let k = imp.sigma.clone().cholesky().unwrap();
        let ld: f64 = k.l().diagonal().iter().map(|d| 2.0 * d.ln()).sum();
        ld + s.component_mul(&k.inverse()).sum() - ln_det_s - 7.0
    };
    let imp = implied::implied(&model.matrices(&layout, &start)).unwrap();
    let kinv = imp.sigma.clone().cholesky().unwrap().inverse();
    let (g, _) = information::Derivatives::new(&layout, 7, 3).gradient_and_hessian(&imp, &kinv, &s);
    for t in 0..layout.len() {
        let h = 1e-6;
        let (mut up, mut dn) = (start.clone(), start.clone());
        up[t] += h;
        dn[t] -= h;
        let fd = (f(&up) - f(&dn)) / (2.0 * h);
        assert!((g[t] - fd).abs() < 1e-6 * fd.abs().max(1.0), "{}: {} vs {fd}", layout.names[t], g[t]);
    }
}

#[test]
fn large_cfa_matches_scipy_lbfgsb() {
    // 60 items on 4 factors; scipy L-BFGS-B reference (cfa60x4.json, make_fixtures.py).
    let case: Value = crate::reference!("sem/cfa60x4.json");
    let s = matrix(&case["cov"]);
    let fit = build_model(&case["model"]).fit(&s, 1000, &FitOptions::default()).unwrap();
    assert!(fit.converged);
    assert!((fit.discrepancy - case["F"].as_f64().unwrap()).abs() < 1e-6);
    let labels: Vec<&str> = case["labels"].as_array().unwrap().iter().map(|x| x.as_str().unwrap()).collect();
    let values = floats(&case["values"]);
    for cell in case["cells"].as_array().unwrap() {
        let t = labels.iter().position(|l| *l == cell["label"].as_str().unwrap()).unwrap();
        let e = fit
            .entry(
                matrix_kind(cell["matrix"].as_str().unwrap()),
                cell["row"].as_u64().unwrap() as usize,
                cell["col"].as_u64().unwrap() as usize,
            )
            .unwrap();
        assert!((e.est - values[t]).abs() < 1e-4, "{cell}: {} vs {}", e.est, values[t]);
    }
    let ci = floats(&case["indices"]["rmsea_ci"]);
    assert!((fit.indices.rmsea_ci.1 - ci[1]).abs() < 1e-4);
    assert!((fit.indices.cfi - case["indices"]["cfi"].as_f64().unwrap()).abs() < 1e-4);
}

#[test]
fn saturated_model_has_zero_chisq_and_df() {
    // Identity (Bollen 1989, p. 140): a just-identified model reproduces S exactly.
    let fixture = sem_fixture();
    let s = matrix(&fixture["cfa3"]["cov"]).view((0, 0), (3, 3)).into_owned();
    let model = SemModel::cfa(&[vec![0, 1, 2]], 3, Identification::UnitFirstLoading).unwrap();
    let fit = model.fit(&s, 400, &FitOptions::default()).unwrap();
    assert!(fit.converged);
    assert_eq!(fit.df, 0);
    assert!(fit.indices.chisq < 1e-9, "chisq {}", fit.indices.chisq);
    assert!((&fit.implied - &s).amax() < 1e-8);
    assert!(fit.indices.srmr < 1e-8);
}

#[test]
fn identification_choices_give_the_same_fit_and_standardized_solution() {
    // Scale invariance of ML (Bollen 1989, pp. 238-246): fixing a latent variance or a first
    // loading is a reparametrization, so F and the standardized loadings agree.
    let fixture = sem_fixture();
    let s = matrix(&fixture["cfa3"]["cov"]);
    let groups = [vec![0, 1, 2, 3], vec![4, 5, 6, 7], vec![8, 9, 10]];
    let a = SemModel::cfa(&groups, 11, Identification::UnitLatentVariance)
        .unwrap()
        .fit(&s, 400, &FitOptions::default())
        .unwrap();
    let b = SemModel::cfa(&groups, 11, Identification::UnitFirstLoading)
        .unwrap()
        .fit(&s, 400, &FitOptions::default())
        .unwrap();
    assert!(a.converged && b.converged);
    assert!((a.discrepancy - b.discrepancy).abs() < 1e-10);
    assert_eq!(a.df, b.df);
    assert!((&a.standardized.lambda - &b.standardized.lambda).amax() < 1e-6);
    assert!((&a.standardized.psi - &b.standardized.psi).amax() < 1e-6);
    assert!((a.indices.rmsea - b.indices.rmsea).abs() < 1e-9 && (a.indices.cfi - b.indices.cfi).abs() < 1e-9);
}

#[test]
fn heywood_case_is_reported_not_clamped() {
    // Constructed: for one factor with three indicators lambda_1^2 = r12 r13 / r23
    // (Spearman 1904 triad), here 0.8 * 0.8 / 0.5 = 1.28, so theta_1 = 1 - 1.28 = -0.28 exactly.
    let s = DMatrix::from_row_slice(3, 3, &[1.0, 0.8, 0.8, 0.8, 1.0, 0.5, 0.8, 0.5, 1.0]);
    let model = SemModel::cfa(&[vec![0, 1, 2]], 3, Identification::UnitLatentVariance).unwrap();
    let fit = model.fit(&s, 200, &FitOptions::default()).unwrap();
    assert!(fit.converged);
    let theta1 = fit.entry(Matrix::Theta, 0, 0).unwrap().est;
    assert!((theta1 + 0.28).abs() < 1e-8, "theta_1 = {theta1}");
    assert!(
        fit.heywood
            .iter()
            .any(|h| h.kind == HeywoodKind::NonPositiveErrorVariance && h.entry == Some((Matrix::Theta, 0, 0)))
    );
    assert!(
        fit.heywood
            .iter()
            .any(|h| h.kind == HeywoodKind::StandardizedLoadingAboveOne && h.entry == Some((Matrix::Lambda, 0, 0)))
    );
    assert_eq!(fit.heywood.len(), 2);
}

#[test]
fn latent_covariance_not_positive_definite_is_reported() {
    // Constructed: two indicators per factor whose cross-factor covariances exceed the
    // within-factor ones imply a latent correlation above one (common practice, no single source).
    let s = DMatrix::from_row_slice(
        4,
        4,
        &[1.0, 0.4, 0.5, 0.5, 0.4, 1.0, 0.5, 0.5, 0.5, 0.5, 1.0, 0.4, 0.5, 0.5, 0.4, 1.0],
    );
    let model = SemModel::cfa(&[vec![0, 1], vec![2, 3]], 4, Identification::UnitLatentVariance).unwrap();
    let fit = model.fit(&s, 300, &FitOptions::default()).unwrap();
    let r = fit.latent_moments().correlation[(1, 0)];
    assert!(r > 1.0, "latent correlation {r}");
    assert!(fit.heywood.iter().any(|h| h.kind == HeywoodKind::LatentCovarianceNotPositiveDefinite));
}

#[test]
fn non_convergence_is_reported() {
    let fixture = sem_fixture();
    let s = matrix(&fixture["cfa3"]["cov"]);
    let model =
        SemModel::cfa(&[vec![0, 1, 2, 3], vec![4, 5, 6, 7], vec![8, 9, 10]], 11, Identification::UnitLatentVariance)
            .unwrap();
    let options = FitOptions { max_iterations: 1, ..FitOptions::default() };
    let fit = model.fit(&s, 400, &options).unwrap();
    assert!(!fit.converged);
    assert_eq!(fit.iterations, 1);
    assert!(fit.decrement > options.tolerance);
}

#[test]
fn unidentified_single_indicator_is_an_error_and_fixed_error_variance_identifies_it() {
    // A one-indicator construct is identified only with its error variance fixed (Bollen 1989,
    // pp. 168-170): with it free the information matrix is singular although df = 1 > 0.
    // With theta fixed at (1 - r) s_ii, lambda^2 = r s_ii for an indicator alone on its factor.
    let fixture = sem_fixture();
    let s = matrix(&fixture["cfa3"]["cov"]).view((0, 0), (4, 4)).into_owned();
    let mut model = SemModel::cfa(&[vec![0, 1, 2], vec![3]], 4, Identification::UnitLatentVariance).unwrap();
    assert!(matches!(model.fit(&s, 400, &FitOptions::default()), Err(StatsError::Singular { .. })));
    model.fix_error_variance(3, 0.3 * s[(3, 3)]);
    let fit = model.fit(&s, 400, &FitOptions::default()).unwrap();
    assert!(fit.converged);
    assert_eq!(fit.df, 2);
    let lambda = fit.entry(Matrix::Lambda, 3, 1).unwrap();
    assert!((lambda.est.powi(2) - 0.7 * s[(3, 3)]).abs() < 1e-8);
    assert!((lambda.std.unwrap() - 0.7f64.sqrt()).abs() < 1e-8);
    assert_eq!(fit.entry(Matrix::Theta, 3, 3).unwrap().free, None);
}

#[test]
fn reliability_from_a_fitted_one_factor_model_matches_numpy() {
    // numpy alpha and omega from a scipy ML fit (reliability.json, make_fixtures.py).
    let fixture: Value = crate::reference!("sem/reliability.json");
    let s = matrix(&fixture["cov"]);
    let alpha = crate::reliability::cronbach_alpha(&s, &[0, 1, 2, 3]).unwrap();
    assert!((alpha - fixture["alpha"].as_f64().unwrap()).abs() < 1e-12);
    let model = SemModel::cfa(&[vec![0, 1, 2, 3]], 4, Identification::UnitLatentVariance).unwrap();
    let fit = model.fit(&s, 400, &FitOptions::default()).unwrap();
    let loadings: Vec<f64> = (0..4).map(|i| fit.entry(Matrix::Lambda, i, 0).unwrap().est).collect();
    let errors: Vec<f64> = (0..4).map(|i| fit.entry(Matrix::Theta, i, i).unwrap().est).collect();
    let omega = crate::reliability::mcdonald_omega(&loadings, &errors).unwrap();
    assert!((omega - fixture["omega"].as_f64().unwrap()).abs() < 1e-5);
}

// Callers branch on what went wrong, so shape and identification errors are typed values,
// not sentences.
#[test]
fn shape_and_identification_errors_are_typed() {
    let out_of_range = SemModel::cfa(&[vec![0, 1, 5]], 3, Identification::UnitLatentVariance).unwrap_err();
    assert_eq!(out_of_range, StatsError::OutOfRange { what: "indicator (observed variable)", index: 5, len: 3 });
    let model = SemModel::cfa(&[vec![0, 1, 2]], 3, Identification::UnitLatentVariance).unwrap();
    let names = model.clone().with_names(vec!["a".into(), "b".into()], vec!["f".into()]).unwrap_err();
    assert!(matches!(names, StatsError::SizeMismatch { what: "observed variable names", expected: 3, found: 2 }));
    let s = DMatrix::<f64>::identity(4, 4);
    let wrong = model.fit(&s, 100, &FitOptions::default()).unwrap_err();
    assert!(matches!(wrong, StatsError::SizeMismatch { expected: 3, found: 4, .. }), "{wrong:?}");
    // Two indicators per factor, two correlated factors: 9 free parameters, 10 moments; with
    // one indicator each and free error variances, 5 free parameters for 3 moments.
    let one_each = SemModel::cfa(&[vec![0], vec![1]], 2, Identification::UnitLatentVariance).unwrap();
    let e = one_each.fit(&DMatrix::identity(2, 2), 100, &FitOptions::default()).unwrap_err();
    assert!(matches!(e, StatsError::NotIdentified { moments: 3, .. }), "{e:?}");
    let start = FitOptions { start: Some(vec![0.5]), ..FitOptions::default() };
    let e = model.fit(&DMatrix::identity(3, 3), 100, &start).unwrap_err();
    assert!(matches!(e, StatsError::SizeMismatch { what: "starting values for the free parameters", found: 1, .. }));
}
