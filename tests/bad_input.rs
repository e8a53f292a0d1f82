//! Integration tests: bad input — the real binary on hostile or careless input (CSV tables,
//! pipeline YAML, mock specs, command lines). Every case asserts the exit code, that nothing
//! panicked, and the specific message (with file:line:column where a position exists). Each
//! run is limited to 4 GB of address space and 60 s, so an unbounded allocation or a hang
//! fails the case instead of the machine. Also: the output-safety sentinels (a user's
//! directory given as `--out` with `--force` survives) and arbitrary bytes fed to the readers.

use crate::common::{fixture, listing, repo_root, tempdir};
use std::path::Path;
use std::process::{Command, Output};

/// Run the binary in `dir` under `ulimit -v 4000000` and a 60 s timeout.
fn bounded(dir: &Path, args: &[&str]) -> Output {
    Command::new("sh")
        .arg("-c")
        .arg("ulimit -v 4000000 && exec timeout 60 \"$0\" \"$@\"")
        .arg(env!("CARGO_BIN_EXE_formfactory"))
        .args(args)
        .current_dir(dir)
        .output()
        .expect("sh runs")
}

/// What a case writes before it runs.
enum Content {
    Text(String),
    Bytes(Vec<u8>),
    Dir,
    Fifo,
    Symlink(&'static str),
}

struct Case {
    name: &'static str,
    files: Vec<(&'static str, Content)>,
    args: Vec<&'static str>,
    code: i32,
    expect: Vec<&'static str>,
}

fn t(s: &str) -> Content {
    Content::Text(s.to_string())
}

const TWOPT_HEAD: &str = "config,t,px,py,pz,re,im\n";
const THREEPT_HEAD: &str = "config,tsep,tau,pfx,pfy,pfz,qx,qy,qz,current,projector,re,im\n";

fn twopt(rows: &str) -> Content {
    Content::Text(format!("{TWOPT_HEAD}{rows}"))
}

fn threept(rows: &str) -> Content {
    Content::Text(format!("{THREEPT_HEAD}{rows}"))
}

fn csv_case(name: &'static str, file: Content, expect: Vec<&'static str>) -> Case {
    Case {
        name,
        files: vec![("t.csv", file)],
        args: vec!["inspect", "t.csv"],
        code: 1,
        expect,
    }
}

/// The fixture pipeline with `from` replaced by `to`, run through `check`.
fn yaml_case(name: &'static str, from: &str, to: &str, expect: Vec<&'static str>) -> Case {
    let text = std::fs::read_to_string(fixture("pipeline/minimal.yaml")).expect("fixture");
    assert!(text.contains(from), "{name}: `{from}` not in the fixture");
    Case {
        name,
        files: vec![("p.yaml", Content::Text(text.replacen(from, to, 1)))],
        args: vec!["check", "p.yaml"],
        code: 1,
        expect,
    }
}

/// The small mock spec with `from` replaced by `to`, run through `mock`.
fn mock_case(name: &'static str, from: &str, to: &str, expect: Vec<&'static str>) -> Case {
    let text = std::fs::read_to_string(fixture("mock/pion.yaml")).expect("fixture");
    assert!(text.contains(from), "{name}: `{from}` not in the fixture");
    Case {
        name,
        files: vec![("m.yaml", Content::Text(text.replacen(from, to, 1)))],
        args: vec!["mock", "m.yaml", "--out", "out"],
        code: 1,
        expect,
    }
}

fn cases() -> Vec<Case> {
    vec![
        // --- CSV tables ---
        csv_case("empty table", t(""), vec!["t.csv", "the file is empty"]),
        csv_case(
            "unknown column",
            t("config,t,px,py,pz,re,im,bogus\n"),
            vec!["t.csv:1:8", "unknown column `bogus`"],
        ),
        csv_case(
            "missing column",
            t("config,t,px,py,pz,re\n1,0,0,0,0,1\n"),
            vec!["t.csv:1", "required column `im` is missing"],
        ),
        csv_case(
            "unparsable number",
            twopt("1,0,0,0,0,abc,0\n"),
            vec!["t.csv:2:6", "cannot read `abc` as a number"],
        ),
        csv_case(
            "NaN value",
            twopt("1,0,0,0,0,NaN,0\n"),
            vec!["t.csv:2:6", "non-finite value `NaN`"],
        ),
        csv_case(
            "negative time",
            twopt("1,-1,0,0,0,1,0\n"),
            vec!["t.csv:2:2", "out of range"],
        ),
        csv_case(
            "time beyond any lattice",
            twopt("1,70000,0,0,0,1,0\n"),
            vec!["t.csv:2:2", "out of range"],
        ),
        csv_case(
            "short row",
            twopt("1,0,0,0,0,1\n"),
            vec!["t.csv:2", "row has 6 fields, the header has 7"],
        ),
        csv_case(
            "last line cut without newline",
            twopt("1,0,0,0,0,1.0,0\n1,1,0,0,0,6.2"),
            vec!["t.csv", "does not end with a newline", "cut short"],
        ),
        csv_case(
            "momentum beyond 32 bits",
            twopt("1,0,99999999999,0,0,1,0\n"),
            vec!["t.csv:2:3", "momentum component"],
        ),
        csv_case(
            "configuration not an integer",
            twopt("1.5,0,0,0,0,1,0\n"),
            vec!["t.csv:2:1", "as an integer"],
        ),
        csv_case(
            "duplicate row",
            twopt("1,0,0,0,0,1,0\n1,0,0,0,0,1,0\n"),
            vec!["t.csv:3", "duplicate"],
        ),
        csv_case(
            "binary garbage in a field",
            Content::Bytes({
                let mut b = TWOPT_HEAD.as_bytes().to_vec();
                b.extend_from_slice(b"1,0,0,0,0,\x00\xff\x1b[31m,0\n");
                b
            }),
            vec!["t.csv:2:6", "cannot read `\\x00\\xff\\x1b[31m` as a number"],
        ),
        csv_case(
            "huge field",
            Content::Text(format!(
                "{TWOPT_HEAD}1,0,0,0,0,{},0\n",
                "7".repeat(5_000_000)
            )),
            vec!["t.csv:2:6", "bytes in all", "non-finite value"],
        ),
        csv_case(
            "huge unknown column name",
            Content::Text(format!(
                "{},{}\n",
                TWOPT_HEAD.trim_end(),
                "x".repeat(1_000_000)
            )),
            vec!["t.csv:1:8", "unknown column", "bytes in all"],
        ),
        csv_case(
            "unterminated quote",
            twopt("1,0,0,0,0,\"1.0,0\n"),
            vec!["t.csv:2", "row has"],
        ),
        csv_case(
            "three-point unknown current",
            threept("1,4,0,0,0,0,0,0,0,V9,unpol,1,0\n"),
            vec!["t.csv:2:10", "unknown current `V9`"],
        ),
        csv_case(
            "three-point unknown projector",
            threept("1,4,0,0,0,0,0,0,0,V4,pol9,1,0\n"),
            vec!["t.csv:2:11", "unknown projector `pol9`"],
        ),
        csv_case(
            "three-point tau beyond tsep",
            threept("1,4,5,0,0,0,0,0,0,V4,unpol,1,0\n"),
            vec!["t.csv:2:3", "tau"],
        ),
        csv_case("header only", t(TWOPT_HEAD), vec!["t.csv", "no data rows"]),
        Case {
            name: "directory as a table",
            files: vec![("t.csv", Content::Dir)],
            args: vec!["inspect", "t.csv/"],
            code: 1,
            expect: vec!["neither twopt.csv nor threept.csv"],
        },
        Case {
            name: "FIFO as a table",
            files: vec![("t.csv", Content::Fifo)],
            args: vec!["inspect", "t.csv"],
            code: 1,
            expect: vec!["t.csv: is a named pipe (FIFO)"],
        },
        Case {
            name: "symbolic-link loop as a table",
            files: vec![("t.csv", Content::Symlink("t.csv"))],
            args: vec!["inspect", "t.csv"],
            code: 1,
            expect: vec!["t.csv: is a symbolic link that loops"],
        },
        Case {
            name: "device as a table",
            files: vec![],
            args: vec!["inspect", "/dev/zero"],
            code: 1,
            expect: vec!["/dev/zero: is a device"],
        },
        Case {
            name: "missing table, cause printed once",
            files: vec![],
            args: vec!["inspect", "nope.csv"],
            code: 1,
            expect: vec!["nope.csv: does not exist"],
        },
        // --- pipeline YAML ---
        yaml_case(
            "seed beyond 64 bits",
            "  bin_size: 1",
            "  bin_size: 1\n  seed: 18446744073709551616",
            vec![
                "p.yaml:",
                "seed 18446744073709551616 is out of range",
                "2^64 - 1",
            ],
        ),
        yaml_case(
            "misspelt key",
            "  bin_size: 1",
            "  bin_sise: 1",
            vec!["p.yaml:", "did you mean `bin_size`?"],
        ),
        yaml_case(
            "bin size zero",
            "  bin_size: 1",
            "  bin_size: 0",
            vec!["p.yaml:15:", "bin_size 0 is not valid"],
        ),
        yaml_case(
            "tab indentation",
            "  bin_size: 1",
            "\tbin_size: 1",
            vec!["p.yaml:15:"],
        ),
        yaml_case(
            "data table is a directory",
            "twopt: twopt.csv",
            "twopt: sub",
            vec!["p.yaml:11:", "is a directory"],
        ),
        yaml_case(
            "data table missing",
            "twopt: twopt.csv",
            "twopt: missing.csv",
            vec!["p.yaml:11:", "does not exist"],
        ),
        yaml_case(
            "negative lattice size",
            "  L: 8",
            "  L: -8",
            vec!["p.yaml:5:"],
        ),
        yaml_case(
            "a list where a number belongs",
            "  T: 16",
            "  T: [16]",
            vec!["p.yaml:6:"],
        ),
        Case {
            name: "pipeline not UTF-8",
            files: vec![(
                "p.yaml",
                Content::Bytes(b"ensemble:\n  label: \xff\xfe\n".to_vec()),
            )],
            args: vec!["check", "p.yaml"],
            code: 1,
            expect: vec!["p.yaml: is not UTF-8 text"],
        },
        Case {
            name: "deeply nested brackets",
            files: vec![("p.yaml", Content::Text("[".repeat(100_000)))],
            args: vec!["check", "p.yaml"],
            code: 1,
            expect: vec!["p.yaml"],
        },
        Case {
            name: "flow brackets nested beyond the limit",
            files: vec![(
                "p.yaml",
                Content::Text(format!("ensemble: {}\n", "[".repeat(32_000))),
            )],
            args: vec!["check", "p.yaml"],
            code: 1,
            expect: vec!["p.yaml:1:267: brackets `[`/`{` nested more than 256 levels deep"],
        },
        mock_case(
            "mock spec with flow brackets nested beyond the limit",
            "tseps: [8, 12]",
            &format!("tseps: {}8{}", "[".repeat(300), "]".repeat(300)),
            vec![
                "mock spec m.yaml:15:266: brackets",
                "nested more than 256 levels",
            ],
        ),
        Case {
            name: "deeply nested block keys",
            files: vec![(
                "p.yaml",
                Content::Text(
                    (0..1_000)
                        .map(|i| format!("{}k:\n", " ".repeat(i)))
                        .collect(),
                ),
            )],
            args: vec!["check", "p.yaml"],
            code: 1,
            expect: vec!["p.yaml"],
        },
        Case {
            name: "pipeline larger than any real one",
            files: vec![("p.yaml", Content::Text("#".repeat(2_000_000)))],
            args: vec!["check", "p.yaml"],
            code: 1,
            expect: vec!["p.yaml: is larger than 1024 kB"],
        },
        Case {
            name: "pipeline is a FIFO",
            files: vec![("p.yaml", Content::Fifo)],
            args: vec!["check", "p.yaml"],
            code: 1,
            expect: vec!["p.yaml: is a named pipe (FIFO)"],
        },
        Case {
            name: "pipeline is a directory",
            files: vec![("p.yaml", Content::Dir)],
            args: vec!["check", "p.yaml"],
            code: 1,
            expect: vec!["p.yaml: is a directory"],
        },
        Case {
            name: "malformed --set",
            files: vec![],
            args: vec!["check", "p.yaml", "--set", "ensemble.L"],
            code: 1,
            expect: vec!["--set", "ensemble.L"],
        },
        Case {
            name: "--jobs 0",
            files: vec![],
            args: vec!["run", "p.yaml", "--jobs", "0"],
            code: 1,
            expect: vec!["--jobs 0"],
        },
        // --- mock specs ---
        mock_case(
            "mock unknown key",
            "seed: 3",
            "seed: 3\nsede: 4",
            vec!["m.yaml", "sede"],
        ),
        mock_case(
            "mock with a billion configurations",
            "configs: 2",
            "configs: 1000000000",
            vec![
                "1000000000 configurations",
                "of memory",
                "reduce the setting",
            ],
        ),
        mock_case(
            "mock with T = 10^7",
            "T: 32",
            "T: 10000000",
            vec!["T = 10000000", "of memory"],
        ),
        Case {
            name: "mock spec is a directory",
            files: vec![("m.yaml", Content::Dir)],
            args: vec!["mock", "m.yaml", "--out", "out"],
            code: 1,
            expect: vec!["m.yaml: is a directory"],
        },
        Case {
            name: "mock into a user's directory with --force",
            files: vec![
                ("m.yaml", Content::Text(read_fixture("mock/pion.yaml"))),
                ("out/thesis.tex", t("x")),
            ],
            args: vec!["mock", "m.yaml", "--out", "out", "--force"],
            code: 1,
            expect: vec!["out: is not empty and was not written by formfactory"],
        },
        Case {
            name: "mock over an existing ensemble without --force",
            files: vec![
                ("m.yaml", Content::Text(read_fixture("mock/pion.yaml"))),
                ("out/.formfactory-mock", t("formfactory mock ensemble\n")),
            ],
            args: vec!["mock", "m.yaml", "--out", "out"],
            code: 1,
            expect: vec!["out: already exists", "--force"],
        },
        Case {
            name: "mock into the folder of its spec",
            files: vec![("sub/m.yaml", Content::Text(read_fixture("mock/pion.yaml")))],
            args: vec!["mock", "sub/m.yaml", "--out", "sub", "--force"],
            code: 1,
            expect: vec!["contains sub/m.yaml, an input of this run"],
        },
        // --- command line ---
        Case {
            name: "unknown command",
            files: vec![],
            args: vec!["frobnicate"],
            code: 2,
            expect: vec!["unrecognized subcommand"],
        },
        Case {
            name: "missing pipeline",
            files: vec![],
            args: vec!["run", "nowhere.yaml"],
            code: 1,
            expect: vec!["nowhere.yaml: does not exist"],
        },
        Case {
            name: "output is the filesystem root",
            files: vec![("m.yaml", Content::Text(read_fixture("mock/pion.yaml")))],
            args: vec!["mock", "m.yaml", "--out", "/", "--force"],
            code: 1,
            expect: vec!["output directory /: is the filesystem root"],
        },
    ]
}

fn read_fixture(rel: &str) -> String {
    std::fs::read_to_string(fixture(rel)).expect("fixture")
}

/// Lay out a case's files in `dir` (plus the fixture pipeline's data as `p.yaml`'s tables).
fn prepare(dir: &Path, case: &Case) {
    for f in ["twopt.csv", "threept.csv"] {
        std::fs::copy(fixture(&format!("pipeline/{f}")), dir.join(f)).expect("copy");
    }
    std::fs::create_dir_all(dir.join("sub")).expect("sub");
    let has_pipeline = case.files.iter().any(|(n, _)| *n == "p.yaml");
    if !has_pipeline {
        std::fs::copy(fixture("pipeline/minimal.yaml"), dir.join("p.yaml")).expect("copy");
    }
    for (name, content) in &case.files {
        let path = dir.join(name);
        if let Some(parent) = path.parent() {
            std::fs::create_dir_all(parent).expect("parent");
        }
        let _ = std::fs::remove_file(&path);
        match content {
            Content::Text(s) => std::fs::write(&path, s).expect("write"),
            Content::Bytes(b) => std::fs::write(&path, b).expect("write"),
            Content::Dir => {
                let _ = std::fs::remove_dir_all(&path);
                std::fs::create_dir_all(&path).expect("dir")
            }
            Content::Fifo => {
                let ok = Command::new("mkfifo").arg(&path).status().expect("mkfifo");
                assert!(ok.success());
            }
            Content::Symlink(target) => std::os::unix::fs::symlink(target, &path).expect("symlink"),
        }
    }
}

#[test]
fn bad_input_suite() {
    let cases = cases();
    assert!(cases.len() >= 40, "{} cases", cases.len());
    let mut failures = Vec::new();
    for case in &cases {
        let dir = tempdir();
        prepare(dir.path(), case);
        let o = bounded(dir.path(), &case.args);
        let err = String::from_utf8_lossy(&o.stderr).into_owned();
        let code = o.status.code();
        let mut problems = Vec::new();
        if code != Some(case.code) {
            problems.push(format!("exit code {code:?}, expected {}", case.code));
        }
        if err.contains("panicked") || err.contains("RUST_BACKTRACE") {
            problems.push("panicked".into());
        }
        for e in &case.expect {
            if !err.contains(e) {
                problems.push(format!("message lacks `{e}`"));
            }
        }
        if err.matches("caused by").count() > 0 && err.contains("os error") {
            let first = err.find("os error");
            if err.rfind("os error") != first {
                problems.push("cause printed twice".into());
            }
        }
        if err.len() > 4000 {
            problems.push(format!("message of {} bytes", err.len()));
        }
        if !problems.is_empty() {
            failures.push(format!(
                "{}: {}\n    stderr: {}",
                case.name,
                problems.join("; "),
                crate_short(&err)
            ));
        }
    }
    assert!(
        failures.is_empty(),
        "{} of {} cases failed:\n{}",
        failures.len(),
        cases.len(),
        failures.join("\n")
    );
}

fn crate_short(s: &str) -> String {
    s.chars().take(600).collect()
}

// ---- output safety: the sentinel tests ----

/// A scratch project: the pion demo pipeline and its data under `root`.
fn project(root: &Path) {
    std::fs::create_dir_all(root.join("pipelines")).unwrap();
    std::fs::create_dir_all(root.join("demo-data/pion")).unwrap();
    std::fs::copy(
        repo_root().join("pipelines/pion-vector.yaml"),
        root.join("pipelines/pion-vector.yaml"),
    )
    .unwrap();
    for f in ["twopt.csv", "threept.csv"] {
        std::fs::copy(
            repo_root().join("demo-data/pion").join(f),
            root.join("demo-data/pion").join(f),
        )
        .unwrap();
    }
}

#[test]
fn force_never_deletes_a_users_directory() {
    let dir = tempdir();
    let root = dir.path();
    project(root);
    std::fs::create_dir_all(root.join("H/Documents")).unwrap();
    std::fs::write(root.join("H/Documents/thesis.tex"), "my thesis").unwrap();
    std::fs::write(root.join("notes.txt"), "keep").unwrap();
    let before = listing(root);
    for (out, why) in [
        ("H", "was not written by formfactory"),
        (".", "is the current directory"),
        ("pipelines", "an input of this run"),
        ("demo-data", "an input of this run"),
        ("demo-data/pion", "an input of this run"),
        ("..", "contains the current directory"),
        ("/", "is the filesystem root"),
    ] {
        let o = bounded(
            root,
            &[
                "run",
                "pipelines/pion-vector.yaml",
                "--out",
                out,
                "--force",
                "--quiet",
            ],
        );
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(1), "--out {out}: {err}");
        assert!(
            err.contains(why) && err.contains("nothing was changed"),
            "--out {out}: {err}"
        );
    }
    assert_eq!(listing(root), before);
    assert_eq!(
        std::fs::read_to_string(root.join("H/Documents/thesis.tex")).unwrap(),
        "my thesis"
    );
    assert!(root.join("pipelines/pion-vector.yaml").exists());
    assert!(root.join("demo-data/pion/twopt.csv").exists());
}

#[test]
fn force_replaces_a_previous_run_and_leaves_no_hidden_folder() {
    let dir = tempdir();
    let root = dir.path();
    project(root);
    let args = [
        "run",
        "pipelines/pion-vector.yaml",
        "--out",
        "runs/pion",
        "--quiet",
        "--set",
        "stop_after=spectrum",
    ];
    let o = bounded(root, &args);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    std::fs::write(root.join("runs/pion/stale.txt"), "from the first run").unwrap();
    let again = bounded(root, &args);
    assert_eq!(again.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&again.stderr).contains("--force"));
    let mut forced = args.to_vec();
    forced.push("--force");
    let o = bounded(root, &forced);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(!root.join("runs/pion/stale.txt").exists());
    assert!(root.join("runs/pion/.formfactory-run").exists());
    assert_eq!(listing(&root.join("runs")), vec!["pion"]);
}

#[test]
fn mock_output_is_replaced_only_when_forced_and_moves_in_whole() {
    let dir = tempdir();
    let root = dir.path();
    std::fs::copy(fixture("mock/pion.yaml"), root.join("m.yaml")).unwrap();
    let o = bounded(root, &["mock", "m.yaml", "--out", "data"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let first = std::fs::read(root.join("data/twopt.csv")).unwrap();
    let o = bounded(root, &["mock", "m.yaml", "--out", "data"]);
    assert_eq!(o.status.code(), Some(1));
    let o = bounded(root, &["mock", "m.yaml", "--out", "data", "--force"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(std::fs::read(root.join("data/twopt.csv")).unwrap(), first);
    assert_eq!(
        listing(&root.join("data")),
        vec![
            ".formfactory-mock",
            "threept.csv",
            "truth.yaml",
            "twopt.csv"
        ]
    );
    assert_eq!(listing(root), vec!["data", "m.yaml"]);
}

#[test]
fn closed_or_full_stdout_does_not_panic() {
    let dir = tempdir();
    // A reader that goes away at once: the schema is larger than a pipe's buffer.
    let o = Command::new("sh")
        .arg("-c")
        .arg("\"$0\" schema | true; \"$0\" schema | head -c 1 > /dev/null; exit 0")
        .arg(env!("CARGO_BIN_EXE_formfactory"))
        .current_dir(dir.path())
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.is_empty(), "{err}");
    let o = Command::new("sh")
        .arg("-c")
        .arg("exec \"$0\" schema > /dev/full")
        .arg(env!("CARGO_BIN_EXE_formfactory"))
        .current_dir(dir.path())
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(1), "{err}");
    assert!(
        err.contains("standard output") && err.contains("No space left"),
        "{err}"
    );
    assert!(!err.contains("panicked"), "{err}");
}

// ---- the readers on arbitrary bytes ----

mod arbitrary_bytes {
    use proptest::prelude::*;
    use std::path::Path;

    fn csv_like() -> impl Strategy<Value = Vec<u8>> {
        let header = prop_oneof![
            Just(super::TWOPT_HEAD.as_bytes().to_vec()),
            Just(super::THREEPT_HEAD.as_bytes().to_vec()),
            Just(Vec::new()),
        ];
        let body = prop::collection::vec(
            prop_oneof![
                Just(b",".to_vec()),
                Just(b"\n".to_vec()),
                Just(b"\"".to_vec()),
                Just(b"0".to_vec()),
                Just(b"-1".to_vec()),
                Just(b"65536".to_vec()),
                Just(b"1e308".to_vec()),
                Just(b"V4".to_vec()),
                Just(b"unpol".to_vec()),
                prop::collection::vec(any::<u8>(), 0..8),
            ],
            0..200,
        );
        (header, body).prop_map(|(mut h, b)| {
            h.extend(b.into_iter().flatten());
            h
        })
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(400))]
        #[test]
        fn twopt_reader_never_panics(bytes in csv_like()) {
            let _ = formfactory::io::read_twopt_from(&bytes[..], Path::new("p.csv"));
        }

        #[test]
        fn threept_reader_never_panics(bytes in csv_like()) {
            let _ = formfactory::io::read_threept_from(&bytes[..], Path::new("p.csv"));
        }

        #[test]
        fn readers_never_panic_on_raw_bytes(bytes in prop::collection::vec(any::<u8>(), 0..2000)) {
            let _ = formfactory::io::read_twopt_from(&bytes[..], Path::new("p.csv"));
            let _ = formfactory::io::read_threept_from(&bytes[..], Path::new("p.csv"));
        }
    }
}

// ---- no panic on data with three states ----

/// Every shipped pipeline, with bootstrap and with jackknife resampling, on mock data whose
/// two-point functions hold three states (more than any fit models): each run finishes or
/// refuses with a message, never panics.
#[test]
fn shipped_pipelines_do_not_panic_on_three_states() {
    let dir = tempdir();
    let root = dir.path();
    for spec in ["nucleon", "pion"] {
        let file = format!("{spec}_three_states.mock.yaml");
        std::fs::copy(fixture(&format!("bad_input/{file}")), root.join(&file)).unwrap();
        let o = bounded(root, &["mock", &file, "--out", spec]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    }
    let mut outcomes = Vec::new();
    for pipeline in [
        "nucleon-vector",
        "nucleon-axial",
        "excited-state-study",
        "pion-vector",
    ] {
        let data = if pipeline.starts_with("pion") {
            "pion"
        } else {
            "nucleon"
        };
        let path = repo_root().join(format!("pipelines/{pipeline}.yaml"));
        let path = path.to_string_lossy().into_owned();
        for method in ["bootstrap", "jackknife"] {
            let sets = [
                format!("data.twopt={}", root.join(data).join("twopt.csv").display()),
                format!(
                    "data.threept={}",
                    root.join(data).join("threept.csv").display()
                ),
                format!("resampling.method={method}"),
                "resampling.samples=40".to_string(),
            ];
            let out = format!("out-{pipeline}-{method}");
            let mut args = vec!["run", path.as_str(), "--out", &out, "--quiet"];
            for s in &sets {
                args.extend(["--set", s.as_str()]);
            }
            let o = bounded(root, &args);
            let err = String::from_utf8_lossy(&o.stderr).into_owned();
            let code = o.status.code();
            assert!(
                matches!(code, Some(0 | 1)) && !err.contains("panicked"),
                "{pipeline} with {method}: exit {code:?}\n{err}"
            );
            outcomes.push(format!("{pipeline}/{method}: {code:?}"));
        }
    }
    eprintln!("{}", outcomes.join(", "));
}
