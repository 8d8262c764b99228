//! The study parser on arbitrary text: a checked study or errors, never a panic. Data
//! files and templates read as small valid ones, so inputs that get past the YAML
//! reach the value checks.
#![no_main]

use libfuzzer_sys::fuzz_target;
use std::path::Path;

const DATA: &str = "x,y,sd\n0.5,1.0,0.1\n1.0,2.0,0.1\n";
const TEMPLATE: &str = "a = {{a}}\n";

fuzz_target!(|bytes: &[u8]| {
    let Ok(text) = std::str::from_utf8(bytes) else {
        return;
    };
    let read = |p: &Path| -> std::io::Result<String> {
        Ok(if p.extension().is_some_and(|e| e == "csv") {
            DATA.to_string()
        } else {
            TEMPLATE.to_string()
        })
    };
    if let Err(errors) = assay::study::parse(text, Path::new("study.yaml"), Path::new("."), &read)
    {
        assert!(!errors.0.is_empty());
    }
});
