//! Evaluation of predicted label maps against ground truth.

pub mod confusion;
pub mod score;

pub use confusion::ConfusionMatrix;
