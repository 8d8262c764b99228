//! The field-data reader on arbitrary text, with and without a control column, a curve
//! column and an sd column: rows or a (line, message) error, never a panic.
#![no_main]

use assay::study::FieldData;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|bytes: &[u8]| {
    let Some((first, text)) = assay_fuzz::switches_and_text(bytes) else {
        return;
    };
    let x = (first & 1 != 0).then_some("x");
    let sd = (first & 2 != 0).then_some("sd");
    let controls: Vec<String> = (first & 4 != 0).then(|| "T".to_string()).into_iter().collect();
    if let Ok(d) = FieldData::parse(text, &controls, x, &["y".to_string()], sd) {
        let _ = d.targets(1);
    }
});
