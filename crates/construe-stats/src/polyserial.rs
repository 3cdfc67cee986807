//! Polyserial correlation of a continuous and an ordinal variable: thresholds from the
//! ordinal margin and the latent correlation by maximum likelihood (two-step, Olsson, Drasgow
//! & Dorans 1982, or joint with the thresholds). Central type: `PolyserialEstimate`.
//! Must never return NaN for empty categories (they are merged and recorded) or panic on data.

use super::StatsError;
use super::bvn::{norm_cdf, norm_pdf};
use super::polychoric::{
    CategoryMerge, MAX_CORRELATION, Margin, OrdinalFit, increasing, maximize_newton, maximize_rho, non_empty,
    se_from_curvature, thresholds_from_counts,
};
use serde::{Deserialize, Serialize};

/// Floor for an observation's category probability inside log(); see polychoric.rs.
const MIN_PROBABILITY: f64 = 1e-300;

/// Result of a polyserial fit; thresholds are those of the ordinal variable after merging
/// empty categories (merges are reported with `Margin::Second`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PolyserialEstimate {
    pub rho: f64,
    /// SE of ρ from the observed information; `None` at the bound or with non-positive
    /// information.
    pub se: Option<f64>,
    pub thresholds: Vec<f64>,
    pub n: usize,
    pub merged: Vec<CategoryMerge>,
    pub iterations: usize,
    pub fit: OrdinalFit,
    pub at_bound: bool,
    /// Σ log P(y_i | x_i) at the estimate (the marginal density of x, constant in ρ, omitted).
    pub log_likelihood: f64,
}

/// Polyserial correlation of complete pairs (`x[i]`, `y[i]`): `x` continuous, `y` zero-based
/// ordinal codes with `levels` categories.
///
/// Model (Olsson, Drasgow & Dorans 1982): (X, Y*) standard bivariate normal with correlation ρ,
/// y = j when τ_j < Y* <= τ_{j+1}. With z = (x - x̄)/s (s with divisor n - 1, as R's
/// polycor::polyserial standardises), P(y = j | z) = Φ((τ_{j+1} - ρz)/√(1-ρ²)) -
/// Φ((τ_j - ρz)/√(1-ρ²)). `TwoStep`: τ = Φ⁻¹ of the cumulative proportions of y, then ρ by
/// safeguarded Newton on ℓ(ρ) = Σ log P(y_i | z_i) with analytic first and second derivatives;
/// SE = (-ℓ'')^{-1/2} with thresholds fixed, which is what polycor::polyserial(ML = FALSE,
/// std.err = TRUE) reports. `Full`: (ρ, τ) jointly by Newton from the two-step solution, SE from
/// the inverse observed information. ρ is confined to ±`MAX_CORRELATION`.
pub fn polyserial(x: &[f64], y: &[u32], levels: usize, fit: OrdinalFit) -> Result<PolyserialEstimate, StatsError> {
    if x.len() != y.len() {
        return Err(StatsError::InvalidInput(format!(
            "continuous and ordinal slices differ in length ({} and {})",
            x.len(),
            y.len()
        )));
    }
    if let Some(bad) = x.iter().position(|v| !v.is_finite()) {
        return Err(StatsError::InvalidInput(format!("continuous value {} at position {bad} is not finite", x[bad])));
    }
    let n = x.len();
    if n < 3 {
        return Err(StatsError::NotEnoughData { what: "polyserial correlation".into(), needed: 3, found: n });
    }
    let mut counts = vec![0_u64; levels];
    for &c in y {
        match counts.get_mut(c as usize) {
            Some(slot) => *slot += 1,
            None => {
                return Err(StatsError::InvalidInput(format!("ordinal code {c} outside {levels} levels")));
            }
        }
    }
    let (keep, merged) = non_empty(&counts, Margin::Second);
    if keep.len() < 2 {
        return Err(StatsError::Constant { what: "ordinal variable".into() });
    }
    // Collapsed category of each original code (empty codes never occur in `y`).
    let mut collapsed = vec![0_usize; levels];
    for (new, &old) in keep.iter().enumerate() {
        collapsed[old] = new;
    }
    let cat: Vec<usize> = y.iter().map(|&c| collapsed[c as usize]).collect();
    let kept_counts: Vec<u64> = keep.iter().map(|&c| counts[c]).collect();
    let tau = thresholds_from_counts(&kept_counts);

    let mean = x.iter().sum::<f64>() / n as f64;
    let ss = x.iter().map(|v| (v - mean).powi(2)).sum::<f64>();
    let sd = (ss / (n - 1) as f64).sqrt();
    if sd <= 0.0 || !sd.is_finite() {
        return Err(StatsError::Constant { what: "continuous variable".into() });
    }
    let z: Vec<f64> = x.iter().map(|v| (v - mean) / sd).collect();

    let lik = Likelihood { z: &z, cat: &cat, tau: pad(&tau) };
    let start = start_value(&z, &cat, &tau);
    let (rho, iterations) = maximize_rho(|r| lik.eval(r), start, "polyserial correlation")?;
    let (ll, _, d2) = lik.eval(rho);
    let at_bound = rho.abs() >= MAX_CORRELATION - 1e-9;
    let two_step = PolyserialEstimate {
        rho,
        se: if at_bound { None } else { se_from_curvature(d2) },
        thresholds: tau,
        n,
        merged,
        iterations,
        fit: OrdinalFit::TwoStep,
        at_bound,
        log_likelihood: ll,
    };
    match fit {
        OrdinalFit::TwoStep => Ok(two_step),
        OrdinalFit::Full => full_ml(&z, &cat, two_step),
    }
}

fn pad(t: &[f64]) -> Vec<f64> {
    let mut v = Vec::with_capacity(t.len() + 2);
    v.push(f64::NEG_INFINITY);
    v.extend_from_slice(t);
    v.push(f64::INFINITY);
    v
}

/// Start for Newton: Olsson, Drasgow & Dorans' (1982) ad hoc estimator
/// r_xy · s_y / Σ φ(τ_j) on the collapsed category scores, kept inside ±0.95.
fn start_value(z: &[f64], cat: &[usize], tau: &[f64]) -> f64 {
    let n = z.len() as f64;
    let my = cat.iter().map(|&c| c as f64).sum::<f64>() / n;
    let (mut szy, mut syy) = (0.0, 0.0);
    for (&zi, &c) in z.iter().zip(cat) {
        let d = c as f64 - my;
        szy += zi * d;
        syy += d * d;
    }
    // z has unit (n - 1) variance, so r_xy = szy / sqrt((n - 1) syy).
    let r = szy / ((n - 1.0) * syy).sqrt();
    let sy = (syy / n).sqrt();
    let denom: f64 = tau.iter().map(|&t| norm_pdf(t)).sum();
    let est = r * sy / denom;
    if est.is_finite() { est.clamp(-0.95, 0.95) } else { 0.0 }
}

/// P(lo < Y* <= hi) for standardised bounds, computed on the side of the mean where it does
/// not cancel.
fn interval(u_lo: f64, u_hi: f64) -> f64 {
    if u_lo > 0.0 { norm_cdf(-u_lo) - norm_cdf(-u_hi) } else { norm_cdf(u_hi) - norm_cdf(u_lo) }
}

struct Likelihood<'a> {
    z: &'a [f64],
    cat: &'a [usize],
    /// Thresholds padded with ∓∞.
    tau: Vec<f64>,
}

impl Likelihood<'_> {
    /// (ℓ, ℓ', ℓ'') in ρ. With s = √(1-ρ²) and u = (τ - ρz)/s: u' = (ρτ - z)/s³,
    /// u'' = τ/s³ + 3ρ(ρτ - z)/s⁵, so P' = φ(u_hi)u_hi' - φ(u_lo)u_lo' and
    /// P'' = Σ ±φ(u)(u'' - u u'²); infinite thresholds contribute 0.
    fn eval(&self, rho: f64) -> (f64, f64, f64) {
        let one_minus = 1.0 - rho * rho;
        let s = one_minus.sqrt();
        let s3 = s * one_minus;
        let s5 = s3 * one_minus;
        let (mut ll, mut d1, mut d2) = (0.0, 0.0, 0.0);
        let terms = |t: f64, zi: f64| -> (f64, f64, f64) {
            if t.is_infinite() {
                return (t, 0.0, 0.0);
            }
            let u = (t - rho * zi) / s;
            let du = (rho * t - zi) / s3;
            let ddu = t / s3 + 3.0 * rho * (rho * t - zi) / s5;
            let f = norm_pdf(u);
            (u, f * du, f * (ddu - u * du * du))
        };
        for (&zi, &c) in self.z.iter().zip(self.cat) {
            let (u_lo, g_lo, h_lo) = terms(self.tau[c], zi);
            let (u_hi, g_hi, h_hi) = terms(self.tau[c + 1], zi);
            let p = interval(u_lo, u_hi).max(MIN_PROBABILITY);
            let dp = g_hi - g_lo;
            let ddp = h_hi - h_lo;
            ll += p.ln();
            d1 += dp / p;
            d2 += ddp / p - (dp / p).powi(2);
        }
        (ll, d1, d2)
    }
}

/// Joint ML of (ρ, τ) from the two-step solution.
fn full_ml(z: &[f64], cat: &[usize], two_step: PolyserialEstimate) -> Result<PolyserialEstimate, StatsError> {
    let mut theta = Vec::with_capacity(two_step.thresholds.len() + 1);
    theta.push(two_step.rho);
    theta.extend_from_slice(&two_step.thresholds);
    let value_grad = |t: &[f64]| full_gradient(z, cat, t[0], &t[1..]);
    let feasible = |t: &[f64]| t[0].abs() <= MAX_CORRELATION && increasing(&t[1..]);
    let opt = maximize_newton(theta, value_grad, feasible, "polyserial joint ML")?;
    let rho = opt.theta[0];
    let at_bound = rho.abs() >= MAX_CORRELATION - 1e-9;
    let se = opt.covariance.as_ref().and_then(|cov| {
        let v = cov[(0, 0)];
        (v > 0.0 && !at_bound).then(|| v.sqrt())
    });
    Ok(PolyserialEstimate {
        rho,
        se,
        thresholds: opt.theta[1..].to_vec(),
        fit: OrdinalFit::Full,
        at_bound,
        iterations: two_step.iterations + opt.iterations,
        log_likelihood: opt.value,
        ..two_step
    })
}

/// ℓ and its gradient in (ρ, τ_1..τ_{k-1}); ∂u/∂τ = 1/s, so threshold τ_m gains φ(u)/(sP)
/// from the category below it and loses it from the category above.
fn full_gradient(z: &[f64], cat: &[usize], rho: f64, tau: &[f64]) -> (f64, Vec<f64>) {
    let padded = pad(tau);
    let one_minus = 1.0 - rho * rho;
    let s = one_minus.sqrt();
    let s3 = s * one_minus;
    let mut grad = vec![0.0; tau.len() + 1];
    let mut ll = 0.0;
    for (&zi, &c) in z.iter().zip(cat) {
        let (lo, hi) = (padded[c], padded[c + 1]);
        let u_lo = (lo - rho * zi) / s;
        let u_hi = (hi - rho * zi) / s;
        let p = interval(u_lo, u_hi).max(MIN_PROBABILITY);
        let (f_lo, f_hi) = (norm_pdf(u_lo), norm_pdf(u_hi));
        let du = |t: f64| if t.is_finite() { (rho * t - zi) / s3 } else { 0.0 };
        ll += p.ln();
        grad[0] += (f_hi * du(hi) - f_lo * du(lo)) / p;
        if c < tau.len() {
            grad[c + 1] += f_hi / (s * p);
        }
        if c >= 1 {
            grad[c] -= f_lo / (s * p);
        }
    }
    (ll, grad)
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde::Deserialize;

    #[derive(Deserialize)]
    struct Fixture {
        cases: Vec<Case>,
    }

    #[derive(Deserialize)]
    struct Case {
        name: String,
        levels: f64,
        x: Vec<f64>,
        y: Vec<f64>,
        two_step: Reference,
        two_step_tight: Reference,
        full_polished: Reference,
    }

    #[derive(Deserialize)]
    struct Reference {
        rho: f64,
        se: f64,
        #[serde(default)]
        cuts: Vec<f64>,
    }

    fn fixture() -> Fixture {
        crate::reference!("polychoric/polyserial.json")
    }

    fn codes(y: &[f64]) -> Vec<u32> {
        y.iter().map(|&v| v as u32).collect()
    }

    // Reference: R 4.2.2, polycor 0.8.1 polyserial(x, y, ML = FALSE, std.err = TRUE); rho
    // compared with the call at control = list(reltol = 1e-14) (the default reltol stops BFGS
    // up to 5e-4 short, as on the fixture's last case), SE with both calls, thresholds exact.
    #[test]
    fn two_step_matches_polycor() {
        let fx = fixture();
        assert!(fx.cases.len() >= 3);
        for case in &fx.cases {
            let est = polyserial(&case.x, &codes(&case.y), case.levels as usize, OrdinalFit::TwoStep).unwrap();
            assert!(
                (est.rho - case.two_step_tight.rho).abs() < 1e-4,
                "{}: {} vs {}",
                case.name,
                est.rho,
                case.two_step_tight.rho
            );
            let se = est.se.unwrap();
            assert!((se - case.two_step_tight.se).abs() < 1e-3, "{}", case.name);
            assert!((se - case.two_step.se).abs() < 1e-3, "{}", case.name);
            assert_eq!(est.thresholds.len(), case.two_step.cuts.len());
            for (t, w) in est.thresholds.iter().zip(&case.two_step.cuts) {
                assert!((t - w).abs() < 1e-10, "{}", case.name);
            }
        }
    }

    // Reference: polyserial(ML = TRUE, std.err = TRUE) polished by optim(method = "BFGS") on
    // the same likelihood (tests/reference/polychoric/make_fixtures.R).
    #[test]
    fn full_ml_matches_polycor() {
        for case in &fixture().cases {
            let est = polyserial(&case.x, &codes(&case.y), case.levels as usize, OrdinalFit::Full).unwrap();
            let reference = &case.full_polished;
            assert!((est.rho - reference.rho).abs() < 1e-4, "{}", case.name);
            assert!((est.se.unwrap() - reference.se).abs() < 1e-3, "{}", case.name);
            for (t, w) in est.thresholds.iter().zip(&reference.cuts) {
                assert!((t - w).abs() < 1e-3, "{}", case.name);
            }
        }
    }

    #[test]
    fn empty_level_is_merged() {
        let fx = fixture();
        let case = fx.cases.iter().find(|c| c.name.contains("empty")).unwrap();
        let est = polyserial(&case.x, &codes(&case.y), 6, OrdinalFit::TwoStep).unwrap();
        assert_eq!(est.merged, vec![CategoryMerge { margin: Margin::Second, empty: 2, into: 3 }]);
        assert_eq!(est.thresholds.len(), 4);
    }

    #[test]
    fn degenerate_inputs_are_errors() {
        let x = [1.0, 2.0, 3.0, 4.0];
        assert!(matches!(polyserial(&x, &[1, 1, 1, 1], 3, OrdinalFit::TwoStep), Err(StatsError::Constant { .. })));
        assert!(matches!(
            polyserial(&[2.0; 4], &[0, 1, 0, 1], 2, OrdinalFit::TwoStep),
            Err(StatsError::Constant { .. })
        ));
        assert!(matches!(
            polyserial(&[1.0, f64::NAN, 2.0], &[0, 1, 0], 2, OrdinalFit::TwoStep),
            Err(StatsError::InvalidInput(_))
        ));
        assert!(matches!(polyserial(&x, &[0, 1, 5, 1], 3, OrdinalFit::TwoStep), Err(StatsError::InvalidInput(_))));
    }
}
