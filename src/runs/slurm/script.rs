//! The job script of one array submission: `#SBATCH` lines from the study's
//! `execution.slurm`, and one `case` branch per run folder that runs the simulator
//! there and leaves the task's result file. A pure function of the study and the runs:
//! it starts nothing and writes no file.

use crate::study::{SlurmSpec, Study};
use std::path::{Path, PathBuf};

/// The result file an array task writes into its run folder (atomically, by rename).
pub const TASK_RESULT: &str = "slurm-task.yaml";
/// Written by an array task when it starts the simulator.
pub const TASK_STARTED: &str = "slurm-task.started";
/// Folder of the job scripts and their logs, inside the campaign folder.
pub const SLURM_DIR: &str = "slurm";
/// Seconds a simulator gets after SIGTERM at its timeout before SIGKILL (`timeout -k`).
const KILL_AFTER_S: u32 = 5;

/// Quote `s` for a POSIX shell: single quotes, with `'` written as `'\''`.
pub fn sh_quote(s: &str) -> String {
    format!("'{}'", s.replace('\'', r"'\''"))
}

/// `--time` for a task: the study's `execution.slurm.time`, else the simulator's
/// timeout plus two minutes (for the prelude and the file system), in whole minutes.
pub fn task_time(study: &Study) -> String {
    match &study.slurm.time {
        Some(t) => t.clone(),
        None => {
            let minutes = ((study.simulator.timeout_s + 120.0) / 60.0).ceil().max(1.0) as u64;
            minutes.to_string()
        }
    }
}

/// One array task of a job script: the run folder, the program and its arguments, and
/// the rendered environment.
#[derive(Debug, Clone)]
pub struct ScriptTask {
    pub dir: PathBuf,
    pub program: PathBuf,
    pub args: Vec<String>,
    pub env: Vec<(String, String)>,
}

/// The job script of one array submission. It is written into the campaign folder so a
/// reviewer can read exactly what ran; `#SBATCH` lines carry every submission option.
pub fn job_script(
    study: &Study,
    campaign: &Path,
    job_name: &str,
    tasks: &[ScriptTask],
    written_utc: &str,
) -> String {
    let s: &SlurmSpec = &study.slurm;
    let mut o = String::new();
    o.push_str("#!/bin/sh\n");
    o.push_str(&format!(
        "# Written by assay for campaign `{}` at {written_utc}: one array task per run folder.\n",
        study.name
    ));
    o.push_str(&format!(
        "# Each task runs the simulator in its folder and writes {TASK_RESULT} there.\n"
    ));
    o.push_str(&format!("#SBATCH --job-name={job_name}\n"));
    let throttle = s.array_limit.map(|l| format!("%{l}")).unwrap_or_default();
    o.push_str(&format!(
        "#SBATCH --array=0-{}{throttle}\n",
        tasks.len().saturating_sub(1)
    ));
    let logs = campaign.join(SLURM_DIR).join("logs");
    o.push_str(&format!("#SBATCH --output={}/%A_%a.out\n", logs.display()));
    o.push_str(&format!("#SBATCH --time={}\n", task_time(study)));
    o.push_str("#SBATCH --ntasks=1\n");
    if let Some(p) = &s.partition {
        o.push_str(&format!("#SBATCH --partition={p}\n"));
    }
    if let Some(c) = s.cpus_per_task {
        o.push_str(&format!("#SBATCH --cpus-per-task={c}\n"));
    }
    if let Some(m) = &s.mem {
        o.push_str(&format!("#SBATCH --mem={m}\n"));
    }
    if let Some(a) = &s.account {
        o.push_str(&format!("#SBATCH --account={a}\n"));
    }
    if let Some(q) = &s.qos {
        o.push_str(&format!("#SBATCH --qos={q}\n"));
    }
    for a in &s.extra_args {
        o.push_str(&format!("#SBATCH {a}\n"));
    }
    o.push('\n');
    if !s.prelude.is_empty() {
        o.push_str("# execution.slurm.prelude\n");
        for l in &s.prelude {
            o.push_str(l);
            o.push('\n');
        }
        o.push('\n');
    }
    let out_file = sh_quote(&study.simulator.output.file);
    o.push_str(&format!(
        r#"# run_task DIR PROGRAM ARGS...: run one simulator in DIR, never through a shell
# string, with the study's timeout; record how it ended.
run_task() {{
  dir=$1; shift
  cd "$dir" || {{ echo "assay task: cannot enter $dir" >&2; exit 1; }}
  rm -f {TASK_RESULT} .{TASK_RESULT}.tmp {TASK_STARTED} {out_file} stdout.txt stderr.txt
  started=$(date +%s.%N)
  printf 'host: "%s"\nstarted_epoch_s: %s\n' "$(hostname)" "$started" > {TASK_STARTED}
  timeout -k {KILL_AFTER_S} {timeout} "$@" </dev/null >stdout.txt 2>stderr.txt
  code=$?
  ended=$(date +%s.%N)
  sha=""
  if [ -f {out_file} ]; then sha=$(sha256sum {out_file} | cut -d ' ' -f 1); fi
  {{
    printf 'job: "%s_%s"\n' "$SLURM_ARRAY_JOB_ID" "$SLURM_ARRAY_TASK_ID"
    printf 'task: %s\n' "$SLURM_ARRAY_TASK_ID"
    printf 'host: "%s"\n' "$(hostname)"
    printf 'started_epoch_s: %s\n' "$started"
    printf 'ended_epoch_s: %s\n' "$ended"
    printf 'exit_code: %s\n' "$code"
    printf 'output_sha256: "%s"\n' "$sha"
  }} > .{TASK_RESULT}.tmp && mv -f .{TASK_RESULT}.tmp {TASK_RESULT}
}}

case "$SLURM_ARRAY_TASK_ID" in
"#,
        timeout = study.simulator.timeout_s,
    ));
    for (i, t) in tasks.iter().enumerate() {
        o.push_str(&format!("{i})"));
        for (k, v) in &t.env {
            o.push_str(&format!(" export {k}={};", sh_quote(v)));
        }
        o.push_str(&format!(
            " run_task {} {}",
            sh_quote(&t.dir.display().to_string()),
            sh_quote(&t.program.display().to_string())
        ));
        for a in &t.args {
            o.push(' ');
            o.push_str(&sh_quote(a));
        }
        o.push_str(" ;;\n");
    }
    o.push_str("*) echo \"assay task: no run for array index $SLURM_ARRAY_TASK_ID\" >&2; exit 2 ;;\nesac\n");
    o
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quoting_survives_quotes_and_spaces() {
        assert_eq!(sh_quote("a b"), "'a b'");
        assert_eq!(sh_quote("it's"), r"'it'\''s'");
        assert_eq!(sh_quote(""), "''");
    }
}
