//! Integration tests: the project's documents — every relative link resolves, the key
//! references are current, and schema texts point only inside the project.

use crate::common::repo_root;
use std::path::{Path, PathBuf};

/// The documents a user is sent to.
fn documents() -> Vec<PathBuf> {
    let root = repo_root();
    let mut docs = vec![
        root.join("README.md"),
        root.join("DEVELOPERS.md"),
        root.join("demo-data/README.md"),
    ];
    let mut in_docs: Vec<PathBuf> = std::fs::read_dir(root.join("docs"))
        .expect("docs/ exists")
        .map(|e| e.expect("directory entry").path())
        .filter(|p| p.extension().is_some_and(|x| x == "md"))
        .collect();
    in_docs.sort();
    docs.extend(in_docs);
    docs
}

/// Markdown link targets `](target)` of a text.
fn link_targets(text: &str) -> Vec<String> {
    text.split("](")
        .skip(1)
        .filter_map(|rest| rest.split_once(')').map(|(t, _)| t.trim().to_string()))
        .collect()
}

/// GitHub's anchor of a heading: lower case, punctuation dropped, spaces to hyphens.
fn anchor(heading: &str) -> String {
    heading
        .trim()
        .to_lowercase()
        .chars()
        .filter_map(|c| match c {
            ' ' => Some('-'),
            c if c.is_alphanumeric() || c == '-' || c == '_' => Some(c),
            _ => None,
        })
        .collect()
}

fn anchors_of(path: &Path) -> Vec<String> {
    std::fs::read_to_string(path)
        .unwrap_or_default()
        .lines()
        .filter_map(|l| l.strip_prefix('#'))
        .map(|h| anchor(h.trim_start_matches('#')))
        .collect()
}

#[test]
fn every_relative_link_resolves() {
    let mut checked = 0;
    for doc in documents() {
        let text = std::fs::read_to_string(&doc).expect("document readable");
        let dir = doc.parent().expect("document in a directory");
        for target in link_targets(&text) {
            if target.contains("://") || target.starts_with("mailto:") {
                continue;
            }
            let (file, fragment) = match target.split_once('#') {
                Some((f, a)) => (f, Some(a)),
                None => (target.as_str(), None),
            };
            let path = if file.is_empty() {
                doc.clone()
            } else {
                dir.join(file)
            };
            assert!(
                path.exists(),
                "{}: the link `{target}` points at a missing file",
                doc.display()
            );
            if let Some(a) = fragment {
                assert!(
                    anchors_of(&path).iter().any(|h| h == a),
                    "{}: the link `{target}` names a heading that does not exist",
                    doc.display()
                );
            }
            checked += 1;
        }
    }
    assert!(checked >= 20, "only {checked} links found");
}

#[test]
fn readme_names_only_documents_that_exist() {
    let text = std::fs::read_to_string(repo_root().join("README.md")).unwrap();
    for word in text.split(|c: char| c.is_whitespace() || "`()[],;".contains(c)) {
        if word.ends_with(".md") || word.ends_with(".json") && word.starts_with("schemas/") {
            assert!(
                repo_root().join(word).exists(),
                "README names `{word}`, which is not in the project"
            );
        }
    }
}

#[test]
fn key_references_are_generated_from_the_current_schemas() {
    use formfactory::pipeline::reference;
    for (doc, schema) in [
        ("docs/pipeline.md", formfactory::pipeline::schema_value()),
        ("docs/mock.md", formfactory::mock::schema_value()),
    ] {
        let text = std::fs::read_to_string(repo_root().join(doc)).unwrap();
        let want = reference::splice(&text, &reference::markdown(&schema))
            .expect("the document has the generated-part markers");
        assert!(
            text == want,
            "{doc} is stale: run `formfactory schema --markdown` (pipeline) and \
             `formfactory schema --mock --markdown` and paste between the markers"
        );
    }
}

#[test]
fn every_pipeline_key_is_in_the_reference_with_its_default() {
    // Independent of the generator: walk the schema's top-level sections and their keys.
    let schema = formfactory::pipeline::schema_value();
    let text = std::fs::read_to_string(repo_root().join("docs/pipeline.md")).unwrap();
    let defs = &schema["definitions"];
    let mut n = 0;
    for (section, prop) in schema["properties"].as_object().unwrap() {
        assert!(
            text.contains(&format!("| `{section}` |")),
            "{section} missing"
        );
        let body = prop["allOf"][0]["$ref"]
            .as_str()
            .and_then(|r| r.rsplit('/').next())
            .map(|name| &defs[name]);
        let Some(props) = body.and_then(|b| b["properties"].as_object()) else {
            continue;
        };
        for (key, p) in props {
            let row = format!("| `{section}.{key}` |");
            let line = text
                .lines()
                .find(|l| l.starts_with(&row))
                .unwrap_or_else(|| panic!("docs/pipeline.md has no row for {section}.{key}"));
            if let Some(d) = p.get("default") {
                let shown = match d {
                    serde_json::Value::String(s) => s.clone(),
                    other => serde_json::to_string(other).unwrap(),
                };
                assert!(
                    line.contains(&shown.replace('|', "\\|")),
                    "{section}.{key}: default {shown} not in `{line}`"
                );
            }
            n += 1;
        }
    }
    assert!(n > 40, "only {n} keys checked");
}

#[test]
fn schema_texts_point_only_inside_the_project() {
    for (name, text) in [
        ("pipeline", formfactory::pipeline::schema_json()),
        ("mock", formfactory::mock::schema_json()),
    ] {
        assert!(
            !text.contains("[`"),
            "the {name} schema contains a Rust doc link"
        );
        for (i, _) in text.match_indices("methods.md") {
            assert!(
                text[..i].ends_with("docs/"),
                "the {name} schema cites methods.md outside docs/"
            );
        }
        assert!(
            !text.contains("/work/"),
            "the {name} schema names a machine path"
        );
    }
}

#[test]
fn committed_mock_schema_is_current() {
    let committed = std::fs::read_to_string(repo_root().join("schemas/mock.schema.json")).unwrap();
    assert_eq!(
        committed,
        formfactory::mock::schema_json(),
        "run `formfactory schema --mock > schemas/mock.schema.json`"
    );
}
