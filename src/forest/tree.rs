//! One classification tree grown on histogram-binned features with the Gini criterion
//! (CART, Breiman et al. 1984; randomised per split as in Breiman 2001, Machine Learning 45:5–32).
//!
//! Growth: depth-first over a flat array of in-bag samples `(row, class, weight)`, partitioned
//! in place node by node (stable, so each node's rows stay ascending and the gathers from the
//! binned rows stay as cache-friendly as they can). Bootstrap duplicates are integer weights,
//! not copied rows. At each node, features are drawn without replacement until `max_features`
//! features that are not constant in the node have been scanned: the drawn batch's per-bin
//! class-count histograms are built in one pass over the node's samples, then every boundary
//! between consecutive non-empty bins of each is scored.
//!
//! Where training time went (perf, bench data of `benches/forest.rs`: 200k × 40, 5 classes,
//! 32 trees, 64 bins): 44 % in the boundary scan, 25 % building histograms, 11 % partitioning,
//! 8 % in the out-of-bag walk. Deep nodes hold a handful of samples spread over most of the bin
//! range, so the scan mostly tested empty bins, on an unpredictable branch. Now the histogram
//! build also sets one bit per touched bin in an occupancy bitmap and the scan visits only the
//! set bits; rows are prefetched a few samples ahead of the histogram build; the partition is
//! branch-free. Same splits, same model bytes; criterion fit 2.73–2.85 s → 1.89–1.96 s
//! (alternating runs in one session). Per step: bitmap −22 %, prefetch −4 %, branch-free
//! partition −4 %.
//! Tried and dropped: ending a prediction lane group once no lane moved in a step (1.53 s →
//! 1.75 s for 1M rows: among 16 lanes one nearly always reaches full depth, so the check only
//! adds work); for nodes of ≤ 16–64 samples, sorting each feature's (code, class,
//! weight) keys instead of building histograms (no gain: 2.04–2.19 s against 2.04–2.07 s
//! without — gathering each sample's row once per feature instead of once per node undoes
//! the saved bin work).
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

/// Smallest Gini decrease (in weighted samples) that justifies a split: zero-gain splits only
/// add depth, and this is far above the f64 rounding of the sums (~1e-16 × N).
const MIN_GAIN: f64 = 1e-7;

/// `u64` words of a per-feature bin-occupancy bitmap.
const OCCUPANCY_WORDS: usize = super::bins::MAX_BINS / 64;

/// Samples between a row's prefetch and its use when building histograms.
const PREFETCH_AHEAD: usize = 16;

/// Rows walked together through a tree. Independent walks let the CPU overlap their node
/// loads instead of waiting for one row's chain of dependent loads at a time.
const WALK_LANES: usize = 16;

/// A split (`feature`, `threshold`, children at `next` and `next + 1`; `x ≤ threshold` goes
/// left) or a leaf. A leaf has `threshold = NaN` and `next = own index − 1` (wrapping), so the
/// step rule `next + (x ≤ threshold ? 0 : 1)` keeps a row on its leaf: walks can then take a
/// fixed number of steps (the tree's depth) without a per-row exit branch.
#[derive(Clone, Copy, Debug, Serialize, Deserialize)]
struct Node {
    feature: u32,
    threshold: f32,
    next: u32,
}

impl Node {
    #[inline]
    fn step(&self, row: &[f32]) -> usize {
        let go_left = row[self.feature as usize] <= self.threshold;
        self.next.wrapping_add(u32::from(!go_left)) as usize
    }
}

/// A fitted tree: flat nodes (root at 0), the leaves' probability vectors in one array, and for
/// each node the start of its leaf vector in `probs` (unused for splits).
#[derive(Clone, Debug, Serialize, Deserialize)]
pub(crate) struct Tree {
    nodes: Vec<Node>,
    leaf_start: Vec<u32>,
    probs: Vec<f32>,
    depth: u32,
}

impl Tree {
    /// Class probabilities of the leaf that `row` (one row of features) reaches.
    /// `x ≤ threshold` goes left, so NaN (never ≤) goes right. The plain early-exit walk: the
    /// reference that the lane-interleaved `accumulate_rows` is tested against.
    #[cfg(test)]
    pub(crate) fn leaf_probs(&self, row: &[f32], n_classes: usize) -> &[f32] {
        let mut i = 0usize;
        while !self.nodes[i].threshold.is_nan() {
            i = self.nodes[i].step(row);
        }
        self.leaf(i, n_classes)
    }

    #[inline]
    fn leaf(&self, node: usize, n_classes: usize) -> &[f32] {
        let start = self.leaf_start[node] as usize;
        &self.probs[start..start + n_classes]
    }

    /// For each `i` in `rows`, adds the leaf vector of row `i` of `x` (row-major, rows of
    /// `n_features`) to row `i` of `acc` (rows of `n_classes`). Same result as `leaf_probs` row
    /// by row; rows are walked `WALK_LANES` at a time for memory-level parallelism.
    pub(crate) fn accumulate_rows(
        &self,
        x: &[f32],
        n_features: usize,
        rows: &[u32],
        acc: &mut [f32],
        n_classes: usize,
    ) {
        let mut at = [0usize; WALK_LANES];
        for group in rows.chunks(WALK_LANES) {
            let at = &mut at[..group.len()];
            at.fill(0);
            for _ in 0..self.depth {
                for (i, &r) in at.iter_mut().zip(group) {
                    let r = r as usize;
                    *i = self.nodes[*i].step(&x[r * n_features..(r + 1) * n_features]);
                }
            }
            for (&i, &r) in at.iter().zip(group) {
                let r = r as usize;
                let sum = &mut acc[r * n_classes..(r + 1) * n_classes];
                for (s, p) in sum.iter_mut().zip(self.leaf(i, n_classes)) {
                    *s += p;
                }
            }
        }
    }

    /// Structural check of a tree read from a file: every index the walk can follow stays in
    /// bounds, so a damaged or mismatched model gives an error instead of a panic.
    pub(crate) fn check(&self, n_features: usize, n_classes: usize) -> Result<(), String> {
        let n = self.nodes.len();
        if n == 0 || self.leaf_start.len() != n {
            return Err("tree has no nodes or inconsistent leaf table".into());
        }
        for (i, node) in self.nodes.iter().enumerate() {
            if self.leaf_start[i] as usize + n_classes > self.probs.len() {
                return Err(format!("tree node {i} points past the leaf probabilities"));
            }
            if node.threshold.is_nan() {
                if node.next.wrapping_add(1) as usize != i {
                    return Err(format!("tree leaf {i} does not loop to itself"));
                }
            } else if node.feature as usize >= n_features || node.next as usize + 1 >= n {
                return Err(format!(
                    "tree node {i} refers to a missing feature or child"
                ));
            }
        }
        Ok(())
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

/// An admissible boundary of a split scan (see `scan_histogram`).
#[derive(Clone, Copy, Debug)]
struct Candidate {
    bin: u32,
    n_left: f64,
    sum_left: f64,
    sum_right: f64,
}

/// Buffers reused across all nodes of a tree, so the split scan never allocates.
struct Scratch {
    /// `hist[(j * MAX_BINS + b) * n_classes + c]`: weight of class `c` in bin `b` of the `j`-th
    /// feature of the current batch; all zero between scans.
    hist: Vec<u32>,
    /// `occupied[j * OCCUPANCY_WORDS + b / 64]` bit `b % 64`: bin `b` of the `j`-th batch
    /// feature holds a sample; all zero between scans.
    occupied: Vec<u64>,
    batch: Vec<usize>,
    left: Vec<u64>,
    right: Vec<u64>,
    candidates: Vec<Candidate>,
    scores: Vec<f64>,
    totals: Vec<u64>,
    right_samples: Vec<Sample>,
}

impl Scratch {
    fn new(n_classes: usize, max_features: usize, capacity: usize) -> Self {
        let max_bins = super::bins::MAX_BINS;
        Self {
            hist: vec![0; max_features * max_bins * n_classes],
            occupied: vec![0; max_features * OCCUPANCY_WORDS],
            batch: Vec::with_capacity(max_features),
            left: vec![0; n_classes],
            right: vec![0; n_classes],
            candidates: Vec::with_capacity(max_bins),
            scores: Vec::with_capacity(max_bins),
            totals: vec![0; n_classes],
            right_samples: vec![
                Sample {
                    row: 0,
                    class: 0,
                    weight: 0
                };
                capacity
            ],
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
    let mut scratch = Scratch::new(n_classes, params.max_features, samples.len());
    let mut perm: Vec<usize> = (0..n_features).collect();
    let mut importances = vec![0.0f64; n_features];
    // Placeholder for nodes not yet decided (every node ends up a split or a leaf).
    let undecided = Node {
        feature: 0,
        threshold: f32::NAN,
        next: 0,
    };
    let mut nodes = vec![undecided];
    let mut leaf_start = vec![0u32];
    let mut probs = Vec::new();
    let mut tree_depth = 0usize;
    let min_leaf = params.min_samples_leaf as u64;

    // (node index, sample range, depth)
    let mut stack = vec![(0usize, 0usize, samples.len(), 0usize)];
    while let Some((node, start, end, depth)) = stack.pop() {
        tree_depth = tree_depth.max(depth);
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
                let n_left = stable_partition(
                    &mut samples[start..end],
                    |s| binned.row(s.row as usize)[split.feature] as usize <= split.bin,
                    &mut scratch.right_samples,
                );
                let left = nodes.len();
                nodes.extend([undecided; 2]);
                leaf_start.extend([0; 2]);
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
                nodes[node].next = (node as u32).wrapping_sub(1);
                leaf_start[node] = probs.len() as u32;
                let n = n_total as f64;
                probs.extend(scratch.totals.iter().map(|&t| (t as f64 / n) as f32));
            }
        }
    }
    let tree = Tree {
        nodes,
        leaf_start,
        probs,
        depth: tree_depth as u32,
    };
    (tree, importances)
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
    let mut features = features;
    // Draw just enough features to reach `max_features` non-constant ones, build their
    // histograms in one pass over the node's samples, and repeat only if some were constant.
    while scanned < max_features {
        let mut batch = std::mem::take(&mut scratch.batch);
        batch.clear();
        batch.extend(features.by_ref().take(max_features - scanned));
        if batch.is_empty() {
            break;
        }
        build_histograms(binned, &batch, samples, scratch);
        for (j, &f) in batch.iter().enumerate() {
            let (non_constant, candidate) = scan_histogram(j, n_total, min_leaf, scratch);
            if !non_constant {
                continue;
            }
            scanned += 1;
            if let Some((bin, proxy)) = candidate {
                let gain = proxy - parent_term;
                if gain > MIN_GAIN && best.is_none_or(|b| gain > b.gain) {
                    best = Some(Split {
                        feature: f,
                        bin,
                        gain,
                    });
                }
            }
        }
        scratch.batch = batch;
    }
    best
}

/// Adds every sample's weight to the class histogram of each feature of `batch` (one pass
/// over the samples), and marks the bins it touches in `scratch.occupied`. Deep nodes hold rows
/// scattered over the whole matrix, so each sample costs a cache miss; with rows of codes stored
/// together, that miss is paid once for all the batch's features instead of once per feature,
/// as a feature-major layout would, and rows are prefetched a few samples ahead.
fn build_histograms(
    binned: &BinnedMatrix,
    batch: &[usize],
    samples: &[Sample],
    scratch: &mut Scratch,
) {
    let n_classes = scratch.totals.len();
    let stride = super::bins::MAX_BINS * n_classes;
    let Scratch { hist, occupied, .. } = scratch;
    for (k, s) in samples.iter().enumerate() {
        if let Some(ahead) = samples.get(k + PREFETCH_AHEAD) {
            binned.prefetch_row(ahead.row as usize);
        }
        let row = binned.row(s.row as usize);
        let class = s.class as usize;
        for (j, &f) in batch.iter().enumerate() {
            let b = row[f] as usize;
            hist[j * stride + b * n_classes + class] += s.weight;
            occupied[j * OCCUPANCY_WORDS + b / 64] |= 1u64 << (b % 64);
        }
    }
}

/// Scores the boundaries of batch feature `j`'s histogram (see [`Sweep`]) and clears the
/// histogram and its occupancy bits.
fn scan_histogram(
    j: usize,
    n_total: u64,
    min_leaf: u64,
    scratch: &mut Scratch,
) -> (bool, Option<(usize, f64)>) {
    let n_classes = scratch.totals.len();
    let stride = super::bins::MAX_BINS * n_classes;
    let Scratch {
        hist,
        occupied,
        left,
        right,
        totals,
        candidates,
        scores,
        ..
    } = scratch;
    let hist = &mut hist[j * stride..(j + 1) * stride];
    let occupied = &mut occupied[j * OCCUPANCY_WORDS..(j + 1) * OCCUPANCY_WORDS];
    let mut sweep = Sweep::new(left, right, totals, n_total, min_leaf, candidates);
    // Only the occupied bins are visited, in increasing order, found from the bitmap: deep
    // nodes hold a few samples spread over most of the bin range, and testing every bin of it
    // for emptiness (an unpredictable branch per bin) was 44 % of the training time.
    for (w, word) in occupied.iter_mut().enumerate() {
        let mut bits = std::mem::take(word);
        while bits != 0 {
            let b = w * 64 + bits.trailing_zeros() as usize;
            bits &= bits - 1;
            sweep.enter_bin(b);
            sweep.add_bin(&mut hist[b * n_classes..(b + 1) * n_classes]);
        }
    }
    sweep.finish(n_total, scores)
}

/// A left-to-right sweep over the non-empty bins of one feature that scores every boundary
/// between consecutive ones by `Σ L_c²/N_L + Σ R_c²/N_R` (larger is better). Among equivalent
/// boundaries (empty bins between two non-empty ones) the middle one is chosen, so the
/// threshold sits mid-gap as with sorted-value trees.
///
/// Class weights left/right of the boundary and their sums of squares are updated
/// incrementally (`(L+h)² − L² = h(2L+h)`, `R² − (R−h)² = h(2R−h)`) in integers: exact, and short dependency chains. The forest
/// caps N below 2^31, so Σ ≤ N² fits i64, whose conversion to f64 is one instruction (u64's is
/// not, before AVX-512). Pass 1 (integers, sequential) records the admissible boundaries; pass 2
/// (`finish`) scores them in a branch-free loop (two divisions per boundary) that the compiler
/// can vectorise, keeping the divisions off pass 1's dependency chain.
struct Sweep<'a> {
    left: &'a mut [u64],
    right: &'a mut [u64],
    sum_left: u64,
    sum_right: u64,
    n_left: u64,
    n_total: u64,
    min_leaf: u64,
    previous: Option<usize>,
    non_empty: usize,
    candidates: &'a mut Vec<Candidate>,
}

impl<'a> Sweep<'a> {
    fn new(
        left: &'a mut [u64],
        right: &'a mut [u64],
        totals: &[u64],
        n_total: u64,
        min_leaf: u64,
        candidates: &'a mut Vec<Candidate>,
    ) -> Self {
        left.fill(0);
        right.copy_from_slice(totals);
        candidates.clear();
        Self {
            sum_right: right.iter().map(|r| r * r).sum(),
            left,
            right,
            sum_left: 0,
            n_left: 0,
            n_total,
            min_leaf,
            previous: None,
            non_empty: 0,
            candidates,
        }
    }

    /// Starts non-empty bin `b` (bins arrive in increasing order): records the boundary
    /// between the previous non-empty bin and `b` if both sides weigh at least `min_leaf`.
    #[inline]
    fn enter_bin(&mut self, b: usize) {
        self.non_empty += 1;
        if let Some(p) = self.previous {
            if self.n_left >= self.min_leaf && self.n_total - self.n_left >= self.min_leaf {
                self.candidates.push(Candidate {
                    bin: ((p + b - 1) / 2) as u32,
                    n_left: (self.n_left as i64) as f64,
                    sum_left: (self.sum_left as i64) as f64,
                    sum_right: (self.sum_right as i64) as f64,
                });
            }
        }
        self.previous = Some(b);
    }

    /// Moves a whole histogram row (class weights of the current bin) to the left side and
    /// zeroes it.
    #[inline]
    fn add_bin(&mut self, row: &mut [u32]) {
        let (mut grow_left, mut shrink_right, mut weight) = (0u64, 0u64, 0u64);
        for ((l, r), h) in self.left.iter_mut().zip(self.right.iter_mut()).zip(row) {
            let hw = u64::from(std::mem::take(h));
            grow_left += hw * (2 * *l + hw);
            shrink_right += hw * (2 * *r - hw);
            *l += hw;
            *r -= hw;
            weight += hw;
        }
        self.sum_left += grow_left;
        self.sum_right -= shrink_right;
        self.n_left += weight;
    }

    /// Whether the feature has two or more non-empty bins, and the best admissible
    /// `(bin, score)` (the first on ties).
    fn finish(self, n_total: u64, scores: &mut Vec<f64>) -> (bool, Option<(usize, f64)>) {
        let n_total = (n_total as i64) as f64;
        scores.clear();
        scores.extend(
            self.candidates
                .iter()
                .map(|c| c.sum_left / c.n_left + c.sum_right / (n_total - c.n_left)),
        );
        let mut best: Option<(usize, f64)> = None;
        for (c, &score) in self.candidates.iter().zip(scores.iter()) {
            if best.is_none_or(|(_, s)| score > s) {
                best = Some((c.bin as usize, score));
            }
        }
        (self.non_empty >= 2, best)
    }
}

/// Moves the samples satisfying `goes_left` to the front, keeping the order on both sides;
/// returns how many went left. `right` is scratch space of at least `samples.len()`.
///
/// Branch-free: every sample is written to both sides and only the matching cursor advances.
/// Which side a sample goes to is a coin flip near the top of the tree, and the branchy
/// version's mispredictions made it 13 % of training time (8 % branch-free).
fn stable_partition(
    samples: &mut [Sample],
    goes_left: impl Fn(&Sample) -> bool,
    right: &mut [Sample],
) -> usize {
    let right = &mut right[..samples.len()];
    let (mut n_left, mut n_right) = (0, 0);
    for k in 0..samples.len() {
        let s = samples[k];
        let left = goes_left(&s);
        // n_left ≤ k: this overwrites a sample already read.
        samples[n_left] = s;
        right[n_right] = s;
        n_left += usize::from(left);
        n_right += usize::from(!left);
    }
    samples[n_left..].copy_from_slice(&right[..n_right]);
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
                if gain > MIN_GAIN && best.is_none_or(|b| gain > b) {
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
            // Every third case spreads up to 200 samples over up to 250 bins, so codes fill
            // all four words of the occupancy bitmap.
            let wide = case % 3 == 0;
            let n = rng.gen_range(2..if wide { 200 } else { 60 });
            let n_features = rng.gen_range(1..5);
            let n_classes = rng.gen_range(2..5);
            let levels = rng.gen_range(1..if wide { 250 } else { 12 });
            let x: Vec<f32> = (0..n * n_features)
                .map(|_| rng.gen_range(0..levels) as f32 * 0.5 - 1.0)
                .collect();
            let y: Vec<u32> = (0..n).map(|_| rng.gen_range(0..n_classes) as u32).collect();
            let w: Vec<u32> = (0..n).map(|_| rng.gen_range(0..4)).collect();
            let min_leaf = rng.gen_range(1..4);
            let expected = brute_force_best_gain(&x, n_features, &y, &w, n_classes, min_leaf);

            let edges = BinEdges::fit(&x, n, n_features, if wide { 256 } else { 16 }).unwrap();
            let binned = edges.encode(&x, n);
            let samples: Vec<Sample> = (0..n)
                .filter(|&i| w[i] > 0)
                .map(|i| Sample {
                    row: i as u32,
                    class: y[i],
                    weight: w[i],
                })
                .collect();
            let mut scratch = Scratch::new(n_classes, n_features, n);
            for s in &samples {
                scratch.totals[s.class as usize] += u64::from(s.weight);
            }
            let found = best_split(
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
                scratch.hist.iter().all(|&h| h == 0) && scratch.occupied.iter().all(|&w| w == 0),
                "histogram or occupancy not cleared"
            );
        }
    }

    /// The lane-interleaved, fixed-step walk must land on the same leaves as the plain
    /// early-exit walk (the obvious reference), including NaN rows and a ragged last group.
    #[test]
    fn accumulate_matches_row_by_row_walk() {
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let (n, f, c) = (500, 3, 3);
        let x: Vec<f32> = (0..n * f).map(|_| rng.gen_range(-1.0..1.0)).collect();
        let y: Vec<u32> = (0..n)
            .map(|i| (x[i * f] > 0.0) as u32 + (x[i * f + 1] > 0.5) as u32)
            .collect();
        let edges = BinEdges::fit(&x, n, f, 32).unwrap();
        let binned = edges.encode(&x, n);
        let params = GrowParams {
            max_depth: 8,
            min_samples_leaf: 1,
            max_features: 2,
            n_classes: c,
        };
        let weights: Vec<u32> = (0..n).map(|_| rng.gen_range(0..3)).collect();
        let (tree, _) = grow(&edges, &binned, &y, &weights, &params, &mut rng);
        let mut queries: Vec<f32> = (0..37 * f).map(|_| rng.gen_range(-1.5..1.5)).collect();
        queries[4] = f32::NAN;
        let mut acc = vec![1.0f32; 37 * c];
        let rows: Vec<u32> = (0..37).collect();
        tree.accumulate_rows(&queries, f, &rows, &mut acc, c);
        for (row, got) in queries.chunks_exact(f).zip(acc.chunks_exact(c)) {
            let want: Vec<f32> = tree.leaf_probs(row, c).iter().map(|p| p + 1.0).collect();
            assert_eq!(got, &want[..]);
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
