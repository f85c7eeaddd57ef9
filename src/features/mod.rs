//! Per-pixel features: colour, the multi-scale filter bank, textons and the assembled stack.

pub mod bank;
pub mod color;
pub mod gaussian;
pub mod kmeans;
pub mod stack;
pub mod textons;
