//! One classification tree grown on histogram-binned features with the Gini criterion
//! (CART, Breiman et al. 1984; randomised per split as in Breiman 2001, Machine Learning 45:5–32).
//!
//! Growth: depth-first over a flat array of in-bag samples `(row, class, weight)`, partitioned
//! in place node by node (stable, so each node's rows stay ascending and the gathers from the
//! feature columns stay cache-friendly). Bootstrap duplicates are integer weights, not copied
//! rows. At each node, features are drawn without replacement until `max_features` features
//! that are not constant in the node have been scanned; for each, a per-bin class-count
//! histogram is built over the node's samples and every bin boundary is scored.
//!
//! Why no histogram subtraction (build the smaller child, subtract it from the parent): with a
//! fresh random feature subset per node, the parent's histograms are for other features, and
//! building all F histograms to enable it costs F/√F times more than it saves.
//!
//! Gini decrease of a split of node t into L and R, with weighted class counts `n_c`:
//! `Δ = N_t·G_t − N_L·G_L − N_R·G_R`, `G = 1 − Σ_c (n_c/N)²`, which equals
//! `Σ_c L_c²/N_L + Σ_c R_c²/N_R − Σ_c T_c²/N_t`. Δ summed per feature (and normalised by the
//! forest) is the mean-decrease-in-impurity importance.

use rand::Rng;
use serde::{Deserialize, Serialize};

use super::bins::{BinEdges, BinnedMatrix};

/// `Node::feature` of a leaf.
const LEAF: u32 = u32::MAX;

/// Smallest Gini decrease (in weighted samples) that justifies a split: zero-gain splits only
/// add depth, and this is far above the f64 rounding of the sums (~1e-16 × N).
const MIN_GAIN: f64 = 1e-7;

/// A split (`feature`, `threshold`, children at `next` and `next + 1`; `x ≤ threshold` goes
/// left) or a leaf (`feature == LEAF`, class probabilities at `probs[next..next + n_classes]`).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
struct Node {
    feature: u32,
    threshold: f32,
    next: u32,
}

/// A fitted tree: flat nodes (root at 0) and the leaves' probability vectors in one array.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub(crate) struct Tree {
    nodes: Vec<Node>,
    probs: Vec<f32>,
}

impl Tree {
    /// Class probabilities of the leaf that `row` (one row of features) reaches.
    /// `x ≤ threshold` goes left, so NaN (never ≤) goes right.
    #[inline]
    pub(crate) fn leaf_probs(&self, row: &[f32], n_classes: usize) -> &[f32] {
        let mut i = 0usize;
        loop {
            let node = self.nodes[i];
            if node.feature == LEAF {
                let start = node.next as usize;
                return &self.probs[start..start + n_classes];
            }
            let go_left = row[node.feature as usize] <= node.threshold;
            i = node.next as usize + usize::from(!go_left);
        }
    }

    /// Number of nodes (splits and leaves).
    #[cfg(test)]
    pub(crate) fn n_nodes(&self) -> usize {
        self.nodes.len()
    }
}

/// Settings a tree needs (validated by the forest).
#[derive(Clone, Copy, Debug)]
pub(crate) struct GrowParams {
    pub max_depth: usize,
    pub min_samples_leaf: usize,
    pub max_features: usize,
    pub n_classes: usize,
}

/// One in-bag training row with its class and bootstrap count.
#[derive(Clone, Copy, Debug)]
struct Sample {
    row: u32,
    class: u32,
    weight: u32,
}

/// The best split of a node: left iff `code ≤ bin`.
#[derive(Clone, Copy, Debug, PartialEq)]
struct Split {
    feature: usize,
    bin: usize,
    /// Gini decrease Δ (see the module doc), in weighted samples.
    gain: f64,
}

/// Buffers reused across all nodes of a tree, so the split scan never allocates.
struct Scratch {
    /// `hist[b * n_classes + c]`: weight of class `c` in bin `b`; all zero between scans.
    hist: Vec<u32>,
    /// Total weight per bin; all zero between scans.
    bin_weight: Vec<u32>,
    left: Vec<u64>,
    totals: Vec<u64>,
    right_samples: Vec<Sample>,
}

impl Scratch {
    fn new(n_classes: usize, capacity: usize) -> Self {
        let max_bins = super::bins::MAX_BINS;
        Self {
            hist: vec![0; max_bins * n_classes],
            bin_weight: vec![0; max_bins],
            left: vec![0; n_classes],
            totals: vec![0; n_classes],
            right_samples: Vec::with_capacity(capacity),
        }
    }
}

/// Grows one tree on the rows with `weights[row] > 0` (`weights` = bootstrap counts).
/// Returns the tree and the summed Gini decrease per feature (unnormalised).
pub(crate) fn grow<R: Rng>(
    edges: &BinEdges,
    binned: &BinnedMatrix,
    y: &[u32],
    weights: &[u32],
    params: &GrowParams,
    rng: &mut R,
) -> (Tree, Vec<f64>) {
    let n_features = binned.n_features();
    let n_classes = params.n_classes;
    let mut samples: Vec<Sample> = weights
        .iter()
        .enumerate()
        .filter(|(_, &w)| w > 0)
        .map(|(r, &w)| Sample {
            row: r as u32,
            class: y[r],
            weight: w,
        })
        .collect();
    let mut scratch = Scratch::new(n_classes, samples.len());
    let mut perm: Vec<usize> = (0..n_features).collect();
    let mut importances = vec![0.0f64; n_features];
    let mut nodes = vec![Node {
        feature: LEAF,
        threshold: 0.0,
        next: 0,
    }];
    let mut probs = Vec::new();
    let min_leaf = params.min_samples_leaf as u64;

    // (node index, sample range, depth)
    let mut stack = vec![(0usize, 0usize, samples.len(), 0usize)];
    while let Some((node, start, end, depth)) = stack.pop() {
        let node_samples = &samples[start..end];
        scratch.totals.iter_mut().for_each(|t| *t = 0);
        for s in node_samples {
            scratch.totals[s.class as usize] += u64::from(s.weight);
        }
        let n_total: u64 = scratch.totals.iter().sum();
        let pure = scratch.totals.iter().filter(|&&t| t > 0).count() <= 1;
        let split = if depth < params.max_depth && n_total >= 2 * min_leaf && !pure {
            let draw = FeatureDraw {
                perm: &mut perm,
                next: 0,
                rng,
            };
            best_split(
                edges,
                binned,
                draw,
                params.max_features,
                node_samples,
                min_leaf,
                &mut scratch,
            )
        } else {
            None
        };
        match split {
            Some(split) => {
                let column = binned.column(split.feature);
                let n_left = stable_partition(
                    &mut samples[start..end],
                    |s| column[s.row as usize] as usize <= split.bin,
                    &mut scratch.right_samples,
                );
                let left = nodes.len();
                let leaf = Node {
                    feature: LEAF,
                    threshold: 0.0,
                    next: 0,
                };
                nodes.push(leaf);
                nodes.push(leaf);
                nodes[node] = Node {
                    feature: split.feature as u32,
                    threshold: edges.upper_edge(split.feature, split.bin),
                    next: left as u32,
                };
                importances[split.feature] += split.gain;
                stack.push((left + 1, start + n_left, end, depth + 1));
                stack.push((left, start, start + n_left, depth + 1));
            }
            None => {
                nodes[node].next = probs.len() as u32;
                let n = n_total as f64;
                probs.extend(scratch.totals.iter().map(|&t| (t as f64 / n) as f32));
            }
        }
    }
    (Tree { nodes, probs }, importances)
}

/// Uniform draws without replacement from `perm` (a lazy partial Fisher–Yates shuffle).
struct FeatureDraw<'a, R> {
    perm: &'a mut [usize],
    next: usize,
    rng: &'a mut R,
}

impl<R: Rng> Iterator for FeatureDraw<'_, R> {
    type Item = usize;

    fn next(&mut self) -> Option<usize> {
        if self.next >= self.perm.len() {
            return None;
        }
        let j = self.rng.gen_range(self.next..self.perm.len());
        self.perm.swap(self.next, j);
        self.next += 1;
        Some(self.perm[self.next - 1])
    }
}

/// Best split over `features` (taken in order until `max_features` of them were non-constant in
/// the node); ties keep the first. Requires `scratch.totals` = the node's class weights.
/// Children must each weigh at least `min_leaf`, and Δ must exceed `MIN_GAIN`.
fn best_split(
    edges: &BinEdges,
    binned: &BinnedMatrix,
    features: impl Iterator<Item = usize>,
    max_features: usize,
    samples: &[Sample],
    min_leaf: u64,
    scratch: &mut Scratch,
) -> Option<Split> {
    let n_total: u64 = scratch.totals.iter().sum();
    let parent_term = scratch
        .totals
        .iter()
        .map(|&t| (t as f64) * (t as f64))
        .sum::<f64>()
        / n_total as f64;
    let mut best: Option<Split> = None;
    let mut scanned = 0;
    for f in features {
        if scanned == max_features {
            break;
        }
        let (non_constant, candidate) = scan_feature(
            binned.column(f),
            edges.n_bins(f),
            samples,
            n_total,
            min_leaf,
            scratch,
        );
        if !non_constant {
            continue;
        }
        scanned += 1;
        if let Some((bin, proxy)) = candidate {
            let gain = proxy - parent_term;
            if gain > MIN_GAIN && best.map_or(true, |b| gain > b.gain) {
                best = Some(Split {
                    feature: f,
                    bin,
                    gain,
                });
            }
        }
    }
    best
}

/// Builds the class histogram of one feature over `samples`, scores every boundary between
/// non-empty bins by `Σ L_c²/N_L + Σ R_c²/N_R` (larger is better), and clears the histogram.
/// Returns whether the feature has two or more non-empty bins, and the best admissible
/// `(bin, score)`. Among equivalent boundaries (empty bins between two non-empty ones) the
/// middle one is chosen, so the threshold sits mid-gap as with sorted-value trees.
fn scan_feature(
    column: &[u8],
    n_bins: usize,
    samples: &[Sample],
    n_total: u64,
    min_leaf: u64,
    scratch: &mut Scratch,
) -> (bool, Option<(usize, f64)>) {
    let n_classes = scratch.totals.len();
    let Scratch {
        hist,
        bin_weight,
        left,
        totals,
        ..
    } = scratch;
    for s in samples {
        let b = column[s.row as usize] as usize;
        hist[b * n_classes + s.class as usize] += s.weight;
        bin_weight[b] += s.weight;
    }
    left.iter_mut().for_each(|l| *l = 0);
    let mut n_left = 0u64;
    let mut previous: Option<usize> = None;
    let mut non_empty = 0usize;
    let mut best: Option<(usize, f64)> = None;
    for b in 0..n_bins {
        if bin_weight[b] == 0 {
            continue;
        }
        non_empty += 1;
        if let Some(p) = previous {
            let n_right = n_total - n_left;
            if n_left >= min_leaf && n_right >= min_leaf {
                let (mut sum_left, mut sum_right) = (0.0f64, 0.0f64);
                for (l, t) in left.iter().zip(totals.iter()) {
                    let (l, r) = (*l as f64, (t - l) as f64);
                    sum_left += l * l;
                    sum_right += r * r;
                }
                let score = sum_left / n_left as f64 + sum_right / n_right as f64;
                if best.map_or(true, |(_, s)| score > s) {
                    best = Some(((p + b - 1) / 2, score));
                }
            }
        }
        let row = &mut hist[b * n_classes..(b + 1) * n_classes];
        for (l, h) in left.iter_mut().zip(row.iter_mut()) {
            *l += u64::from(*h);
            *h = 0;
        }
        n_left += u64::from(bin_weight[b]);
        bin_weight[b] = 0;
        previous = Some(b);
    }
    (non_empty >= 2, best)
}

/// Moves the samples satisfying `goes_left` to the front, keeping the order on both sides;
/// returns how many went left.
fn stable_partition(
    samples: &mut [Sample],
    goes_left: impl Fn(&Sample) -> bool,
    right: &mut Vec<Sample>,
) -> usize {
    right.clear();
    let mut n_left = 0;
    for k in 0..samples.len() {
        let s = samples[k];
        if goes_left(&s) {
            samples[n_left] = s;
            n_left += 1;
        } else {
            right.push(s);
        }
    }
    samples[n_left..].copy_from_slice(right);
    n_left
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    /// Slow, obviously correct reference: for every feature and every threshold between two
    /// consecutive distinct values, weighted Gini decrease computed from the impurity formula
    /// `N_t·G_t − N_L·G_L − N_R·G_R` with `G = 1 − Σ p_c²` (Breiman et al. 1984, CART).
    fn brute_force_best_gain(
        x: &[f32],
        n_features: usize,
        y: &[u32],
        w: &[u32],
        n_classes: usize,
        min_leaf: u64,
    ) -> Option<f64> {
        let n = y.len();
        let weighted_gini = |members: &[usize]| -> (u64, f64) {
            let mut counts = vec![0u64; n_classes];
            for &i in members {
                counts[y[i] as usize] += u64::from(w[i]);
            }
            let total: u64 = counts.iter().sum();
            if total == 0 {
                return (0, 0.0);
            }
            let g = 1.0
                - counts
                    .iter()
                    .map(|&c| (c as f64 / total as f64).powi(2))
                    .sum::<f64>();
            (total, total as f64 * g)
        };
        let all: Vec<usize> = (0..n).filter(|&i| w[i] > 0).collect();
        let (_, parent) = weighted_gini(&all);
        let mut best: Option<f64> = None;
        for f in 0..n_features {
            let mut values: Vec<f32> = all.iter().map(|&i| x[i * n_features + f]).collect();
            values.sort_by(f32::total_cmp);
            values.dedup();
            for t in values.windows(2).map(|v| v[0]) {
                let (l, r): (Vec<usize>, Vec<usize>) =
                    all.iter().partition(|&&i| x[i * n_features + f] <= t);
                let (nl, gl) = weighted_gini(&l);
                let (nr, gr) = weighted_gini(&r);
                if nl < min_leaf || nr < min_leaf {
                    continue;
                }
                let gain = parent - gl - gr;
                if gain > MIN_GAIN && best.map_or(true, |b| gain > b) {
                    best = Some(gain);
                }
            }
        }
        best
    }

    /// Histogram split search (with as many bins as distinct values, so binning loses nothing)
    /// must find the same best Gini decrease as the brute force. Tolerance 1e-9 relative: both
    /// are f64 sums of at most a few hundred integer-valued terms.
    #[test]
    fn histogram_split_matches_brute_force() {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        for case in 0..300 {
            let n = rng.gen_range(2..60);
            let n_features = rng.gen_range(1..5);
            let n_classes = rng.gen_range(2..5);
            let levels = rng.gen_range(1..12);
            let x: Vec<f32> = (0..n * n_features)
                .map(|_| rng.gen_range(0..levels) as f32 * 0.5 - 1.0)
                .collect();
            let y: Vec<u32> = (0..n).map(|_| rng.gen_range(0..n_classes) as u32).collect();
            let w: Vec<u32> = (0..n).map(|_| rng.gen_range(0..4)).collect();
            let min_leaf = rng.gen_range(1..4);
            let expected = brute_force_best_gain(&x, n_features, &y, &w, n_classes, min_leaf);

            let edges = BinEdges::fit(&x, n, n_features, 16).unwrap();
            let binned = edges.encode(&x, n);
            let samples: Vec<Sample> = (0..n)
                .filter(|&i| w[i] > 0)
                .map(|i| Sample {
                    row: i as u32,
                    class: y[i],
                    weight: w[i],
                })
                .collect();
            let mut scratch = Scratch::new(n_classes, n);
            for s in &samples {
                scratch.totals[s.class as usize] += u64::from(s.weight);
            }
            let found = best_split(
                &edges,
                &binned,
                0..n_features,
                n_features,
                &samples,
                min_leaf,
                &mut scratch,
            );
            match (expected, found) {
                (None, None) => {}
                (Some(e), Some(s)) => {
                    assert!(
                        (e - s.gain).abs() <= 1e-9 * e.abs().max(1.0),
                        "case {case}: {e} vs {s:?}"
                    );
                    // The stored threshold must reproduce that partition on the real values.
                    let t = edges.upper_edge(s.feature, s.bin);
                    let left: Vec<usize> = samples
                        .iter()
                        .map(|s| s.row as usize)
                        .filter(|&i| x[i * n_features + s.feature] <= t)
                        .collect();
                    assert!(!left.is_empty() && left.len() < samples.len());
                }
                other => panic!("case {case}: brute force vs histogram {other:?}"),
            }
            assert!(
                scratch.hist.iter().all(|&h| h == 0),
                "histogram not cleared"
            );
            assert!(
                scratch.bin_weight.iter().all(|&h| h == 0),
                "bin weights not cleared"
            );
        }
    }

    #[test]
    fn pure_tree_separates_training_data() {
        // Two well-separated classes on feature 1; feature 0 is noise.
        let n = 200;
        let x: Vec<f32> = (0..n)
            .flat_map(|i| [((i * 37) % 11) as f32, if i % 2 == 0 { -1.0 } else { 1.0 }])
            .collect();
        let y: Vec<u32> = (0..n).map(|i| (i % 2) as u32).collect();
        let edges = BinEdges::fit(&x, n, 2, 64).unwrap();
        let binned = edges.encode(&x, n);
        let params = GrowParams {
            max_depth: 5,
            min_samples_leaf: 1,
            max_features: 1,
            n_classes: 2,
        };
        let mut rng = ChaCha8Rng::seed_from_u64(1);
        let (tree, imp) = grow(&edges, &binned, &y, &vec![1; n], &params, &mut rng);
        for i in 0..n {
            let p = tree.leaf_probs(&x[i * 2..i * 2 + 2], 2);
            assert_eq!(p[y[i] as usize], 1.0);
        }
        assert!(imp[1] > 0.0);
        assert!(tree.n_nodes() >= 3);
    }
}
