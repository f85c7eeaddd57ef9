//! A demo-like smoothing problem for the smoothing benches: the default model trained on four
//! 512² demo scenes, applied to a 1024² demo scene (one megapixel, 5 classes), and that
//! scene's Lab planes. Shared by `benches/smooth.rs` and `benches/smooth_vs_gco.rs`.

use grove::dataset::Dataset;
use grove::imageio::read_image;
use grove::segmenter::{Probabilities, TrainConfig};
use grove::Plane;

pub struct DemoMap {
    pub probs: Probabilities,
    pub lab: Vec<Plane>,
}

pub fn demo_map(size: usize) -> DemoMap {
    let dir = tempfile::tempdir().unwrap();
    let train_dir = dir.path().join("train");
    let test_dir = dir.path().join("test");
    grove::demo::write_demo_dataset(&train_dir, 0..4, 512, 7).unwrap();
    grove::demo::write_demo_dataset(&test_dir, 100..101, size, 7).unwrap();
    let train = Dataset::open(&train_dir, Default::default()).unwrap();
    let entries: Vec<_> = train.entries.iter().collect();
    let model = TrainConfig::default()
        .fit(&train, &entries, Default::default())
        .unwrap();
    let test = Dataset::open(&test_dir, Default::default()).unwrap();
    let image = read_image(&test.entries[0].image).unwrap();
    DemoMap {
        probs: model.predict_proba(&image),
        lab: model.features.lab(&image),
    }
}
