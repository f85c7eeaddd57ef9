//! Evaluation of predicted label maps against ground truth, and what follows from the maps:
//! area figures.

pub mod area_estimate;
pub mod areas;
pub mod boundary;
pub mod confusion;
pub mod score;
pub mod smoothing_strength;
pub mod suggest;
pub mod uncertainty;

pub use boundary::BoundaryCounts;
pub use confusion::ConfusionMatrix;
