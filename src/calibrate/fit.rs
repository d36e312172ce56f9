//! The numerical core of calibration: weighted isotonic regression by
//! pool-adjacent-violators, a minimum-slope pass over its blocks, and a
//! weighted least-squares line for data too sparse for a shape.

/// A run of consecutive inputs that the isotonic fit gives one common level.
#[derive(Clone, Debug, PartialEq, serde::Serialize)]
pub struct Block {
    /// Index of the first input in the block.
    pub start: usize,
    /// One past the index of the last input in the block.
    pub end: usize,
    /// The fitted level: the weighted mean of the block's values.
    pub level: f64,
    /// The sum of the block's weights.
    pub weight: f64,
}

impl Block {
    /// Number of inputs pooled in the block.
    pub fn len(&self) -> usize {
        self.end - self.start
    }

    /// True for a block that holds no input (never produced by [`isotonic_fit`]).
    pub fn is_empty(&self) -> bool {
        self.end == self.start
    }
}

/// Weighted isotonic (non-decreasing) regression by pool-adjacent-violators
/// (Ayer et al., Ann. Math. Statist. 26, 1955; from memory).
///
/// `xs_sorted_values` are the values in the order of their abscissa (here:
/// mean volts per cell in order of state of charge). Adjacent blocks are
/// pooled while the earlier level is greater than **or equal to** the later
/// one, so the returned levels increase strictly; pooling equal levels does not
/// change the least-squares fit. Pairs are taken up to the shorter slice; a
/// weight that is not finite and positive counts as 1, so that no input can
/// vanish from the fit or poison it.
pub fn isotonic_fit(xs_sorted_values: &[f64], weights: &[f64]) -> Vec<Block> {
    let mut stack: Vec<Block> = Vec::with_capacity(xs_sorted_values.len());
    for (i, (&value, &w)) in xs_sorted_values.iter().zip(weights).enumerate() {
        let weight = if w.is_finite() && w > 0.0 { w } else { 1.0 };
        let mut block = Block {
            start: i,
            end: i + 1,
            level: value,
            weight,
        };
        while let Some(prev) = stack.last() {
            if prev.level < block.level {
                break;
            }
            block = pool(prev, &block);
            stack.pop();
        }
        stack.push(block);
    }
    stack
}

fn pool(a: &Block, b: &Block) -> Block {
    let weight = a.weight + b.weight;
    Block {
        start: a.start,
        end: b.end,
        level: (a.level * a.weight + b.level * b.weight) / weight,
        weight,
    }
}

/// A fitted level placed at the weighted mean abscissa of its block.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct Level {
    pub block: Block,
    pub x_mean: f64,
}

/// Pool each end level with its neighbour until it holds at least
/// `min_weight`. Isotonic regression is inconsistent at the ends of the range:
/// a low first point or a high last point forms a block of its own, since no
/// neighbour beyond it can pool it (the "spiking" of isotonic estimators at the
/// boundary; Woodroofe & Sun, Statistica Sinica 3, 1993, from memory).
pub(crate) fn pool_ends(mut levels: Vec<Level>, min_weight: f64) -> Vec<Level> {
    while levels.len() >= 2 && levels[0].block.weight < min_weight {
        let merged = merge_levels(&levels[0], &levels[1]);
        levels.splice(0..2, [merged]);
    }
    while levels.len() >= 2 && levels[levels.len() - 1].block.weight < min_weight {
        let n = levels.len();
        let merged = merge_levels(&levels[n - 2], &levels[n - 1]);
        levels.splice(n - 2..n, [merged]);
    }
    levels
}

/// Pool two neighbouring levels into one at their weighted mean abscissa.
pub(crate) fn merge_levels(a: &Level, b: &Level) -> Level {
    let block = pool(&a.block, &b.block);
    Level {
        x_mean: (a.x_mean * a.block.weight + b.x_mean * b.block.weight) / block.weight,
        block,
    }
}

/// Pool adjacent blocks whose rise per unit of `xs` is below `min_slope`,
/// pool-adjacent-violators style, so that the levels, placed at their blocks'
/// weighted mean abscissae, rise at least `min_slope` between neighbours.
///
/// `xs[i]` is the abscissa of input `i` and `weights[i]` its weight (as given to
/// [`isotonic_fit`]).
pub(crate) fn enforce_min_slope(
    blocks: &[Block],
    xs: &[f64],
    weights: &[f64],
    min_slope: f64,
) -> Vec<Level> {
    let x_mean = |b: &Block| {
        let (mut sum, mut wsum) = (0.0, 0.0);
        for i in b.start..b.end.min(xs.len()).min(weights.len()) {
            let w = if weights[i].is_finite() && weights[i] > 0.0 {
                weights[i]
            } else {
                1.0
            };
            sum += xs[i] * w;
            wsum += w;
        }
        if wsum > 0.0 {
            sum / wsum
        } else {
            f64::NAN
        }
    };
    let mut stack: Vec<Level> = Vec::with_capacity(blocks.len());
    for b in blocks {
        let mut level = Level {
            block: b.clone(),
            x_mean: x_mean(b),
        };
        while let Some(prev) = stack.last() {
            let dx = level.x_mean - prev.x_mean;
            let rise = level.block.level - prev.block.level;
            if dx > 0.0 && rise >= min_slope * dx {
                break;
            }
            let merged = pool(&prev.block, &level.block);
            level = Level {
                x_mean: x_mean(&merged),
                block: merged,
            };
            stack.pop();
        }
        stack.push(level);
    }
    stack
}

/// Unweighted least-squares line `y = intercept + slope·x`; `None` when the
/// abscissae do not vary.
pub(crate) fn least_squares(xs: &[f64], ys: &[f64]) -> Option<(f64, f64)> {
    let n = xs.len().min(ys.len());
    if n < 2 {
        return None;
    }
    let mx = xs[..n].iter().sum::<f64>() / n as f64;
    let my = ys[..n].iter().sum::<f64>() / n as f64;
    let sxx: f64 = xs[..n].iter().map(|x| (x - mx).powi(2)).sum();
    let sxy: f64 = xs[..n]
        .iter()
        .zip(&ys[..n])
        .map(|(x, y)| (x - mx) * (y - my))
        .sum();
    if sxx <= 0.0 || !sxx.is_finite() {
        return None;
    }
    let slope = sxy / sxx;
    Some((my - slope * mx, slope))
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn levels(blocks: &[Block]) -> Vec<f64> {
        blocks
            .iter()
            .flat_map(|b| std::iter::repeat(b.level).take(b.len()))
            .collect()
    }

    #[test]
    fn pava_textbook_example() {
        // Worked example, derived by hand: [1, 3, 2, 4] with unit weights pools
        // the violating pair (3, 2) to its mean 2.5 → [1, 2.5, 2.5, 4].
        let b = isotonic_fit(&[1.0, 3.0, 2.0, 4.0], &[1.0; 4]);
        assert_eq!(levels(&b), vec![1.0, 2.5, 2.5, 4.0]);
        assert_eq!(b.len(), 3);
        assert_eq!((b[1].start, b[1].end), (1, 3));
    }

    #[test]
    fn pava_weighted_and_cascading() {
        // Worked example, derived by hand: [4, 1] with weights [1, 3] pools to
        // (4·1 + 1·3)/4 = 1.75.
        let b = isotonic_fit(&[4.0, 1.0], &[1.0, 3.0]);
        assert_eq!(b.len(), 1);
        assert_relative_eq!(b[0].level, 1.75);
        assert_relative_eq!(b[0].weight, 4.0);
        // Worked example, derived by hand: [3, 3, 1] → pool (3, 3) as equal,
        // then with 1: (3+3+1)/3 = 7/3 for all three.
        let b = isotonic_fit(&[3.0, 3.0, 1.0], &[1.0; 3]);
        assert_eq!(b.len(), 1);
        assert_relative_eq!(b[0].level, 7.0 / 3.0);
        // A cascade, derived by hand: [1, 5, 4, 0] → 5,4 pool to 4.5, then with
        // 0 to 3, then 1 < 3 stops: [1, 3, 3, 3].
        let b = isotonic_fit(&[1.0, 5.0, 4.0, 0.0], &[1.0; 4]);
        assert_eq!(levels(&b), vec![1.0, 3.0, 3.0, 3.0]);
    }

    #[test]
    fn pava_never_panics_on_odd_input() {
        assert!(isotonic_fit(&[], &[]).is_empty());
        assert_eq!(isotonic_fit(&[1.0, 2.0, 3.0], &[1.0]).len(), 1);
        let b = isotonic_fit(&[2.0, 1.0], &[f64::NAN, -1.0]);
        assert_relative_eq!(b[0].level, 1.5);
    }

    #[test]
    fn least_squares_recovers_a_line() {
        // Derived: points on y = 2 + 0.5 x are fitted exactly.
        let xs = [0.0, 1.0, 2.0, 5.0];
        let ys: Vec<f64> = xs.iter().map(|x| 2.0 + 0.5 * x).collect();
        let (a, b) = least_squares(&xs, &ys).unwrap();
        assert_relative_eq!(a, 2.0, epsilon = 1e-12);
        assert_relative_eq!(b, 0.5, epsilon = 1e-12);
        assert!(least_squares(&[1.0, 1.0], &[1.0, 2.0]).is_none());
    }

    #[test]
    fn min_slope_pools_nearly_flat_neighbours() {
        // Derived by hand: levels 1.0 at x 0, 1.001 at x 10 (slope 1e-4 < 1e-3)
        // and 2.0 at x 20: the first two pool to 1.0005 at x 5.
        let xs = [0.0, 10.0, 20.0];
        let w = [1.0; 3];
        let blocks = isotonic_fit(&[1.0, 1.001, 2.0], &w);
        let lv = enforce_min_slope(&blocks, &xs, &w, 1e-3);
        assert_eq!(lv.len(), 2);
        assert_relative_eq!(lv[0].block.level, 1.0005, epsilon = 1e-12);
        assert_relative_eq!(lv[0].x_mean, 5.0);
    }
}
