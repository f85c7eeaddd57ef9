//! Evaluation of predicted label maps against ground truth, and what follows from the maps:
//! area figures.

pub mod areas;
pub mod boundary;
pub mod confusion;
pub mod score;

pub use boundary::BoundaryCounts;
pub use confusion::ConfusionMatrix;
