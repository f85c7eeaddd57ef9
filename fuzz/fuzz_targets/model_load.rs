//! The model-file loader: any bytes must give a model that passed its consistency check, or
//! an error message; never a panic or an unbounded allocation. The input is tried as a whole
//! file and, framed with a valid header and hash (`model::frame`), as a payload: without the
//! second, almost every input stops at the hash and the decoder is never reached.
#![no_main]
use libfuzzer_sys::fuzz_target;

fn check(bytes: &[u8]) {
    if let Ok(model) = grove::model::from_bytes(bytes) {
        // What loads must be consistent enough to describe itself and encode again.
        let _ = model.ranked_importances();
        let _ = model.classes.names();
        let again = grove::model::to_bytes(&model);
        assert!(grove::model::from_bytes(&again).is_ok());
    }
}

fuzz_target!(|data: &[u8]| {
    check(data);
    check(&grove::model::frame(data));
});
