//! Aggregates that do not disclose a single respondent's value (statistical disclosure
//! control, common practice): rounding to significant digits, and percentiles shown only when
//! enough answers lie beyond them. Central functions: `round_significant`,
//! `guarded_percentile` (from values) and `guarded_percentile_counted` (from level counts),
//! which agree bit for bit on the same data.

/// `x` rounded to `digits` significant digits (0, NaN and infinities unchanged). The power of
/// ten is applied by multiplying or dividing by an exact integer power, so 96882 to 2 digits
/// is exactly 97000.
pub fn round_significant(x: f64, digits: i32) -> f64 {
    if x == 0.0 || !x.is_finite() {
        return x;
    }
    let shift = digits - 1 - x.abs().log10().floor() as i32;
    let rounded = if shift >= 0 {
        let scale = 10f64.powi(shift);
        (x * scale).round() / scale
    } else {
        let scale = 10f64.powi(-shift);
        (x / scale).round() * scale
    };
    // Rounding 9.96 up to 10.0 can leave one digit too many in the last place; a second pass
    // at the new magnitude is exact.
    if rounded != 0.0 && rounded.abs().log10().floor() as i32 != x.abs().log10().floor() as i32 {
        return round_significant(rounded, digits);
    }
    rounded
}

/// The type-7 position h = (n − 1)p of the `p` quantile among `n` sorted answers (Hyndman &
/// Fan 1996) and its lower order statistic, or `None` when fewer than `min_beyond` answers
/// lie at or below it (p < 0.5) or at or above it (p ≥ 0.5): near the tails of a small sample
/// a percentile is close to one respondent's answer.
fn guarded_rank(n: usize, p: f64, min_beyond: usize) -> Option<(usize, f64)> {
    if n == 0 {
        return None;
    }
    let h = (n - 1) as f64 * p;
    let lo = h.floor() as usize;
    let beyond = if p < 0.5 { lo + 1 } else { n - h.ceil() as usize };
    (beyond >= min_beyond).then_some((lo, h))
}

/// The guarded `p` quantile of `values` (see `guarded_rank`), interpolated between the order
/// statistics around h. Reorders `values` (selection, O(n)).
pub fn guarded_percentile(values: &mut [f64], p: f64, min_beyond: usize) -> Option<f64> {
    let (lo, h) = guarded_rank(values.len(), p, min_beyond)?;
    let (_, &mut below, above) = values.select_nth_unstable_by(lo, f64::total_cmp);
    let next = above.iter().copied().min_by(f64::total_cmp).unwrap_or(below);
    Some(below + (h - lo as f64) * (next - below))
}

/// `guarded_percentile` from the sorted distinct values and their counts: the same order
/// statistics, found by cumulative counts instead of selection.
pub fn guarded_percentile_counted(distinct: &[f64], counts: &[usize], p: f64, min_beyond: usize) -> Option<f64> {
    let n: usize = counts.iter().sum();
    let (lo, h) = guarded_rank(n, p, min_beyond)?;
    let order = |i: usize| {
        let mut seen = 0;
        distinct.iter().zip(counts).find_map(|(v, c)| {
            seen += c;
            (i < seen).then_some(*v)
        })
    };
    let below = order(lo)?;
    let next = if lo + 1 < n { order(lo + 1)? } else { below };
    Some(below + (h - lo as f64) * (next - below))
}

#[cfg(test)]
mod tests {
    use super::*;

    // Hand-computed.
    #[test]
    fn significant_digits() {
        assert_eq!(round_significant(96882.3, 2), 97000.0);
        assert_eq!(round_significant(987654.321, 2), 990000.0);
        assert_eq!(round_significant(4.56789, 3), 4.57);
        assert_eq!(round_significant(-0.0123456, 2), -0.012);
        assert_eq!(round_significant(9.96, 2), 10.0);
        assert_eq!(round_significant(0.0, 2), 0.0);
        assert!(round_significant(f64::NAN, 2).is_nan());
    }

    // Type 7 (Hyndman & Fan 1996; R's quantile default), hand-computed.
    #[test]
    fn percentiles_interpolate_and_hide_thin_tails() {
        // Type 7 on 1..=101: h = 100 p, so the 5th percentile is 6 and the 95th is 96.
        let mut v: Vec<f64> = (1..=101).rev().map(f64::from).collect();
        assert_eq!(guarded_percentile(&mut v, 0.05, 5), Some(6.0));
        assert_eq!(guarded_percentile(&mut v, 0.95, 5), Some(96.0));
        // On 1..=100: h = 4.95 and 94.05.
        let mut v: Vec<f64> = (1..=100).map(f64::from).collect();
        assert!((guarded_percentile(&mut v, 0.05, 5).unwrap() - 5.95).abs() < 1e-12);
        assert!((guarded_percentile(&mut v, 0.95, 5).unwrap() - 95.05).abs() < 1e-12);
        // 80 answers: only 4 at or below h = 3.95; 81 answers: 5.
        let mut v: Vec<f64> = (1..=80).map(f64::from).collect();
        assert_eq!(guarded_percentile(&mut v, 0.05, 5), None);
        assert_eq!(guarded_percentile(&mut v, 0.95, 5), None);
        let mut v: Vec<f64> = (1..=81).map(f64::from).collect();
        assert_eq!(guarded_percentile(&mut v, 0.05, 5), Some(5.0));
        assert_eq!(guarded_percentile(&mut v, 0.95, 5), Some(77.0));
    }

    #[test]
    fn counted_percentiles_equal_selected_ones() {
        for n in [1usize, 4, 5, 80, 81, 100, 101, 257] {
            let mut present: Vec<f64> = (0..n).map(|i| f64::from(((i * 37) % 23) as u32) * 0.25).collect();
            let mut distinct = present.clone();
            distinct.sort_by(f64::total_cmp);
            distinct.dedup();
            let counts: Vec<usize> = distinct.iter().map(|d| present.iter().filter(|v| *v == d).count()).collect();
            for p in [0.05, 0.95] {
                let want = guarded_percentile(&mut present, p, 5);
                assert_eq!(
                    guarded_percentile_counted(&distinct, &counts, p, 5).map(f64::to_bits),
                    want.map(f64::to_bits),
                    "{n} {p}"
                );
            }
        }
    }
}
