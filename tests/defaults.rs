//! The defaults the JSON Schema of the pipeline file states (`formfactory schema`) are the
//! defaults the code uses. A pipeline with only the required keys is deserialized and every
//! key the schema gives a `default` is compared with the value the code filled in; then each
//! settings object is written as an empty map (`--set key={}`), so a key left out inside a
//! section that is present gets the same default as a section left out altogether.
//! (`pipeline::schema_defaults_match_the_code` checks one hand-written file with partial
//! blocks, arrays and tagged enums; this test reaches every settings object through
//! `pipeline::load` and `--set`.)

use crate::common::tempdir;
use formfactory::pipeline;
use serde_json::Value;
use std::path::Path;

/// Only the keys the schema requires.
const MINIMAL: &str = "\
ensemble:
  L: 8
  spacing_fm: 0.1
  pion_mass: 0.3
  hadron: spin1half
data:
  twopt: twopt.csv
  threept: threept.csv
";

/// Follow `$ref` and the single-schema `allOf` / nullable `anyOf` wrappers to the schema
/// that lists an object's properties.
fn resolve<'a>(root: &'a Value, s: &'a Value) -> &'a Value {
    if let Some(r) = s.get("$ref").and_then(Value::as_str) {
        let name = r.trim_start_matches("#/definitions/");
        return resolve(root, &root["definitions"][name]);
    }
    if let Some([one]) = s.get("allOf").and_then(Value::as_array).map(Vec::as_slice) {
        return resolve(root, one);
    }
    if let Some(any) = s.get("anyOf").and_then(Value::as_array) {
        let not_null: Vec<&Value> = any
            .iter()
            .filter(|v| v.get("type").and_then(Value::as_str) != Some("null"))
            .collect();
        if let [one] = not_null.as_slice() {
            return resolve(root, one);
        }
    }
    s
}

/// JSON equality with numbers compared as numbers (`100` and `100.0` are the same default).
fn same(a: &Value, b: &Value) -> bool {
    match (a, b) {
        (Value::Number(x), Value::Number(y)) => x.as_f64() == y.as_f64(),
        (Value::Array(x), Value::Array(y)) => {
            x.len() == y.len() && x.iter().zip(y).all(|(a, b)| same(a, b))
        }
        (Value::Object(x), Value::Object(y)) => {
            x.len() == y.len() && x.iter().all(|(k, v)| y.get(k).is_some_and(|w| same(v, w)))
        }
        _ => a == b,
    }
}

struct Walk<'a> {
    root: &'a Value,
    /// Every disagreement, as `key: schema …, code …`.
    mismatches: Vec<String>,
    /// Keys whose value is a settings object with listed properties (key path, its schema).
    objects: Vec<(String, &'a Value)>,
    /// Defaults compared.
    compared: usize,
}

impl<'a> Walk<'a> {
    /// Compare every key of `value` (the code's settings at `path`) that `schema` gives a
    /// default, and descend into settings objects.
    fn compare(&mut self, schema: &'a Value, value: &Value, path: &str) {
        let s = resolve(self.root, schema);
        let Some(props) = s.get("properties").and_then(Value::as_object) else {
            return;
        };
        for (k, p) in props {
            let here = if path.is_empty() {
                k.clone()
            } else {
                format!("{path}.{k}")
            };
            let v = value.get(k).unwrap_or(&Value::Null);
            if let Some(d) = p.get("default") {
                self.compared += 1;
                // a key the code does not serialize when absent has no value to compare
                if value.get(k).is_some() && !same(d, v) {
                    self.mismatches
                        .push(format!("{here}: schema default {d}, code {v}"));
                }
            }
            if resolve(self.root, p).get("properties").is_some() {
                self.objects.push((here.clone(), p));
                self.compare(p, v, &here);
            }
        }
    }
}

fn load(dir: &Path, sets: &[String]) -> Option<Value> {
    let path = dir.join("minimal.yaml");
    std::fs::write(&path, MINIMAL).unwrap();
    for table in ["twopt.csv", "threept.csv"] {
        std::fs::write(dir.join(table), "").unwrap();
    }
    let plan = pipeline::load(&path, sets).ok()?;
    Some(serde_json::to_value(&plan.spec).unwrap())
}

fn at<'v>(value: &'v Value, path: &str) -> &'v Value {
    path.split('.')
        .fold(value, |v, k| v.get(k).unwrap_or(&Value::Null))
}

#[test]
fn schema_defaults_equal_the_code_defaults() {
    let dir = tempdir();
    let schema = pipeline::schema_value();
    let spec = load(dir.path(), &[]).expect("the minimal pipeline loads");
    let mut walk = Walk {
        root: &schema,
        mismatches: Vec::new(),
        objects: Vec::new(),
        compared: 0,
    };
    walk.compare(&schema, &spec, "");
    let first_pass = walk.compared;
    // Each settings object written as `{}`: the keys inside take their own defaults.
    let objects = std::mem::take(&mut walk.objects);
    let mut loaded_empty = 0;
    for (path, node) in &objects {
        let Some(spec) = load(dir.path(), &[format!("{path}={{}}")]) else {
            continue; // an object with required keys of its own
        };
        loaded_empty += 1;
        let before = walk.mismatches.len();
        walk.compare(node, at(&spec, path), path);
        for m in &mut walk.mismatches[before..] {
            m.push_str(&format!(" (with `{path}: {{}}`)"));
        }
    }
    assert!(
        walk.mismatches.is_empty(),
        "defaults differ between schema and code:\n{}",
        walk.mismatches.join("\n")
    );
    // the walk reached the sections (guards against a schema layout it cannot follow)
    assert!(first_pass >= 40, "only {first_pass} defaults compared");
    assert!(
        loaded_empty >= 8,
        "only {loaded_empty} sections loaded as `{{}}`"
    );
}
