//! The model-file loader: any bytes must give a model that passed its consistency check, or
//! an error message; never a panic or an unbounded allocation.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(model) = grove::model::from_bytes(data) {
        // What loads must be consistent enough to describe itself.
        let _ = model.ranked_importances();
        let _ = model.classes.names();
    }
});
