//! The class-table parser: any text either parses into a table that obeys the name rules and
//! round-trips through `to_toml`, or gives an error message.
#![no_main]
use grove::dataset::classes::check_class_name;
use grove::dataset::ClassTable;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    if let Ok(table) = ClassTable::parse(text, 255) {
        for c in table.classes() {
            assert!(check_class_name(&c.name).is_ok());
            let safe = grove::output_guard::safe_file_name(&c.name);
            assert!(!safe.contains('/') && !safe.starts_with('.'));
        }
        let again = ClassTable::parse(&table.to_toml(), 255).expect("to_toml output parses");
        assert_eq!(again, table);
    }
});
