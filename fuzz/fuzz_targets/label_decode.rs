//! Label decoding + class mapping: any bytes as a label PNG, mapped through a fixed class
//! table (values and colours), strict and lenient. Must never panic or over-allocate.
#![no_main]
use grove::dataset::labels::{decode, LabelOptions};
use grove::dataset::ClassTable;
use libfuzzer_sys::fuzz_target;

const TABLE: &str = "[[class]]\nid = 0\nname = \"soil\"\ncolor = \"#8a6a4a\"\n[[class]]\nid = 1\nname = \"crop\"\ncolor = \"#2f9e44\"\n[[class]]\nid = 7\nname = \"grey\"\ncolor = \"#808080\"\n";

fuzz_target!(|data: &[u8]| {
    // Keep decoded sizes small so the fuzzer explores parsing, not allocation.
    grove::image_check::set_max_pixels(1 << 20);
    let table = ClassTable::parse(TABLE, 255).expect("valid table");
    if let Ok(file) = grove::imageio::decode_label_png(data) {
        for unknown_as_unlabelled in [false, true] {
            let opts = LabelOptions {
                unlabelled_value: 255,
                unknown_as_unlabelled,
            };
            if let Ok(idx) = decode(&file.pixels, file.width.max(1), &table, &opts) {
                assert!(idx.iter().all(|&c| c == 255 || (c as usize) < table.len()));
            }
        }
    }
});
