//! Robust statistics of samples, shared by the analysis.

/// Median of a slice (reorders it). 0 for an empty slice.
pub(crate) fn median_in_place(v: &mut [f64]) -> f64 {
    if v.is_empty() {
        return 0.0;
    }
    let mid = v.len() / 2;
    let (_, m, _) = v.select_nth_unstable_by(mid, f64::total_cmp);
    *m
}

/// The standard deviation of normally distributed values read robustly: 1.4826 × the median
/// absolute deviation from the median (reorders the slice).
pub(crate) fn robust_sd(v: &mut [f64]) -> f64 {
    let med = median_in_place(v);
    let mut dev: Vec<f64> = v.iter().map(|x| (x - med).abs()).collect();
    1.4826 * median_in_place(&mut dev)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn median_and_robust_spread_ignore_an_outlier() {
        let mut v = [3.0, 1.0, 2.0, 100.0, 2.0];
        assert_eq!(median_in_place(&mut v), 2.0);
        // Deviations from 2: 1, 1, 0, 98, 0 → median 1 → 1.4826.
        assert_eq!(robust_sd(&mut [3.0, 1.0, 2.0, 100.0, 2.0]), 1.4826);
    }
}
