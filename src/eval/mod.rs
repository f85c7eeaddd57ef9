//! Evaluation of predicted label maps against ground truth (also cross-validated by image),
//! and what follows from the maps: area figures.

pub mod area_estimate;
pub mod area_plan;
pub mod areas;
pub mod boundary;
pub mod confusion;
pub mod crossval;
pub mod crossval_report;
pub mod drift;
pub mod score;
pub mod smoothing_strength;
pub mod suggest;
pub mod suggest_files;
pub mod uncertainty;

pub use boundary::BoundaryCounts;
pub use confusion::ConfusionMatrix;
