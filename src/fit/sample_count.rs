//! How many RANSAC samples give a chosen confidence of drawing one all-inlier sample.
//!
//! N = ⌈log(1 − p) / log(1 − w^s)⌉ for confidence p, inlier ratio w and sample size s
//! (Fischler & Bolles 1981; tabulated in Hartley & Zisserman, *Multiple View Geometry in
//! Computer Vision*, 2nd ed., Table 4.3).

/// Number of samples of size `s` needed to draw at least one all-inlier sample with
/// probability `confidence`, when a fraction `inlier_ratio` of the data are inliers.
/// Saturates at `u64::MAX` when the ratio is zero.
///
/// ```
/// // Hartley & Zisserman, Table 4.3: two-point samples, 50% outliers, p = 0.99.
/// assert_eq!(tiemark::fit::sample_count::sample_count(0.99, 0.5, 2), 17);
/// ```
pub fn sample_count(confidence: f64, inlier_ratio: f64, s: u32) -> u64 {
    let w = inlier_ratio.clamp(0.0, 1.0);
    if w >= 1.0 {
        return 1;
    }
    let good = w.powi(s as i32);
    if good <= 0.0 {
        return u64::MAX;
    }
    let n = (1.0 - confidence).ln() / (-good).ln_1p();
    if !n.is_finite() || n >= u64::MAX as f64 {
        u64::MAX
    } else {
        // Guard against 10.000000000000002 rounding up to 11.
        (n - 1e-9).ceil().max(1.0) as u64
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reproduces_hartley_zisserman_table_4_3() {
        // Hartley & Zisserman, Multiple View Geometry, 2nd ed., Table 4.3 (p = 0.99); columns
        // are the outlier proportion e = 5%, 10%, 20%, 25%, 30%, 40%, 50%.
        let outliers = [0.05, 0.10, 0.20, 0.25, 0.30, 0.40, 0.50];
        let table: [(u32, [u64; 7]); 3] = [
            (2, [2, 3, 5, 6, 7, 11, 17]),
            (3, [3, 4, 7, 9, 11, 19, 35]),
            (4, [3, 5, 9, 13, 17, 34, 72]),
        ];
        for (s, row) in table {
            for (e, want) in outliers.iter().zip(row) {
                assert_eq!(sample_count(0.99, 1.0 - e, s), want, "s={s} e={e}");
            }
        }
    }

    #[test]
    fn agrees_with_szeliski_table_6_2() {
        // Szeliski, Computer Vision: Algorithms and Applications (2010), Table 6.2.
        assert_eq!(sample_count(0.99, 0.5, 3), 35);
        assert_eq!(sample_count(0.99, 0.6, 6), 97);
        assert_eq!(sample_count(0.99, 0.5, 6), 293);
    }

    #[test]
    fn edge_cases() {
        assert_eq!(sample_count(0.99, 1.0, 2), 1);
        assert_eq!(sample_count(0.99, 0.0, 2), u64::MAX);
    }
}
