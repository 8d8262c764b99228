//! What the fuzz targets share: reading an input as a byte of switches and a text.

/// The first byte (switches: format, curve or scalar, optional columns) and the rest as
/// UTF-8 text; `None` for an empty input or text that is not UTF-8, which assay never
/// gets (files are read as UTF-8 first).
pub fn switches_and_text(bytes: &[u8]) -> Option<(u8, &str)> {
    let (&first, rest) = bytes.split_first()?;
    Some((first, std::str::from_utf8(rest).ok()?))
}
