//! Random forest classifier on histogram-binned features (Breiman 2001, Machine Learning
//! 45:5–32): bootstrap per tree, a fresh random subset of features per split, Gini impurity,
//! leaves holding class-probability vectors; out-of-bag accuracy and impurity-based feature
//! importances are computed during training.
//!
//! Why our own rather than linfa-trees: on this machine linfa-trees took 84 s for one depth-16
//! tree on 80k samples; it has no per-split feature sampling and no class probabilities, and
//! its forest trains trees sequentially. This one bins features once (`bins`), grows trees on
//! per-bin class histograms (`tree`), and trains and predicts in parallel with rayon (`forest`):
//! measured here on 2 cores (`benches/forest.rs`, criterion, old and new builds alternated in
//! one session), 32 trees of depth ≤ 20 on 200k × 40 rows train in 1.89–1.96 s (2.73–2.85 s
//! before the occupancy-bitmap scan described in `tree`) and predict 1M rows in ~1.4 s.

mod bins;
#[allow(clippy::module_inception)] // forest/forest.rs: the bagging layer, named as in DESIGN.md
mod forest;
mod tree;

pub use forest::{argmax, ForestConfig, RandomForest};
