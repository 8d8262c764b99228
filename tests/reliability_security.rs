//! Security guarantees of docs/security.md, one test each: no shell between assay and
//! the simulator (and sound quoting in the one place a shell is unavoidable, the Slurm
//! job script); nothing written outside the run folder; names and ids that would climb
//! out of a folder refused; symbolic links inside the campaign folder not followed
//! outside it.

mod common;

use common::{edit, sim, yaml_string, Env};
use std::path::{Path, PathBuf};
use std::process::Command;

/// Every place assay starts a process, as `file: code`. A new one must be added here
/// on purpose, after checking it starts no shell.
const PROCESS_STARTS: [&str; 2] = [
    // The simulator: argv[0] resolved against the study folder, arguments as a list.
    "src/runs/local.rs: Command::new(prog)",
    // Slurm's commands, through `slurm_cmd` (checked below).
    "src/runs/slurm/commands.rs: Command::new(program)",
];

/// The programs `slurm_cmd` may start.
const SLURM_COMMANDS: [&str; 4] = ["sbatch", "squeue", "scontrol", "scancel"];

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for e in std::fs::read_dir(dir).expect("read src") {
        let p = e.expect("entry").path();
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|x| x == "rs") {
            out.push(p);
        }
    }
}

#[test]
fn no_code_starts_a_shell() {
    let root = common::repo_root();
    let mut files = Vec::new();
    rust_files(&root.join("src"), &mut files);
    let mut starts = Vec::new();
    for f in &files {
        let text = std::fs::read_to_string(f).expect("read");
        let rel = f
            .strip_prefix(&root)
            .expect("below root")
            .display()
            .to_string();
        for line in text.lines() {
            let code = line.split("//").next().unwrap_or("");
            if let Some(i) = code.find("Command::new(") {
                let call = &code[i..];
                let end = call.find(')').map_or(call.len(), |j| j + 1);
                starts.push(format!("{rel}: {}", &call[..end]));
            }
            if let Some(i) = code.find("slurm_cmd(\"") {
                let program = code[i + "slurm_cmd(\"".len()..]
                    .split('"')
                    .next()
                    .unwrap_or("");
                assert!(
                    SLURM_COMMANDS.contains(&program),
                    "{rel}: slurm_cmd starts `{program}`"
                );
            }
            for shell in ["\"sh\"", "\"bash\"", "\"/bin/sh\"", "\"-c\""] {
                assert!(
                    !code.contains(shell) || !code.contains("Command"),
                    "{rel}: a shell next to a process start: {line}"
                );
            }
        }
        // A call whose program is on the next line (rustfmt splits long calls).
        assert!(
            !text.contains("Command::new(\n"),
            "{rel}: a process start this test cannot read"
        );
    }
    starts.sort();
    let mut want: Vec<String> = PROCESS_STARTS.iter().map(|s| s.to_string()).collect();
    want.sort();
    assert_eq!(starts, want, "the places that start processes changed");
    // Besides the calls with literal names, `slurm_cmd` is called with a name only from
    // within the Slurm module; it is private there (`pub(super)` in its child
    // `commands`: seen by the Slurm module's files only).
    let slurm = std::fs::read_to_string(root.join("src/runs/slurm/commands.rs")).expect("read");
    assert!(
        slurm.contains("\npub(super) fn slurm_cmd(program: &str"),
        "slurm_cmd is private to the Slurm module"
    );
}

/// Hostile arguments: quotes, command substitution, globbing, variables, line breaks.
const HOSTILE: [&str; 9] = [
    "it's",
    "$(touch pwned1)",
    "`touch pwned2`",
    "a\nb; touch pwned3",
    "\"double\" \\ back\\slash",
    "*",
    "$HOME ${PATH}",
    "--flag=x'y\"z",
    "",
];

#[test]
fn the_slurm_job_script_passes_hostile_arguments_verbatim_through_sh() {
    // The one shell in assay: sbatch takes a script. Run that script with a real `sh`
    // as Slurm would run one array task (without Slurm: #SBATCH lines are comments).
    let env = Env::new();
    let run = env.path("runs/one");
    std::fs::create_dir_all(&run).expect("run folder");
    let program = env.write(
        "argv.sh",
        "#!/bin/sh\nfor a in \"$@\"; do printf '%s\\0' \"$a\"; done > args.bin\nprintf '%s' \"$HOSTILE\" > env.txt\nprintf 'x,y\\n0,1\\n' > out.csv\n",
    );
    std::fs::set_permissions(
        &program,
        std::os::unix::fs::PermissionsExt::from_mode(0o755),
    )
    .expect("chmod");
    let study = env.write_minimal_study("ok");
    let study = assay::study::load(&study).expect("the minimal study is valid");
    let task = assay::runs::slurm::ScriptTask {
        dir: run.clone(),
        program,
        args: HOSTILE.iter().map(|s| s.to_string()).collect(),
        env: vec![("HOSTILE".into(), HOSTILE.join("|"))],
    };
    let script = assay::runs::slurm::job_script(
        &study,
        &env.path("runs"),
        "job",
        &[task],
        "2026-01-01T00:00:00Z",
    );
    let script_path = env.write("job.sh", &script);
    let st = Command::new("sh")
        .arg(&script_path)
        .env("SLURM_ARRAY_TASK_ID", "0")
        .env("SLURM_ARRAY_JOB_ID", "1")
        .current_dir(env.dir.path())
        .status()
        .expect("sh runs");
    assert!(st.success(), "the job script failed: {st}\n{script}");
    let args = std::fs::read(run.join("args.bin")).expect("args.bin");
    let args: Vec<&str> = std::str::from_utf8(&args)
        .expect("utf-8")
        .split_terminator('\0')
        .collect();
    // `split_terminator` drops the empty last argument's own terminator: compare with it.
    let mut want: Vec<&str> = HOSTILE.to_vec();
    if want.last() == Some(&"") && args.len() + 1 == want.len() {
        want.pop();
    }
    assert_eq!(args, want);
    assert_eq!(
        std::fs::read_to_string(run.join("env.txt")).expect("env.txt"),
        HOSTILE.join("|")
    );
    for n in 1..=3 {
        for dir in [run.as_path(), env.dir.path()] {
            assert!(
                !dir.join(format!("pwned{n}")).exists(),
                "pwned{n}: a shell ran it"
            );
        }
    }
}

fn design(env: &Env, study: &Path) {
    env.assay(["design".as_ref(), study.as_os_str()])
        .assert()
        .success();
}

/// A folder outside the campaign, empty.
fn outside(env: &Env) -> PathBuf {
    let p = env.path("outside");
    std::fs::create_dir_all(&p).expect("outside folder");
    p
}

fn is_empty(dir: &Path) -> bool {
    std::fs::read_dir(dir).expect("read").next().is_none()
}

#[test]
fn a_point_folder_that_is_a_link_outside_is_refused_and_nothing_is_written_there() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    design(&env, &study);
    let out = outside(&env);
    let link = env.campaign().join("runs/p0001");
    std::fs::create_dir_all(link.parent().unwrap()).expect("runs folder");
    std::os::unix::fs::symlink(&out, &link).expect("symlink");
    let common::Outcome { code, stderr, .. } = env.call("run", &study);
    assert_eq!(code, Some(1), "{stderr}");
    assert!(
        stderr.contains(&format!(
            "{} is a symbolic link; assay does not follow links inside a campaign folder",
            link.display()
        )),
        "{stderr}"
    );
    assert!(is_empty(&out), "assay wrote through the link");
}

#[test]
fn a_template_destination_behind_a_link_is_refused() {
    let env = Env::new();
    env.write("deck.tmpl", "a = {{A}}\n");
    let text = edit(
        &env.minimal_study("ok"),
        "  output:\n",
        "  files:\n    - {template: deck.tmpl, to: sub/deck.inp}\n  output:\n",
    );
    let study = env.write_study_text(&text);
    design(&env, &study);
    let out = outside(&env);
    let folder = env.run_folder("p0001");
    std::fs::create_dir_all(&folder).expect("run folder");
    std::os::unix::fs::symlink(&out, folder.join("sub")).expect("symlink");
    let common::Outcome { code, stderr, .. } = env.call("run", &study);
    assert_eq!(code, Some(1), "{stderr}");
    assert!(
        stderr.contains("/sub is a symbolic link; assay does not follow links"),
        "{stderr}"
    );
    assert!(is_empty(&out), "a template was written through the link");
    // The other points, without links, ran.
    assert!(env.run_folder("p0002").join("sub/deck.inp").is_file());
}

#[test]
fn an_output_file_linking_outside_the_run_folder_is_not_read() {
    let env = Env::new();
    // A file outside that would parse as a good output if it were read.
    let secret = env.write("outside/secret.csv", "x,y\n0,1\n1,2\n2,3\n");
    let leak = env.write(
        "leak.sh",
        &format!(
            "#!/bin/sh\nln -s {} \"$4\"\n",
            yaml_string(&secret.display().to_string())
        ),
    );
    std::fs::set_permissions(&leak, std::os::unix::fs::PermissionsExt::from_mode(0o755))
        .expect("chmod");
    let text = edit(
        &env.minimal_study("ok"),
        &yaml_string(&sim().display().to_string()),
        &yaml_string(&leak.display().to_string()),
    );
    let study = env.write_study_text(&text);
    design(&env, &study);
    let common::Outcome { code, stderr, .. } = env.call("run", &study);
    assert_eq!(code, Some(3), "every run fails: {stderr}");
    let record = std::fs::read_to_string(env.run_record("p0001")).expect("run.yaml");
    let r: serde_yaml::Value = serde_yaml::from_str(&record).expect("record");
    assert_eq!(r["state"].as_str(), Some("failed"));
    let reason = r["reason"].as_str().expect("reason");
    assert!(
        reason.starts_with(&format!(
            "output file `out.csv` is a symbolic link leading outside the run folder (to {}); not read",
            std::fs::canonicalize(&secret).unwrap().display()
        )),
        "{reason}"
    );
    assert!(r["values"].is_null(), "{record}");
}

#[test]
fn a_planted_stdout_link_is_replaced_not_written_through() {
    let env = Env::new();
    let victim = env.write("outside/victim.txt", "precious\n");
    let study = env.write_minimal_study("fail"); // writes to stderr, then exits 3
    design(&env, &study);
    let folder = env.run_folder("p0001");
    std::fs::create_dir_all(&folder).expect("run folder");
    for f in ["stdout.txt", "stderr.txt"] {
        std::os::unix::fs::symlink(&victim, folder.join(f)).expect("symlink");
    }
    let common::Outcome { code, stderr, .. } = env.call("run", &study);
    assert_eq!(code, Some(3), "{stderr}");
    assert_eq!(
        std::fs::read_to_string(&victim).expect("victim"),
        "precious\n",
        "the simulator's output went through the link"
    );
    let meta = std::fs::symlink_metadata(folder.join("stderr.txt")).expect("stderr.txt");
    assert!(meta.file_type().is_file(), "stderr.txt is a plain file now");
    assert!(std::fs::read_to_string(folder.join("stderr.txt"))
        .expect("stderr.txt")
        .contains("failing on purpose"));
}

#[test]
fn a_design_point_id_that_would_climb_out_is_refused() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    design(&env, &study);
    let design_file = env.campaign().join("design.yaml");
    let text = std::fs::read_to_string(&design_file).expect("design.yaml");
    std::fs::write(
        &design_file,
        edit(&text, "id: p0001", "id: ../../../escaped"),
    )
    .expect("write");
    let common::Outcome { code, stderr, .. } = env.call("run", &study);
    assert_eq!(code, Some(1), "{stderr}");
    assert!(
        stderr.contains(
            "points[0]: id `../../../escaped` is not a folder name (expected [A-Za-z0-9._-]+, not `.` or `..`)"
        ),
        "{stderr}"
    );
    assert!(!env.path("escaped").exists() && !env.path("runs/escaped").exists());
}
