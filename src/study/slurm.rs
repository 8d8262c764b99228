//! The check of `execution.slurm`, the settings handed to Slurm.

use super::checker::Checker;
use super::spec::SlurmSpec;

/// `execution.slurm`: every value ends up in an `#SBATCH` line or the job script, so
/// none may hold a line break, and the formatted ones must look like what Slurm takes.
pub(super) fn check(c: &mut Checker<'_>, s: &SlurmSpec) {
    let one_line = |c: &mut Checker<'_>, key: &str, v: &str| {
        if v.contains('\n') || v.contains('\r') {
            c.err(key, "must be one line");
            false
        } else if v.trim().is_empty() {
            c.err(key, "must not be empty");
            false
        } else {
            true
        }
    };
    let word = |c: &mut Checker<'_>, key: &str, v: &Option<String>| {
        if let Some(v) = v {
            if one_line(c, key, v)
                && !v
                    .chars()
                    .all(|ch| ch.is_ascii_alphanumeric() || "._-,+".contains(ch))
            {
                c.err(
                    key,
                    format!("`{v}` is not a Slurm name (letters, digits, `._-,+`)"),
                );
            }
        }
    };
    word(c, "execution.slurm.partition", &s.partition);
    word(c, "execution.slurm.account", &s.account);
    word(c, "execution.slurm.qos", &s.qos);
    if let Some(t) = &s.time {
        if one_line(c, "execution.slurm.time", t)
            && !t
                .chars()
                .all(|ch| ch.is_ascii_digit() || ch == ':' || ch == '-')
        {
            c.err(
                "execution.slurm.time",
                format!("`{t}` is not a Slurm time (`MM`, `HH:MM:SS`, `D-HH:MM`)"),
            );
        }
    }
    if let Some(m) = &s.mem {
        let digits = m.trim_end_matches(['K', 'M', 'G', 'T']);
        if one_line(c, "execution.slurm.mem", m)
            && (digits.is_empty()
                || !digits.chars().all(|ch| ch.is_ascii_digit())
                || m.len() - digits.len() > 1)
        {
            c.err(
                "execution.slurm.mem",
                format!("`{m}` is not a Slurm memory size (a number with K, M, G or T)"),
            );
        }
    }
    if s.cpus_per_task == Some(0) {
        c.err("execution.slurm.cpus_per_task", "must be at least 1");
    }
    if s.array_limit == Some(0) {
        c.err("execution.slurm.array_limit", "must be at least 1");
    }
    if let Some(p) = s.poll_s {
        if !(p.is_finite() && p > 0.0) {
            c.err(
                "execution.slurm.poll_s",
                format!("{p} is not a positive number of seconds"),
            );
        }
    }
    for a in &s.extra_args {
        if one_line(c, "execution.slurm.extra_args", a) && !a.starts_with('-') {
            c.err(
                "execution.slurm.extra_args",
                format!("`{a}` is not an sbatch option (options start with `-`)"),
            );
        }
    }
    for l in &s.prelude {
        if l.contains('\n') || l.contains('\r') {
            c.err(
                "execution.slurm.prelude",
                "one shell line per item (a line break inside an item)",
            );
        }
    }
}
