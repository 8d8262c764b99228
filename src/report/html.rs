//! Small HTML helpers: escaping, number and setting formatting, tables, figures,
//! warning lists, the page's CSS.

use std::fmt::Write as _;

/// Escape text for HTML element content and double-quoted attribute values.
pub fn esc(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// `v` with `digits` significant digits; scientific notation outside 1e-4 … 1e6.
pub fn sig(v: f64, digits: usize) -> String {
    if !v.is_finite() {
        return format!("{v}");
    }
    if v == 0.0 {
        return "0".into();
    }
    let mag = v.abs().log10().floor() as i32;
    if !(-4..=6).contains(&mag) {
        return format!("{:.*e}", digits.saturating_sub(1), v);
    }
    let decimals = (digits as i32 - 1 - mag).max(0) as usize;
    format!("{v:.decimals$}")
}

/// A table: header cells, then rows of already-escaped cell HTML. The first column is
/// left-aligned text, the others right-aligned numbers unless a cell's content is a
/// `<span class="text">` or `<span class="mono">` (left-aligned).
pub fn table(header: &[&str], rows: &[Vec<String>]) -> String {
    let mut h = String::from("<div class=\"table-wrap\"><table>\n<thead><tr>");
    for c in header {
        h.push_str(&format!("<th>{}</th>", esc(c)));
    }
    h.push_str("</tr></thead>\n<tbody>\n");
    for r in rows {
        h.push_str("<tr>");
        for c in r {
            h.push_str(&format!("<td>{c}</td>"));
        }
        h.push_str("</tr>\n");
    }
    h.push_str("</tbody></table></div>\n");
    h
}

/// The page's style: readable on a narrow screen (tables scroll sideways, plots shrink
/// to the width) and on paper (no navigation, no split figures).
pub const CSS: &str = r#"
:root { --fg: #1a1a1a; --muted: #555; --line: #d8d8d8; --warn: #b34700; }
* { box-sizing: border-box; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif;
       color: var(--fg); background: #fff; max-width: 62rem; margin: 0 auto; padding: 1rem 1.25rem;
       line-height: 1.45; }
h1 { font-size: 1.7rem; margin-bottom: .2rem; }
h2 { font-size: 1.3rem; border-bottom: 1px solid var(--line); padding-bottom: .2rem; margin-top: 2.2rem; }
h3 { font-size: 1.05rem; margin-top: 1.4rem; }
p.meta, .muted { color: var(--muted); font-size: .9rem; }
.table-wrap { overflow-x: auto; margin: .5rem 0 1rem; }
table { border-collapse: collapse; font-size: .88rem; font-variant-numeric: tabular-nums; }
th, td { padding: .25rem .6rem; border-bottom: 1px solid var(--line); text-align: right; vertical-align: top; }
th { background: #f4f4f4; font-weight: 600; }
th:first-child, td:first-child, td.text { text-align: left; }
td > .text, td > .mono { display: block; text-align: left; }
figure { margin: 1rem 0 1.5rem; }
figcaption { font-size: .85rem; color: var(--muted); margin-top: .3rem; }
svg.plot { display: block; max-width: 100%; height: auto; }
.plots { display: flex; flex-wrap: wrap; gap: 0 1.5rem; }
.plots figure { flex: 1 1 20rem; max-width: 100%; }
.caution { border-left: 5px solid var(--warn); background: #fff5ee; padding: .6rem 1rem; margin: 1rem 0; }
.warn { color: var(--warn); }
.ok { color: #00704a; }
code, .mono { font-family: ui-monospace, SFMono-Regular, Menlo, Consolas, monospace; font-size: .85em;
              overflow-wrap: anywhere; }
ul.warnings li { color: var(--warn); }
nav ol { columns: 2; padding-left: 1.3rem; }
@media (max-width: 40rem) {
  body { padding: .6rem; }
  h1 { font-size: 1.35rem; }
  nav ol { columns: 1; }
  th, td { padding: .2rem .35rem; }
}
@media print {
  nav { display: none; }
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  h2 { break-after: avoid; }
  figure, table, .caution { break-inside: avoid; }
  .table-wrap { overflow: visible; }
  .caution { background: none; }
  a { color: inherit; text-decoration: none; }
}
"#;

/// A study setting's name as written in the study file (`lhs`, `range`, `linear`).
pub fn lower(v: impl std::fmt::Debug) -> String {
    format!("{v:?}").to_lowercase()
}

/// A plot (or why it is unavailable) as a `<figure>` with its caption; `kind` and
/// `name` tag it for readers and tests (`data-plot`, `data-name`).
pub fn figure(kind: &str, name: &str, svg: Result<String, String>, caption: &str) -> String {
    let body = match svg {
        Ok(s) => s,
        Err(e) => format!("<p class=\"warn\">plot unavailable: {}</p>", esc(&e)),
    };
    format!(
        "<figure data-plot=\"{}\" data-name=\"{}\">\n{body}\n<figcaption>{}</figcaption>\n</figure>\n",
        esc(kind),
        esc(name),
        esc(caption)
    )
}

/// A list of warnings (nothing when there are none).
pub fn warnings(h: &mut String, w: &[String]) {
    if w.is_empty() {
        return;
    }
    h.push_str("<ul class=\"warnings\">\n");
    for x in w {
        let _ = writeln!(h, "<li>warning: {}</li>", esc(x));
    }
    h.push_str("</ul>\n");
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_markup_and_quotes() {
        assert_eq!(
            esc(r#"<a href="x">&'"#),
            "&lt;a href=&quot;x&quot;&gt;&amp;&#39;"
        );
    }

    #[test]
    fn significant_digits() {
        assert_eq!(sig(205.93427, 4), "205.9");
        assert_eq!(sig(0.0109464, 3), "0.0109");
        assert_eq!(sig(1.5e-7, 3), "1.50e-7");
        assert_eq!(sig(0.0, 3), "0");
    }
}
