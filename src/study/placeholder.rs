//! `{{name}}` placeholders in command arguments and template files.
//!
//! The grammar: `{{`, optional spaces, an identifier `[A-Za-z_][A-Za-z0-9_]*`, optional
//! spaces, `}}`. Anything else between braces is an error, so a typo never reaches the
//! simulator as literal text.

use std::collections::BTreeMap;

/// One piece of a parsed template.
#[derive(Debug, Clone, PartialEq)]
pub enum Piece<'a> {
    Text(&'a str),
    Name(&'a str),
}

/// A malformed placeholder: byte offset and what is wrong.
#[derive(Debug, Clone, PartialEq)]
pub struct PlaceholderError {
    pub offset: usize,
    pub message: String,
}

/// Is `s` an identifier (`[A-Za-z_][A-Za-z0-9_]*`)?
pub fn is_identifier(s: &str) -> bool {
    let mut chars = s.chars();
    match chars.next() {
        Some(c) if c.is_ascii_alphabetic() || c == '_' => {}
        _ => return false,
    }
    chars.all(|c| c.is_ascii_alphanumeric() || c == '_')
}

/// Split `text` into literal text and placeholder names.
///
/// # Errors
/// An unclosed `{{` or a placeholder whose content is not an identifier.
pub fn parse(text: &str) -> Result<Vec<Piece<'_>>, PlaceholderError> {
    let mut out = Vec::new();
    let mut rest = text;
    let mut offset = 0;
    while let Some(start) = rest.find("{{") {
        if start > 0 {
            out.push(Piece::Text(&rest[..start]));
        }
        let after = &rest[start + 2..];
        let Some(end) = after.find("}}") else {
            return Err(PlaceholderError {
                offset: offset + start,
                message: "unclosed `{{` (expected `{{name}}`)".into(),
            });
        };
        let name = after[..end].trim();
        if !is_identifier(name) {
            return Err(PlaceholderError {
                offset: offset + start,
                message: format!(
                    "`{{{{{}}}}}` is not a placeholder (expected `{{{{name}}}}` with a parameter, setting, run_dir or run_id)",
                    &after[..end]
                ),
            });
        }
        out.push(Piece::Name(name));
        let consumed = start + 2 + end + 2;
        offset += consumed;
        rest = &rest[consumed..];
    }
    if !rest.is_empty() {
        out.push(Piece::Text(rest));
    }
    Ok(out)
}

/// Names used in `text`, in order of appearance (malformed text gives an error).
pub fn names(text: &str) -> Result<Vec<&str>, PlaceholderError> {
    Ok(parse(text)?
        .into_iter()
        .filter_map(|p| match p {
            Piece::Name(n) => Some(n),
            Piece::Text(_) => None,
        })
        .collect())
}

/// Substitute every placeholder from `values`.
///
/// # Errors
/// A malformed placeholder, or a name missing from `values` (reported by name).
pub fn render(text: &str, values: &BTreeMap<String, String>) -> Result<String, PlaceholderError> {
    let mut out = String::with_capacity(text.len());
    for piece in parse(text)? {
        match piece {
            Piece::Text(t) => out.push_str(t),
            Piece::Name(n) => match values.get(n) {
                Some(v) => out.push_str(v),
                None => {
                    return Err(PlaceholderError {
                        offset: 0,
                        message: format!("unknown placeholder `{{{{{n}}}}}`"),
                    })
                }
            },
        }
    }
    Ok(out)
}

/// Numbers render in shortest round-trip form (`{}` of f64), integers without `.0`.
pub fn format_number(v: f64) -> String {
    format!("{v}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn renders_names_and_keeps_text() {
        let mut v = BTreeMap::new();
        v.insert("E".to_string(), "171.3".to_string());
        assert_eq!(render("--E={{E}}/{{ E }}", &v).unwrap(), "--E=171.3/171.3");
        assert!(render("{{F}}", &v).unwrap_err().message.contains("`{{F}}`"));
        assert!(parse("{{E").is_err());
        assert!(parse("{{1x}}").is_err());
        assert_eq!(format_number(0.1 + 0.2), "0.30000000000000004");
        assert_eq!(format_number(200.0), "200");
    }
}
