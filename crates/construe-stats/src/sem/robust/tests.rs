//! The robust estimators against tests/reference/robust/fixtures.json, an independent numpy /
//! scipy implementation of the published formulas (make_fixtures.py beside it; versions in the
//! file): DWLS estimates, sandwich SEs and the scaled-and-shifted statistic (Muthén, du Toit &
//! Spisic 1997; Asparouhov & Muthén 2010), ML sandwich SEs and the Satorra-Bentler (1994)
//! scaled statistic, robust RMSEA (Brosseau-Liard, Savalei & Li 2012; Savalei 2018) and robust
//! CFI / TLI (Brosseau-Liard & Savalei 2014). Tolerance 1e-4 relative throughout.

use nalgebra::DMatrix;
use serde_json::Value;

use super::*;
use crate::acov::Dense;
use crate::sem::model::{Identification, Matrix};

fn matrix(v: &Value) -> DMatrix<f64> {
    let rows: Vec<Vec<f64>> = serde_json::from_value(v.clone()).unwrap();
    DMatrix::from_fn(rows.len(), rows[0].len(), |r, c| rows[r][c])
}

fn case(name: &str) -> Value {
    let fixture: Value = crate::reference!("robust/fixtures.json");
    fixture["cases"].as_array().unwrap().iter().find(|c| c["name"] == name).unwrap().clone()
}

fn dense(c: &Value, p: usize, correlation: bool) -> Dense {
    let elements: Vec<Element> = serde_json::from_value(c["elements"].clone()).unwrap();
    Dense::new(p, c["n"].as_u64().unwrap() as usize, correlation, &elements, matrix(&c["v"])).unwrap()
}

fn close(what: &str, got: f64, want: f64) {
    let tol = 1e-4 * want.abs().max(1e-3);
    assert!((got - want).abs() <= tol, "{what}: {got} vs reference {want}");
}

fn check_fit(c: &Value, rf: &RobustFit) {
    let want = &c["fit"];
    let f = &rf.fit.indices;
    assert_eq!(f.df as u64, want["df"].as_u64().unwrap());
    close("naive statistic", rf.correction.naive, c["naive"].as_f64().unwrap());
    close("tr(UV)", rf.correction.trace, c["trace"].as_f64().unwrap());
    close("scale a", rf.correction.scale, c["scale"].as_f64().unwrap());
    if let Some(shift) = c["shift"].as_f64() {
        close("shift b", rf.correction.shift, shift);
        close("tr((UV)^2)", rf.correction.trace_squared.unwrap(), c["trace_squared"].as_f64().unwrap());
    }
    close("corrected chi-square", f.chisq, want["chisq"].as_f64().unwrap());
    close("p", f.p_value, want["p"].as_f64().unwrap());
    close("robust RMSEA", f.rmsea, want["rmsea"].as_f64().unwrap());
    close("robust RMSEA lower", f.rmsea_ci.0, want["rmsea_ci"][0].as_f64().unwrap());
    close("robust RMSEA upper", f.rmsea_ci.1, want["rmsea_ci"][1].as_f64().unwrap());
    close("robust CFI", f.cfi, want["cfi"].as_f64().unwrap());
    close("robust TLI", f.tli, want["tli"].as_f64().unwrap());
}

fn check_entry(rf: &RobustFit, c: &Value, name: &str, matrix: Matrix, row: usize, col: usize) {
    let e = rf.fit.entry(matrix, row, col).unwrap_or_else(|| panic!("no entry {name}"));
    let want = &c["parameters"][name];
    close(&format!("{name} estimate"), e.est, want["est"].as_f64().unwrap());
    close(&format!("{name} robust se"), e.se.unwrap(), want["se"].as_f64().unwrap());
}

#[test]
fn dwls_cfa_matches_the_reference() {
    let c = case("dwls_cfa");
    let r = matrix(&c["r"]);
    let v = dense(&c, 6, true);
    let model = SemModel::cfa(&[vec![0, 1, 2], vec![3, 4, 5]], 6, Identification::UnitLatentVariance).unwrap();
    let rf = fit_dwls(&model, &r, &v, &FitOptions::default()).unwrap();
    assert!(rf.fit.converged);
    for i in 0..6 {
        check_entry(&rf, &c, &format!("x{}", i + 1), Matrix::Lambda, i, i / 3);
        check_entry(&rf, &c, &format!("theta_x{}", i + 1), Matrix::Theta, i, i);
    }
    check_entry(&rf, &c, "phi", Matrix::Psi, 1, 0);
    check_fit(&c, &rf);
}

// Above the full-block limit only V's diagonal and the sandwich are used: the same estimates
// and robust SEs, and the scaled statistic T df / tr(UV) with the reference's tr(UV).
#[test]
fn dwls_without_the_full_block_scales_the_statistic() {
    let c = case("dwls_cfa");
    let r = matrix(&c["r"]);
    let v = dense(&c, 6, true);
    let model = SemModel::cfa(&[vec![0, 1, 2], vec![3, 4, 5]], 6, Identification::UnitLatentVariance).unwrap();
    let rf = fit_dwls_with(&model, &r, &v, &FitOptions::default(), 0).unwrap();
    for i in 0..6 {
        check_entry(&rf, &c, &format!("x{}", i + 1), Matrix::Lambda, i, i / 3);
    }
    assert_eq!(rf.correction.kind, StatisticCorrection::Scaled);
    close("tr(UV)", rf.correction.trace, c["trace"].as_f64().unwrap());
    let df = c["fit"]["df"].as_f64().unwrap();
    close("scaled statistic", rf.fit.indices.chisq, c["naive"].as_f64().unwrap() * df / c["trace"].as_f64().unwrap());
    close("robust RMSEA", rf.fit.indices.rmsea, c["fit"]["rmsea"].as_f64().unwrap());
    close("robust CFI", rf.fit.indices.cfi, c["fit"]["cfi"].as_f64().unwrap());
}

// A structural chain with a single indicator of fixed reliability: the constraint on its
// loading (Theta_77 = 1 - 0.7 fixed, Sigma_77 = 1) against the reference's explicit
// elimination lambda_7 = sqrt(0.7 / C_33).
#[test]
fn dwls_sem_with_single_indicator_matches_the_reference() {
    let c = case("dwls_sem");
    let r = matrix(&c["r"]);
    let v = dense(&c, 7, true);
    let groups = [vec![0, 1, 2], vec![3, 4, 5], vec![6]];
    let mut model = SemModel::sem(&groups, 7, Identification::UnitLatentVariance, &[(0, 1), (1, 2)]).unwrap();
    model.fix_error_variance(6, 0.3);
    let rf = fit_dwls(&model, &r, &v, &FitOptions::default()).unwrap();
    assert!(rf.fit.converged);
    for i in 0..6 {
        check_entry(&rf, &c, &format!("x{}", i + 1), Matrix::Lambda, i, i / 3);
        check_entry(&rf, &c, &format!("theta_x{}", i + 1), Matrix::Theta, i, i);
    }
    check_entry(&rf, &c, "x7", Matrix::Lambda, 6, 2);
    check_entry(&rf, &c, "b21", Matrix::Beta, 1, 0);
    check_entry(&rf, &c, "b32", Matrix::Beta, 2, 1);
    check_fit(&c, &rf);
}

#[test]
fn ml_sandwich_matches_the_reference() {
    let c = case("ml_cfa");
    let s = matrix(&c["s"]);
    let v = dense(&c, 6, false);
    let n = c["n"].as_u64().unwrap() as usize;
    let model = SemModel::cfa(&[vec![0, 1, 2], vec![3, 4, 5]], 6, Identification::UnitLatentVariance).unwrap();
    let ml = model.fit(&s, n, &FitOptions::default()).unwrap();
    for i in 0..6 {
        let want = &c["parameters"][format!("x{}", i + 1).as_str()];
        close(
            "information se",
            ml.entry(Matrix::Lambda, i, i / 3).unwrap().se.unwrap(),
            want["se_information"].as_f64().unwrap(),
        );
    }
    let rf = ml_sandwich(&ml, &s, &v).unwrap();
    for i in 0..6 {
        check_entry(&rf, &c, &format!("x{}", i + 1), Matrix::Lambda, i, i / 3);
        check_entry(&rf, &c, &format!("theta_x{}", i + 1), Matrix::Theta, i, i);
    }
    check_entry(&rf, &c, "phi", Matrix::Psi, 1, 0);
    close("baseline trace", rf.correction.baseline_trace, c["baseline_trace"].as_f64().unwrap());
    check_fit(&c, &rf);
}

// Under the normal-theory V = W^-1 / n at the fitted Sigma, the sandwich collapses to the
// inverse information (up to n / (n - 1); 1e-5: the fit takes its information one tiny
// scoring step before its final estimates) and the scaling factor c to (n - 1) / n
// (Satorra & Bentler 1994: the correction vanishes for normal data).
#[test]
fn ml_sandwich_reduces_to_information_under_normal_theory() {
    let c = case("ml_cfa");
    let s = matrix(&c["s"]);
    let n = 500usize;
    let model = SemModel::cfa(&[vec![0, 1, 2], vec![3, 4, 5]], 6, Identification::UnitLatentVariance).unwrap();
    let ml = model.fit(&s, n, &FitOptions::default()).unwrap();
    let elements = all_elements(6, false);
    let sig = &ml.implied;
    let gamma = DMatrix::from_fn(elements.len(), elements.len(), |a, b| {
        let ((j, l), (m, r)) = (elements[a], elements[b]);
        (sig[(j, m)] * sig[(l, r)] + sig[(j, r)] * sig[(l, m)]) / n as f64
    });
    let v = Dense::new(6, n, false, &elements, gamma).unwrap();
    let rf = ml_sandwich(&ml, &s, &v).unwrap();
    let ratio = (n as f64 - 1.0) / n as f64;
    for t in 0..ml.layout.len() {
        let (a, b) = (rf.fit.acov[(t, t)], ml.acov[(t, t)] * ratio);
        assert!((a / b - 1.0).abs() < 1e-5, "parameter {t}: {a} vs {b}");
    }
    assert!((rf.correction.trace / ml.df as f64 - ratio).abs() < 1e-5);
}

// The subset view renumbers items and orders each element (j, l) after mapping.
#[test]
fn subset_maps_and_orders_elements() {
    let elements = all_elements(4, true);
    let v = DMatrix::from_fn(6, 6, |a, b| if a == b { 1.0 + a as f64 } else { 0.0 });
    let dense = Dense::new(4, 100, true, &elements, v).unwrap();
    let sub = Subset::new(&dense, vec![3, 1]).unwrap();
    // (0, 1) of the subset is items (3, 1) -> element (1, 3), the fifth of the full list.
    assert_eq!(sub.block(&[(0, 1)]).unwrap()[(0, 0)], 5.0);
    assert!(sub.block(&[(1, 1)]).is_err());
    assert!(Subset::new(&dense, vec![4]).is_err());
}
