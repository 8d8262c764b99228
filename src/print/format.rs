//! Number formatting for the tables.

/// Significant-figure formatting for tables.
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
