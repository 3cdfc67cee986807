//! Resampling helpers for the nonparametric bootstrap (Efron 1979): stratified row draws and
//! percentile intervals. Central functions: `stratified_rows`, `percentile_interval`.
//! Replicate `r` of seed `s` draws from ChaCha8 seeded with `s` on stream `r + 1`, so each
//! replicate is reproducible alone and results never depend on the thread count.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// The random stream of bootstrap replicate `replicate` (0-based) under `seed`.
pub fn replicate_rng(seed: u64, replicate: usize) -> ChaCha8Rng {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(replicate as u64 + 1);
    rng
}

/// A seed for simulated replicate `replicate` (0-based) of group `group` (a design study's
/// sample size) under `seed`: the first word of ChaCha8 seeded with `seed` mixed with `group`
/// (multiplied by the 64-bit golden-ratio constant, so nearby groups get unrelated streams),
/// on stream `replicate + 1`. Each replicate's data can so be drawn alone, in any order.
pub fn replicate_seed(seed: u64, group: u64, replicate: usize) -> u64 {
    replicate_rng(seed ^ group.wrapping_mul(0x9E37_79B9_7F4A_7C15), replicate).random::<u64>()
}

/// Row indices drawn with replacement within each stratum (wave), strata in order 0, 1, …:
/// stratum `s` keeps its size. `stratum_of_row[r]` is row `r`'s stratum.
pub fn stratified_rows(stratum_of_row: &[u32], strata: usize, rng: &mut impl Rng) -> Vec<usize> {
    let mut out = Vec::with_capacity(stratum_of_row.len());
    for s in 0..strata as u32 {
        let rows: Vec<usize> = (0..stratum_of_row.len()).filter(|&r| stratum_of_row[r] == s).collect();
        for _ in 0..rows.len() {
            out.push(rows[rng.random_range(0..rows.len())]);
        }
    }
    out
}

/// The `p` quantile of sorted `values` by linear interpolation between order statistics
/// (Hyndman & Fan 1996 type 7, R's default); NaN when `values` is empty.
pub fn quantile_sorted(values: &[f64], p: f64) -> f64 {
    if values.is_empty() {
        return f64::NAN;
    }
    let h = (values.len() - 1) as f64 * p;
    let (lo, hi) = (h.floor() as usize, h.ceil() as usize);
    values[lo] + (h - lo as f64) * (values[hi] - values[lo])
}

/// The percentile 95% interval [2.5%, 97.5%] of `values` (type 7 quantiles; sorts in place).
pub fn percentile_interval(values: &mut [f64]) -> [f64; 2] {
    values.sort_by(f64::total_cmp);
    [quantile_sorted(values, 0.025), quantile_sorted(values, 0.975)]
}

#[cfg(test)]
mod tests {
    use super::*;

    // Replicate seeds depend on all three inputs and on nothing else.
    #[test]
    fn replicate_seeds_differ_by_seed_group_and_replicate() {
        let base = replicate_seed(7, 300, 0);
        assert_eq!(base, replicate_seed(7, 300, 0));
        assert_ne!(base, replicate_seed(8, 300, 0));
        assert_ne!(base, replicate_seed(7, 600, 0));
        assert_ne!(base, replicate_seed(7, 300, 1));
        let mut all: Vec<u64> = (0..50).flat_map(|r| [300, 600, 1000].map(|n| replicate_seed(1, n, r))).collect();
        all.sort_unstable();
        all.dedup();
        assert_eq!(all.len(), 150);
    }

    // R 4.x: quantile(1:10, c(.025, .975), type = 7) gives 1.225 and 9.775 (type 7:
    // h = (n - 1) p + 1 on 1-based order statistics; Hyndman & Fan 1996).
    #[test]
    fn percentile_interval_type_7() {
        let mut v: Vec<f64> = (1..=10).map(f64::from).rev().collect();
        let [lo, hi] = percentile_interval(&mut v);
        assert!((lo - 1.225).abs() < 1e-12 && (hi - 9.775).abs() < 1e-12);
        assert!(quantile_sorted(&[], 0.5).is_nan());
    }

    #[test]
    fn draws_stay_within_strata() {
        let strata = [0, 0, 0, 1, 1];
        let mut rng = replicate_rng(3, 0);
        let rows = stratified_rows(&strata, 2, &mut rng);
        assert_eq!(rows.len(), 5);
        assert!(rows[..3].iter().all(|&r| r < 3) && rows[3..].iter().all(|&r| r >= 3));
    }

    #[test]
    fn a_replicate_is_reproducible_alone() {
        let strata = vec![0u32; 50];
        let a = stratified_rows(&strata, 1, &mut replicate_rng(11, 7));
        let b = stratified_rows(&strata, 1, &mut replicate_rng(11, 7));
        let c = stratified_rows(&strata, 1, &mut replicate_rng(11, 8));
        assert_eq!(a, b);
        assert_ne!(a, c);
    }
}
