//! Small descriptive statistics over slices: mean, sample standard deviation, quantiles.
//! Callers pass finite values only (the stage drops non-finite inputs on entry).

/// Arithmetic mean; `None` for an empty slice.
pub fn mean(values: &[f64]) -> Option<f64> {
    if values.is_empty() {
        return None;
    }
    Some(values.iter().sum::<f64>() / values.len() as f64)
}

/// Sample standard deviation (divisor n - 1); `None` below two values.
pub fn sample_sd(values: &[f64]) -> Option<f64> {
    if values.len() < 2 {
        return None;
    }
    let m = mean(values)?;
    let ss: f64 = values.iter().map(|v| (v - m) * (v - m)).sum();
    Some((ss / (values.len() - 1) as f64).sqrt())
}

/// Quantile `q` of ascending `sorted` values by linear interpolation between order statistics
/// (Hyndman and Fan 1996, Statistical Science, definition 7; the default of R and numpy).
/// `None` for an empty slice.
pub fn quantile_sorted(sorted: &[f64], q: f64) -> Option<f64> {
    if sorted.is_empty() {
        return None;
    }
    let pos = q.clamp(0.0, 1.0) * (sorted.len() - 1) as f64;
    let i = pos.floor() as usize;
    let f = pos - pos.floor();
    match sorted.get(i + 1) {
        Some(next) => Some(sorted[i] + f * (next - sorted[i])),
        None => Some(sorted[i]),
    }
}

/// [`quantile_sorted`] of `values` at each of `qs`, without sorting them: the order statistics
/// the quantiles need are selected (in the same total order, so each is the very value the
/// sorted slice holds at its rank), in linear time. `values` is reordered.
pub fn quantiles_unsorted(values: &mut [f64], qs: &[f64]) -> Vec<Option<f64>> {
    let n = values.len();
    if n == 0 {
        return vec![None; qs.len()];
    }
    let at = |q: f64| {
        let pos = q.clamp(0.0, 1.0) * (n - 1) as f64;
        (pos.floor() as usize, pos - pos.floor())
    };
    let mut ranks: Vec<usize> = qs
        .iter()
        .flat_map(|&q| {
            let (i, _) = at(q);
            [i, (i + 1).min(n - 1)]
        })
        .collect();
    ranks.sort_unstable();
    ranks.dedup();
    // Select each rank in turn: after selecting rank k, every later rank lies right of k.
    let mut value_at = std::collections::HashMap::new();
    let mut start = 0;
    for &k in &ranks {
        let (_, v, _) = values[start..].select_nth_unstable_by(k - start, f64::total_cmp);
        value_at.insert(k, *v);
        start = k + 1;
    }
    qs.iter()
        .map(|&q| {
            let (i, f) = at(q);
            let x = value_at[&i];
            Some(if i + 1 < n { x + f * (value_at[&(i + 1)] - x) } else { x })
        })
        .collect()
}

/// A sorted copy of `values` (total order, so the result is deterministic).
pub fn sorted(values: &[f64]) -> Vec<f64> {
    let mut v = values.to_vec();
    v.sort_by(f64::total_cmp);
    v
}

/// Feeds `item` into `top`, which keeps the first `n` items of a stable sort by `order` of
/// everything fed so far (in feeding order): an item enters only when it beats the n-th, so
/// millions of rows are never sorted to find a few.
pub fn keep_first_n<T>(top: &mut Vec<T>, item: T, n: usize, order: impl Fn(&T, &T) -> std::cmp::Ordering) {
    if n == 0 || (top.len() == n && order(&item, &top[n - 1]) != std::cmp::Ordering::Less) {
        return;
    }
    let at = top.partition_point(|x| order(x, &item) != std::cmp::Ordering::Greater);
    top.insert(at, item);
    top.truncate(n);
}

/// Relative change (now - before) / |before|; `None` when `before` is zero.
pub fn relative_change(before: f64, now: f64) -> Option<f64> {
    (before != 0.0).then(|| (now - before) / before.abs())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn selected_quantiles_equal_sorted_ones() {
        // Pseudo-random values with repeats, zeros of both signs and a wide range; every
        // quantile must be bit for bit that of the sorted slice.
        let mut x: u64 = 0x2545_f491_4f6c_dd1d;
        for n in [1usize, 2, 3, 10, 101, 5000] {
            let values: Vec<f64> = (0..n)
                .map(|k| {
                    x ^= x << 13;
                    x ^= x >> 7;
                    x ^= x << 17;
                    match k % 7 {
                        0 => 0.0,
                        1 => -0.0,
                        2 => 1.5,
                        _ => ((x >> 11) as f64 / (1u64 << 53) as f64 - 0.5) * 10f64.powi((x % 9) as i32 - 4),
                    }
                })
                .collect();
            let qs = [0.0, 0.01, 0.05, 0.1, 0.5, 0.9, 0.95, 0.99, 1.0];
            let s = sorted(&values);
            let mut v = values.clone();
            let got = quantiles_unsorted(&mut v, &qs);
            for (q, g) in qs.iter().zip(got) {
                assert_eq!(g.map(f64::to_bits), quantile_sorted(&s, *q).map(f64::to_bits), "n {n}, q {q}");
            }
        }
        assert_eq!(quantiles_unsorted(&mut [], &[0.5]), vec![None]);
    }

    #[test]
    fn mean_sd_quantiles() {
        // Values 1, 2, 3, 4: mean 2.5; squared deviations 2.25 + 0.25 + 0.25 + 2.25 = 5,
        // divided by n - 1 = 3 gives 5/3; median by definition 7: position 1.5 -> 2.5;
        // 10% quantile: position 0.3 -> 1.3.
        let v = [4.0, 1.0, 3.0, 2.0];
        assert_eq!(mean(&v), Some(2.5));
        assert!((sample_sd(&v).unwrap() - (5.0f64 / 3.0).sqrt()).abs() < 1e-15);
        let s = sorted(&v);
        assert!((quantile_sorted(&s, 0.5).unwrap() - 2.5).abs() < 1e-15);
        assert!((quantile_sorted(&s, 0.1).unwrap() - 1.3).abs() < 1e-15);
        assert_eq!(quantile_sorted(&s, 1.0), Some(4.0));
        assert_eq!(quantile_sorted(&[], 0.5), None);
        assert_eq!(sample_sd(&[1.0]), None);
        assert_eq!(relative_change(0.0, 1.0), None);
        assert_eq!(relative_change(-2.0, -1.0), Some(0.5));
    }
}
