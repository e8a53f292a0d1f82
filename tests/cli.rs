//! Integration tests: cli — the real binary's commands, messages and exit codes.

use crate::common::{fixture, formfactory, repo_root, stderr, stdout, tempdir};

#[test]
fn schema_command_prints_the_committed_schema() {
    let dir = tempdir();
    let o = formfactory(dir.path(), &["schema"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let committed =
        std::fs::read_to_string(repo_root().join("schemas/pipeline.schema.json")).unwrap();
    assert!(
        stdout(&o) == committed,
        "`formfactory schema` differs from the committed file"
    );
}

#[test]
fn check_reports_typo_with_location_and_exit_code() {
    let dir = tempdir();
    let text = std::fs::read_to_string(fixture("pipeline/minimal.yaml"))
        .unwrap()
        .replace(
            "twopt: twopt.csv",
            "twopt: twopt.csv\n  keep_common_cnfigs: true",
        );
    for f in ["twopt.csv", "threept.csv"] {
        std::fs::copy(fixture(&format!("pipeline/{f}")), dir.path().join(f)).unwrap();
    }
    std::fs::write(dir.path().join("typo.yaml"), text).unwrap();
    let o = formfactory(dir.path(), &["check", "typo.yaml"]);
    assert!(!o.status.success());
    let e = stderr(&o);
    assert!(e.contains("typo.yaml:12:3"), "{e}");
    assert!(e.contains("did you mean `keep_common_configs`?"), "{e}");
}

#[test]
fn every_command_help_shows_an_example() {
    let dir = tempdir();
    for cmd in ["run", "check", "mock", "inspect", "schema", "completions"] {
        let o = formfactory(dir.path(), &[cmd, "--help"]);
        assert!(o.status.success(), "{cmd}: {}", stderr(&o));
        assert!(
            stdout(&o).contains("Example:") || stdout(&o).contains("Examples:"),
            "`{cmd} --help` has no example"
        );
    }
}

#[test]
fn completions_are_printed_for_bash() {
    let dir = tempdir();
    let o = formfactory(dir.path(), &["completions", "bash"]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(stdout(&o).contains("formfactory"));
}
