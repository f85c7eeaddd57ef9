//! Per-feature quantile bin edges and the binned (u8, row-major) training matrix.
//!
//! Trees search splits over at most 256 bins per feature instead of over every distinct value:
//! a split scan then costs O(rows + bins) per feature and node, with no sorting. Codes are
//! stored row-major (one row of `n_features` bytes per sample): deep nodes hold rows scattered
//! over the matrix, and measured here a feature-major layout paid a cache miss per sample *and*
//! feature (~18 ns per sample in 64-sample nodes), while a row is one cache line shared by all
//! features drawn at the node. Bin edges are real feature values, so a fitted tree stores real
//! thresholds and prediction never bins its input.
//!
//! Definition: for feature `f` with sorted, strictly increasing edges `e_0 < … < e_{k-1}`
//! (`k ≤ n_bins − 1`), the code of a value `v` is `#{ j : e_j < v }`, so bin `b` holds
//! `(e_{b-1}, e_b]`, and `v ≤ e_b ⇔ code(v) ≤ b`. That equivalence is what lets a split found
//! on codes ("code ≤ b goes left") be stored as the real threshold `e_b` ("v ≤ e_b goes left").

use rayon::prelude::*;

use crate::error::{GroveError, Result};

/// Rows used to place the edges. Quantiles of 65 536 rows put ~256 rows in each of 256 bins,
/// which is plenty; sorting all rows of a 200k × 40 matrix would cost more than growing a tree.
const MAX_EDGE_SAMPLE_ROWS: usize = 65_536;

/// Largest number of bins: codes are `u8`.
pub(crate) const MAX_BINS: usize = 256;

/// Bin edges of every feature, fitted on a training matrix.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct BinEdges {
    /// `edges[f]` is strictly increasing; feature `f` has `edges[f].len() + 1` bins.
    edges: Vec<Vec<f32>>,
}

/// Codes of the training matrix, row-major (`n_rows × n_features`).
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct BinnedMatrix {
    n_features: usize,
    codes: Vec<u8>,
}

impl BinEdges {
    /// Fits at most `n_bins` quantile bins per feature on `x` (row-major, `n_rows × n_features`).
    ///
    /// Rows are subsampled with a fixed stride when there are more than 65 536 (deterministic,
    /// no RNG). A feature with at most `n_bins` distinct values gets one bin per value, with
    /// edges at the midpoints between consecutive values (as a sorted-value tree would split).
    /// Otherwise edges sit at the midpoints after the distinct values where the cumulative count
    /// first reaches `k·m/n_bins`, k = 1, 2, …; heavy ties make fewer, larger bins. A constant
    /// feature has one bin and is never split on.
    ///
    /// Errors with `GroveError::Data` naming the row and feature of the first NaN or infinite
    /// value: quantiles and Gini splits are undefined for them.
    pub(crate) fn fit(x: &[f32], n_rows: usize, n_features: usize, n_bins: usize) -> Result<Self> {
        assert_eq!(x.len(), n_rows * n_features, "matrix shape");
        assert!((2..=MAX_BINS).contains(&n_bins), "n_bins out of range");
        if let Some(pos) = x.iter().position(|v| !v.is_finite()) {
            return Err(GroveError::Data(format!(
                "training value at row {}, feature {} is {}; the forest needs finite feature values \
                 (replace NaN/inf before training)",
                pos / n_features,
                pos % n_features,
                x[pos]
            )));
        }
        let m = n_rows.min(MAX_EDGE_SAMPLE_ROWS);
        let rows: Vec<usize> = (0..m).map(|i| i * n_rows / m).collect();
        let edges = (0..n_features)
            .into_par_iter()
            .map(|f| {
                let mut values: Vec<f32> = rows.iter().map(|&r| x[r * n_features + f]).collect();
                values.sort_unstable_by(f32::total_cmp);
                quantile_edges(&values, n_bins)
            })
            .collect();
        Ok(Self { edges })
    }

    /// Number of bins of feature `f` (1 for a constant feature).
    #[cfg(test)]
    pub(crate) fn n_bins(&self, f: usize) -> usize {
        self.edges[f].len() + 1
    }

    /// The real threshold equivalent to "code ≤ b": the upper edge of bin `b` (`b < n_bins(f) − 1`).
    pub(crate) fn upper_edge(&self, f: usize, b: usize) -> f32 {
        self.edges[f][b]
    }

    /// Codes of `x` (row-major, `n_rows × n_features`), stored row-major; the code of `v` for
    /// feature `f` is the number of edges of `f` strictly below `v`.
    pub(crate) fn encode(&self, x: &[f32], n_rows: usize) -> BinnedMatrix {
        let n_features = self.edges.len();
        assert_eq!(x.len(), n_rows * n_features, "matrix shape");
        let mut codes = vec![0u8; n_rows * n_features];
        if n_features > 0 {
            codes
                .par_chunks_mut(n_features)
                .zip(x.par_chunks(n_features))
                .for_each(|(row_codes, row)| {
                    for ((c, &v), edges) in row_codes.iter_mut().zip(row).zip(&self.edges) {
                        *c = edges.partition_point(|&e| e < v) as u8;
                    }
                });
        }
        BinnedMatrix { n_features, codes }
    }
}

impl BinnedMatrix {
    pub(crate) fn n_features(&self) -> usize {
        self.n_features
    }

    /// Codes of all features of row `r`.
    #[inline]
    pub(crate) fn row(&self, r: usize) -> &[u8] {
        &self.codes[r * self.n_features..(r + 1) * self.n_features]
    }

    /// Hints the CPU to start loading row `r` (both ends: a row may straddle two cache lines).
    /// Deep tree nodes visit rows scattered over the matrix; issuing the loads a few samples
    /// ahead overlaps their latencies. No effect on results; a no-op off x86-64.
    #[inline]
    pub(crate) fn prefetch_row(&self, r: usize) {
        #[cfg(target_arch = "x86_64")]
        {
            use std::arch::x86_64::{_mm_prefetch, _MM_HINT_T0};
            let start = (r * self.n_features).min(self.codes.len().saturating_sub(1));
            let end = (start + self.n_features)
                .saturating_sub(1)
                .min(self.codes.len().saturating_sub(1));
            let base = self.codes.as_ptr();
            // SAFETY: `prefetch` is a hint that never faults or reads into Rust-visible state;
            // SSE is part of the x86-64 baseline; both offsets stay inside `codes`.
            unsafe {
                _mm_prefetch::<_MM_HINT_T0>(base.wrapping_add(start).cast());
                _mm_prefetch::<_MM_HINT_T0>(base.wrapping_add(end).cast());
            }
        }
        #[cfg(not(target_arch = "x86_64"))]
        let _ = r;
    }
}

/// Edges for one feature from its sorted sample (see [`BinEdges::fit`]).
fn quantile_edges(sorted: &[f32], n_bins: usize) -> Vec<f32> {
    // Runs of equal values: (value, count).
    let mut runs: Vec<(f32, usize)> = Vec::new();
    for &v in sorted {
        match runs.last_mut() {
            Some((last, count)) if *last == v => *count += 1,
            _ => runs.push((v, 1)),
        }
    }
    let mut edges = Vec::with_capacity(n_bins - 1);
    if runs.len() <= n_bins {
        edges.extend(runs.windows(2).map(|w| midpoint(w[0].0, w[1].0)));
        return edges;
    }
    let m = sorted.len() as f64;
    let mut k = 1usize;
    let mut cumulative = 0usize;
    for w in runs.windows(2) {
        cumulative += w[0].1;
        if cumulative as f64 >= k as f64 * m / n_bins as f64 {
            edges.push(midpoint(w[0].0, w[1].0));
            if edges.len() == n_bins - 1 {
                break;
            }
            while k as f64 * m / n_bins as f64 <= cumulative as f64 {
                k += 1;
            }
        }
    }
    edges
}

/// A value `t` with `a ≤ t < b` near the middle of `a < b` (f64 avoids overflow; rounding up to
/// `b` for adjacent floats falls back to `a`).
fn midpoint(a: f32, b: f32) -> f32 {
    let t = ((a as f64 + b as f64) * 0.5) as f32;
    if t >= a && t < b {
        t
    } else {
        a
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Slow reference for the code definition: count edges strictly below `v`.
    fn code_reference(edges: &BinEdges, f: usize, v: f32) -> u8 {
        edges.edges[f].iter().filter(|&&e| e < v).count() as u8
    }

    #[test]
    fn codes_match_definition_and_threshold_equivalence() {
        let n = 1000;
        let x: Vec<f32> = (0..n * 2)
            .map(|i| {
                if i % 2 == 0 {
                    ((i * 7919) % 53) as f32
                } else {
                    (i as f32).sin() * 3.0
                }
            })
            .collect();
        let edges = BinEdges::fit(&x, n, 2, 16).unwrap();
        let binned = edges.encode(&x, n);
        for f in 0..2 {
            assert!(edges.n_bins(f) <= 16);
            assert!(edges.edges[f].windows(2).all(|w| w[0] < w[1]));
            for r in 0..n {
                let v = x[r * 2 + f];
                let c = binned.row(r)[f];
                assert_eq!(c, code_reference(&edges, f, v));
                for b in 0..edges.n_bins(f) - 1 {
                    assert_eq!(v <= edges.upper_edge(f, b), c as usize <= b);
                }
            }
        }
    }

    #[test]
    fn few_distinct_values_get_one_bin_each_and_constant_one_bin() {
        let x = [1.0f32, 5.0, 3.0, 5.0, 1.0, 5.0];
        let edges = BinEdges::fit(&x, 3, 2, 64).unwrap();
        assert_eq!(edges.edges[0], vec![2.0]);
        assert_eq!(edges.n_bins(1), 1);
    }

    #[test]
    fn quantile_bins_are_balanced() {
        let values: Vec<f32> = (0..10_000).map(|i| i as f32).collect();
        let edges = quantile_edges(&values, 100);
        assert_eq!(edges.len(), 99);
        // Bin b holds values in (e_{b-1}, e_b]: each bin gets 100 of the 10 000 values.
        assert_eq!(edges[0], 99.5);
        assert_eq!(edges[98], 9899.5);
    }

    #[test]
    fn midpoint_of_adjacent_floats_stays_below_upper() {
        let a = 1.0f32;
        let b = f32::from_bits(a.to_bits() + 1);
        let t = midpoint(a, b);
        assert!(t >= a && t < b);
        let big = midpoint(f32::MAX / 2.0, f32::MAX);
        assert!(big.is_finite() && big > f32::MAX / 2.0 && big < f32::MAX);
    }

    #[test]
    fn non_finite_training_value_is_a_data_error() {
        let x = [1.0f32, 2.0, f32::NAN, 4.0];
        let err = BinEdges::fit(&x, 2, 2, 8).unwrap_err();
        assert!(matches!(err, GroveError::Data(ref m) if m.contains("row 1, feature 0")));
    }
}
