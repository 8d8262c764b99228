//! Slurm's commands (`scontrol`, `squeue`; `sbatch` is run by the submission): each
//! call, and a pure parser of what it prints.

use anyhow::{bail, Context, Result};
use std::collections::BTreeMap;
use std::process::Command;

/// Slurm's default MaxArraySize, used when `scontrol show config` does not say.
const DEFAULT_MAX_ARRAY_SIZE: usize = 1001;

/// Run a Slurm command and return its standard output.
pub(super) fn slurm_cmd(program: &str, args: &[&str]) -> Result<String> {
    let out = Command::new(program).args(args).output().with_context(|| {
        format!("cannot start `{program}` (the Slurm backend needs Slurm's commands on PATH)")
    })?;
    if !out.status.success() {
        bail!(
            "`{program} {}` failed ({}): {}",
            args.join(" "),
            out.status,
            String::from_utf8_lossy(&out.stderr).trim()
        );
    }
    Ok(String::from_utf8_lossy(&out.stdout).into_owned())
}

/// The cluster's MaxArraySize (array indices run from 0 to MaxArraySize − 1).
pub fn max_array_size() -> usize {
    slurm_cmd("scontrol", &["show", "config"])
        .ok()
        .and_then(|t| parse_max_array_size(&t))
        .unwrap_or(DEFAULT_MAX_ARRAY_SIZE)
}

/// MaxArraySize from the text of `scontrol show config`.
pub fn parse_max_array_size(text: &str) -> Option<usize> {
    text.lines().find_map(|l| {
        let (k, v) = l.split_once('=')?;
        (k.trim() == "MaxArraySize")
            .then(|| v.trim().parse().ok())
            .flatten()
    })
}

/// State of each listed array task still in the queue: `job → (state, reason)`.
/// `squeue` fails for ids it no longer knows; that means none is queued.
pub(super) fn queue_states(jobs: &[String]) -> Result<BTreeMap<String, (String, String)>> {
    let out = BTreeMap::new();
    if jobs.is_empty() {
        return Ok(out);
    }
    let list = jobs.join(",");
    let text = match slurm_cmd("squeue", &["-h", "-r", "-o", "%i|%T|%r", "-j", &list]) {
        Ok(t) => t,
        Err(e) if format!("{e:#}").contains("Invalid job id") => return Ok(out),
        Err(e) => return Err(e),
    };
    Ok(parse_squeue(&text))
}

/// Lines `job|state|reason` of `squeue -h -r -o '%i|%T|%r'`.
pub fn parse_squeue(text: &str) -> BTreeMap<String, (String, String)> {
    text.lines()
        .filter_map(|l| {
            let mut it = l.trim().splitn(3, '|');
            let job = it.next()?.trim().to_string();
            let state = it.next()?.trim().to_string();
            let reason = it.next().unwrap_or("").trim().to_string();
            (!job.is_empty()).then_some((job, (state, reason)))
        })
        .collect()
}

/// What `scontrol show job -o` says about an ended task: state, reason, exit code.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct JobEnd {
    pub state: String,
    pub reason: String,
    pub exit_code: String,
}

/// Parse one line of `scontrol show job -o` (space-separated `Key=Value` pairs).
pub fn parse_scontrol_job(text: &str) -> Option<JobEnd> {
    let mut end = JobEnd::default();
    for field in text.split_whitespace() {
        if let Some((k, v)) = field.split_once('=') {
            match k {
                "JobState" => end.state = v.to_string(),
                "Reason" => end.reason = v.to_string(),
                "ExitCode" => end.exit_code = v.to_string(),
                _ => {}
            }
        }
    }
    (!end.state.is_empty()).then_some(end)
}

pub(super) fn job_end(job: &str) -> Option<JobEnd> {
    slurm_cmd("scontrol", &["show", "job", "-o", job])
        .ok()
        .and_then(|t| parse_scontrol_job(t.lines().next().unwrap_or("")))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn max_array_size_is_read_from_scontrol_config() {
        let text = "MailProg                = /bin/mail\nMaxArraySize            = 1001\nMaxJobCount = 10000\n";
        assert_eq!(parse_max_array_size(text), Some(1001));
        assert_eq!(parse_max_array_size("Foo = 1\n"), None);
    }

    #[test]
    fn squeue_lines_are_split_into_state_and_reason() {
        let m = parse_squeue("12_0|RUNNING|None\n12_1|PENDING|JobArrayTaskLimit\n");
        assert_eq!(m["12_0"], ("RUNNING".into(), "None".into()));
        assert_eq!(m["12_1"].1, "JobArrayTaskLimit");
    }

    #[test]
    fn scontrol_job_line_gives_state_reason_and_exit_code() {
        let line = "JobId=13 ArrayJobId=12 ArrayTaskId=1 JobName=x JobState=CANCELLED Reason=None Dependency=(null) ExitCode=0:15";
        let e = parse_scontrol_job(line).expect("parsed");
        assert_eq!(e.state, "CANCELLED");
        assert_eq!(e.exit_code, "0:15");
        assert!(parse_scontrol_job("slurm_load_jobs error: Invalid job id specified").is_none());
    }
}
