//! Hostile environments: a read-only campaign folder, a full one, a YAML alias bomb and
//! a 100 MB study file. Each must end in a clear error, and no record that existed
//! before may change or be left half written.
//!
//! The full folder is a small tmpfs, which only root can mount, and only where the
//! container allows it: otherwise that part is skipped with a note on stderr (set
//! `ASSAY_REQUIRE_TMPFS=1` to make a failing mount fail the test instead). The read-only
//! folder is a tmpfs remounted read-only as root (root ignores file modes, so without a
//! tmpfs that part is skipped too), and `chmod a-w` otherwise.

mod common;

use common::{Env, N_POINTS};
use std::collections::BTreeMap;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::Command;

fn is_root() -> bool {
    let out = Command::new("id").arg("-u").output().expect("id runs");
    String::from_utf8_lossy(&out.stdout).trim() == "0"
}

/// A tmpfs mounted at a folder for the life of the value.
struct Tmpfs {
    at: PathBuf,
}

impl Tmpfs {
    /// Mount a tmpfs of `size` at `at`, or `None` (with a note) where mounting is not
    /// allowed (an unprivileged container), unless `ASSAY_REQUIRE_TMPFS` is set.
    fn mount(at: &Path, size: &str) -> Option<Self> {
        std::fs::create_dir_all(at).expect("mount point");
        let ok = Command::new("mount")
            .args(["-t", "tmpfs", "-o", &format!("size={size}"), "tmpfs"])
            .arg(at)
            .stderr(std::process::Stdio::null())
            .status()
            .is_ok_and(|st| st.success());
        if !ok {
            assert!(
                std::env::var_os("ASSAY_REQUIRE_TMPFS").is_none(),
                "mounting a tmpfs as root failed"
            );
            eprintln!("skipped: this machine does not allow mounting a tmpfs");
            return None;
        }
        Some(Self {
            at: at.to_path_buf(),
        })
    }

    fn remount_read_only(&self) {
        let st = Command::new("mount")
            .args(["-o", "remount,ro"])
            .arg(&self.at)
            .status()
            .expect("mount runs");
        assert!(st.success(), "remounting read-only failed ({st})");
    }
}

impl Drop for Tmpfs {
    fn drop(&mut self) {
        let _ = Command::new("umount").arg("-l").arg(&self.at).status();
    }
}

/// sha256 of every file below `dir`, by path relative to it.
fn snapshot(dir: &Path) -> BTreeMap<String, String> {
    let mut out = BTreeMap::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).expect("read folder") {
            let p = e.expect("entry").path();
            if p.is_dir() {
                stack.push(p);
            } else {
                let rel = p.strip_prefix(dir).expect("below").display().to_string();
                let bytes = std::fs::read(&p).expect("read file");
                out.insert(rel, assay::record::sha256_hex(&bytes));
            }
        }
    }
    out
}

/// Every `run.yaml` below the campaign parses as a whole record.
fn assert_records_whole(campaign: &Path) {
    for rel in snapshot(campaign).keys() {
        if rel.ends_with(".yaml") {
            let text = std::fs::read_to_string(campaign.join(rel)).expect("read");
            let v: Result<serde_yaml::Value, _> = serde_yaml::from_str(&text);
            assert!(
                v.is_ok_and(|v| v["provenance"].is_mapping()),
                "{rel} is not a whole record:\n{text}"
            );
        }
    }
}

/// Records as they were, except the lock-holder note, which `assay` may rewrite.
fn records(campaign: &Path) -> BTreeMap<String, String> {
    let mut s = snapshot(campaign);
    s.retain(|k, _| !k.starts_with(".lock"));
    s
}

/// A campaign of the minimal study, designed and run, with `extra` points added to
/// the design and not yet run.
fn prepared(env: &Env, extra: &str) -> PathBuf {
    let study = env.write_minimal_study("ok");
    env.assay(["design".as_ref(), study.as_os_str()])
        .assert()
        .success();
    env.assay(["run".as_ref(), study.as_os_str()])
        .assert()
        .success();
    env.assay(["design", "--add", extra])
        .arg(&study)
        .assert()
        .success();
    study
}

#[test]
fn a_read_only_campaign_folder_is_refused_clearly_and_left_as_it_was() {
    let env = Env::new();
    let root = is_root();
    // As root the campaign lives on a tmpfs that is then remounted read-only.
    let _fs = if root {
        match Tmpfs::mount(&env.runs_root(), "4m") {
            Some(fs) => Some(fs),
            // Root ignores file modes: without a tmpfs there is no read-only folder.
            None => return,
        }
    } else {
        None
    };
    let study = prepared(&env, "2");
    let campaign = env.campaign();
    let before = records(&campaign);
    match &_fs {
        Some(fs) => fs.remount_read_only(),
        None => {
            let st = Command::new("chmod")
                .args(["-R", "a-w"])
                .arg(&campaign)
                .status()
                .expect("chmod");
            assert!(st.success());
        }
    }

    let out = env.call("run", &study);
    let stderr = &out.stderr;
    // Not bad input: the study is fine, the folder is not (exit code 1).
    assert_eq!(out.code, Some(1), "{stderr}");
    let want = if root {
        "Read-only file system"
    } else {
        "Permission denied"
    };
    let lock = campaign.join(".lock");
    assert!(
        stderr.contains(&format!(
            "error: cannot open the lock file {} (assay writes in the campaign folder, even to resume): {want}",
            lock.display()
        )),
        "the error should name the campaign folder and say why:\n{stderr}"
    );
    assert_eq!(records(&campaign), before, "a record changed");

    // Reading a read-only campaign works: status and verify write nothing.
    let out = env.call("status", &study);
    assert_eq!(out.code, Some(0), "{}", out.stderr);
    let out = env.call("verify", &study);
    let stdout = &out.stdout;
    assert!(stdout.contains("runs       ok"), "{stdout}");

    if !root {
        // Leave the folder removable for the temporary directory's clean-up.
        let _ = Command::new("chmod")
            .args(["-R", "u+w"])
            .arg(&campaign)
            .status();
    }
}

#[test]
fn a_full_campaign_folder_fails_clearly_corrupts_nothing_and_resumes() {
    if !is_root() {
        eprintln!("skipped: a full folder needs a small tmpfs, and mounting one needs root");
        return;
    }
    let env = Env::new();
    let Some(fs) = Tmpfs::mount(&env.runs_root(), "1m") else {
        return;
    };
    let study = prepared(&env, "6");
    let campaign = env.campaign();
    let before = records(&campaign);

    // Fill the file system to the last byte.
    let filler = fs.at.join("filler");
    {
        let mut f = std::fs::File::create(&filler).expect("filler");
        let block = vec![0u8; 4096];
        while f.write_all(&block).is_ok() {}
        let _ = f.sync_all();
    }

    let out = env.call("run", &study);
    let stderr = &out.stderr;
    assert_eq!(out.code, Some(1), "{stderr}");
    let error = stderr
        .lines()
        .find(|l| l.starts_with("error: "))
        .unwrap_or_default();
    assert!(
        error.starts_with(&format!("error: cannot write {}", campaign.display()))
            && error.contains("/run.yaml: No space left on device"),
        "the error should say which record could not be written and why:\n{stderr}"
    );
    // Every record that existed is unchanged; every record is whole; no temporary
    // file is left holding on to space.
    let after = records(&campaign);
    for (k, v) in &before {
        assert_eq!(after.get(k), Some(v), "{k} changed");
    }
    assert_records_whole(&campaign);
    assert!(
        after.keys().all(|k| !k.contains(".tmp-")),
        "temporary files left: {:?}",
        after
            .keys()
            .filter(|k| k.contains(".tmp-"))
            .collect::<Vec<_>>()
    );

    // With space again the campaign resumes and finishes, and verifies clean.
    std::fs::remove_file(&filler).expect("remove filler");
    env.assay(["run".as_ref(), study.as_os_str()])
        .assert()
        .success();
    let out = env.call("verify", &study);
    let stdout = &out.stdout;
    assert_eq!(out.code, Some(0), "{stdout}");
    let out = env.call("status", &study);
    let stdout = &out.stdout;
    let done = format!("{}", N_POINTS + 6);
    assert!(
        stdout
            .lines()
            .any(|l| l.split_whitespace().nth(4) == Some(done.as_str())),
        "all {done} runs done:\n{stdout}"
    );
}

/// Nine levels of nine aliases, `&a0 [leaf × 9]`, `&a1 [*a0 × 9]` … `&a8`: 9⁹ ≈ 3.9e8
/// leaves once expanded (the "billion laughs" shape, common practice for this test).
fn alias_chain(leaf: &str) -> Vec<String> {
    let mut chain = vec![format!("&a0 [{}]", [leaf; 9].join(", "))];
    for i in 1..9 {
        chain.push(format!(
            "&a{i} [{}]",
            vec![format!("*a{}", i - 1); 9].join(", ")
        ));
    }
    chain
}

#[test]
fn a_yaml_alias_bomb_in_a_study_is_refused_with_a_message() {
    let env = Env::new();
    // Inside a prior, which the study reader takes apart as a free YAML value.
    let chain = alias_chain("lol");
    let text = common::edit(
        &env.minimal_study("ok"),
        "    range: [0.0, 1.0]\n",
        &format!(
            "    range: [0.0, 1.0]\n    prior: {{normal: [{}]}}\n",
            chain.join(", ")
        ),
    );
    let study = env.write_study_text(&text);
    let out = env.call("run", &study);
    let stderr = &out.stderr;
    assert_eq!(out.code, Some(2), "{stderr}");
    assert!(
        stderr.contains("the YAML expands too far through its aliases"),
        "{stderr}"
    );
}

#[test]
fn a_yaml_alias_bomb_from_a_simulator_is_an_error_not_a_hang() {
    // A simulator's YAML output goes through the same reader: the same guard holds.
    let text = format!("all: [{}]\ny: *a8\n", alias_chain("1").join(", "));
    let e = assay::runs::parse::parse_output(
        &text,
        assay::study::OutputFormat::Yaml,
        None,
        &["y".to_string()],
    )
    .unwrap_err();
    assert!(e.contains("repetition limit exceeded"), "{e}");
}

#[test]
fn a_100_mb_study_file_is_refused_with_a_message() {
    let env = Env::new();
    env.write_field_data();
    let path = env.path("study.yaml");
    {
        let mut f = std::io::BufWriter::new(std::fs::File::create(&path).expect("create"));
        f.write_all(env.minimal_study("ok").as_bytes())
            .expect("write");
        let line = format!("# {}\n", "padding ".repeat(12));
        let mut n = 0;
        while n < 100 << 20 {
            f.write_all(line.as_bytes()).expect("write");
            n += line.len();
        }
    }
    assert!(std::fs::metadata(&path).unwrap().len() >= 100 << 20);
    let out = env.call("validate", &path);
    let stderr = &out.stderr;
    assert_eq!(out.code, Some(2), "{stderr}");
    assert!(
        stderr.contains("the study file is larger than 1024 KiB"),
        "{stderr}"
    );
}
