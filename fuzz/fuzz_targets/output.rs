//! The simulator output parsers (CSV, YAML, JSON) and the matching to field stations on
//! arbitrary text: values or an error message, never a panic. The first byte picks the
//! format and whether the output is a curve.
#![no_main]

use assay::runs::parse::{match_stations, parse_output};
use assay::study::OutputFormat;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|bytes: &[u8]| {
    let Some((first, text)) = assay_fuzz::switches_and_text(bytes) else {
        return;
    };
    let format = match first % 3 {
        0 => OutputFormat::Csv,
        1 => OutputFormat::Yaml,
        _ => OutputFormat::Json,
    };
    let curve = first & 0x80 != 0;
    let y = ["y".to_string(), "z".to_string()];
    if let Ok(parsed) = parse_output(text, format, curve.then_some("x"), &y) {
        let stations = if curve {
            vec![Some(0.0), Some(0.5), Some(1.0)]
        } else {
            vec![None]
        };
        let _ = match_stations(&parsed, &stations);
    }
});
