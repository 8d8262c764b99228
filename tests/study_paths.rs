//! Template destinations and the output file must stay inside the run folder.

mod common;

use common::{edit, line_of, Env};

fn validate_error(env: &Env, text: &str) -> String {
    let study = env.write_study_text(text);
    let out = env
        .assay(["validate".as_ref(), study.as_os_str()])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2), "bad input exits 2");
    String::from_utf8_lossy(&out.stderr).into_owned()
}

#[test]
fn an_escaping_template_destination_is_refused() {
    let env = Env::new();
    env.write("deck.tmpl", "a = {{A}}\n");
    for bad in ["../deck.inp", "/tmp/deck.inp", "sub/../../deck.inp"] {
        let text = edit(
            &env.minimal_study("ok"),
            "  output:\n",
            &format!("  files:\n    - {{template: deck.tmpl, to: \"{bad}\"}}\n  output:\n"),
        );
        let line = line_of(&text, bad);
        let e = validate_error(&env, &text);
        assert!(
            e.contains(&format!(":{line}: simulator.files[0].to: `{bad}` must be a relative path inside the run folder (no `..`, not absolute)")),
            "{bad}: {e}"
        );
    }
}

#[test]
fn an_escaping_output_file_is_refused() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "    file: out.csv",
        "    file: ../out.csv",
    );
    let e = validate_error(&env, &text);
    assert!(
        e.contains(
            "simulator.output.file: `../out.csv` must be a relative path inside the run folder"
        ),
        "{e}"
    );
}
