//! Means and 95 % confidence intervals over seeds.
//!
//! Seeds are the replicates of a run: every other axis is a condition the scenario chose, not a
//! random sample. So a group's spread is taken over seeds: the group's cells of one seed are
//! averaged first (one number per seed), and the mean and the interval are taken over those
//! per-seed numbers. Each seed counts once, however many of its cells the group holds.

use std::collections::BTreeMap;

/// Seeds needed before an interval is shown: with two, the t quantile (12.7) makes the
/// interval mostly a statement about the quantile, not about the data.
pub const MIN_SEEDS_FOR_CI: usize = 3;

/// A group's mean with its spread over seeds.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Stat {
    /// Mean over seeds of the per-seed means.
    pub mean: f64,
    /// Half-width of the 95 % Student-t interval of that mean; `None` below
    /// [`MIN_SEEDS_FOR_CI`] seeds.
    pub ci95_half: Option<f64>,
    /// Seeds that contributed (the sample size of the interval).
    pub seeds: usize,
    /// Cells that contributed.
    pub cells: usize,
}

/// Mean and interval over seeds of `(seed, value)` samples; non-finite values are left out
/// (the runner writes NaN for a metric it could not define). `None` when nothing is left.
pub fn over_seeds(samples: impl IntoIterator<Item = (u64, f64)>) -> Option<Stat> {
    let mut per_seed: BTreeMap<u64, (f64, usize)> = BTreeMap::new();
    let mut cells = 0;
    for (seed, v) in samples {
        if !v.is_finite() {
            continue;
        }
        let e = per_seed.entry(seed).or_insert((0.0, 0));
        e.0 += v;
        e.1 += 1;
        cells += 1;
    }
    if per_seed.is_empty() {
        return None;
    }
    let seed_means: Vec<f64> = per_seed.values().map(|(s, n)| s / *n as f64).collect();
    let (mean, ci95_half) = mean_ci95(&seed_means);
    Some(Stat {
        mean,
        ci95_half,
        seeds: seed_means.len(),
        cells,
    })
}

/// Sample mean and, from [`MIN_SEEDS_FOR_CI`] values on, the half-width
/// t(0.975, n−1) · s / √n of its 95 % confidence interval (s: sample standard deviation with
/// n − 1 in the denominator).
pub fn mean_ci95(values: &[f64]) -> (f64, Option<f64>) {
    let n = values.len();
    if n == 0 {
        return (f64::NAN, None);
    }
    let mean = values.iter().sum::<f64>() / n as f64;
    if n < MIN_SEEDS_FOR_CI {
        return (mean, None);
    }
    let var = values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1) as f64;
    let half = t_975(n - 1) * (var / n as f64).sqrt();
    (mean, Some(half))
}

/// Two-sided 95 % critical values t(0.975, ν) of Student's t for ν = 1..=30, to six decimals,
/// as tabulated in the NIST/SEMATECH e-Handbook of Statistical Methods, §1.3.6.7.2 "Critical
/// values of the Student's t distribution".
const T_975_TABLE: [f64; 30] = [
    12.706205, 4.302653, 3.182446, 2.776445, 2.570582, 2.446912, 2.364624, 2.306004, 2.262157,
    2.228139, 2.200985, 2.178813, 2.160369, 2.144787, 2.131450, 2.119905, 2.109816, 2.100922,
    2.093024, 2.085963, 2.079614, 2.073873, 2.068658, 2.063899, 2.059539, 2.055529, 2.051831,
    2.048407, 2.045230, 2.042272,
];

/// The 0.975 quantile of Student's t with `df` degrees of freedom (`df` ≥ 1).
///
/// Table for df ≤ 30; above, the Cornish–Fisher expansion of t in powers of 1/ν around the
/// normal quantile z (Abramowitz & Stegun, Handbook of Mathematical Functions, 1964,
/// eq. 26.7.5), which already agrees with the table at ν = 30 to 1e-5 and improves with ν.
pub fn t_975(df: usize) -> f64 {
    if df == 0 {
        return f64::NAN;
    }
    if df <= T_975_TABLE.len() {
        return T_975_TABLE[df - 1];
    }
    let z: f64 = 1.959_963_984_540_054; // Φ⁻¹(0.975)
    let nu = df as f64;
    let g1 = (z.powi(3) + z) / 4.0;
    let g2 = (5.0 * z.powi(5) + 16.0 * z.powi(3) + 3.0 * z) / 96.0;
    let g3 = (3.0 * z.powi(7) + 19.0 * z.powi(5) + 17.0 * z.powi(3) - 15.0 * z) / 384.0;
    let g4 = (79.0 * z.powi(9) + 776.0 * z.powi(7) + 1482.0 * z.powi(5)
        - 1920.0 * z.powi(3)
        - 945.0 * z)
        / 92160.0;
    z + g1 / nu + g2 / nu.powi(2) + g3 / nu.powi(3) + g4 / nu.powi(4)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The expansion and the table must meet at the switch-over, or intervals would jump
    /// when a run grows from 31 to 32 seeds.
    #[test]
    fn report_t_expansion_meets_table() {
        let nu = 30.0;
        let z: f64 = 1.959_963_984_540_054;
        let expansion = z
            + (z.powi(3) + z) / 4.0 / nu
            + (5.0 * z.powi(5) + 16.0 * z.powi(3) + 3.0 * z) / 96.0 / nu.powi(2)
            + (3.0 * z.powi(7) + 19.0 * z.powi(5) + 17.0 * z.powi(3) - 15.0 * z)
                / 384.0
                / nu.powi(3);
        assert!((expansion - t_975(30)).abs() < 2e-5, "{expansion}");
        // Known values beyond the table: t(0.975, 40) = 2.021075, t(0.975, 120) = 1.979930.
        assert!((t_975(40) - 2.021075).abs() < 2e-5, "{}", t_975(40));
        assert!((t_975(120) - 1.979930).abs() < 2e-5, "{}", t_975(120));
        // Monotone decreasing towards z.
        for df in 1..200 {
            assert!(t_975(df + 1) < t_975(df), "df {df}");
        }
        assert!(t_975(100_000) > 1.959_96 && t_975(100_000) < 1.96);
    }

    #[test]
    fn report_interval_by_hand() {
        // Values 1, 2, 4: mean 7/3, s² = (16/9 + 1/9 + 25/9) / 2 = 7/3.
        let (mean, half) = mean_ci95(&[1.0, 2.0, 4.0]);
        assert!((mean - 7.0 / 3.0).abs() < 1e-12);
        let expected = 4.302653 * (7.0f64 / 3.0).sqrt() / 3.0f64.sqrt();
        assert!((half.unwrap_or(f64::NAN) - expected).abs() < 1e-9);
        // Below three seeds: a mean, no interval.
        assert_eq!(mean_ci95(&[1.0, 3.0]), (2.0, None));
    }

    #[test]
    fn report_each_seed_counts_once() {
        // Seed 0 has two cells (1 and 3 → 2), seeds 1 and 2 one each; NaN is left out.
        let s = over_seeds([(0, 1.0), (0, 3.0), (1, 5.0), (2, 8.0), (2, f64::NAN)])
            .unwrap_or_else(|| panic!("no stat"));
        assert_eq!(s.seeds, 3);
        assert_eq!(s.cells, 4);
        assert!((s.mean - 5.0).abs() < 1e-12);
        assert!(over_seeds([(0, f64::NAN)]).is_none());
    }
}
