//! YAML plumbing for the pipeline file: where each key sits in the text, `--set` overrides,
//! and error messages that quote line and column and suggest the near miss of a misspelt key.
//!
//! serde_yaml_ng reports syntax and type errors with a location, but a parsed value carries
//! no positions. Semantic checks therefore look keys up in a [`Positions`] map built by a
//! small indentation scan of the text (block mappings, `- ` sequence items and one-line flow
//! mappings), keyed by dotted path (`ratio.tau_cut`, `q2_fits.G_E.kmax`, `a.b[2]`).

use crate::{Error, Result};
use serde_yaml_ng::{Mapping, Value};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// A place in the pipeline file (1-based line and column) or a `--set` argument.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Origin {
    /// Line and column in the file.
    File {
        /// 1-based line.
        line: usize,
        /// 1-based column.
        column: usize,
    },
    /// The `--set` argument that set the key.
    Set(String),
    /// Nowhere in particular (a default value).
    Default,
}

/// Dotted key path to its position in the text, plus the `--set` arguments applied.
#[derive(Clone, Debug, Default)]
pub struct Positions {
    file: PathBuf,
    keys: BTreeMap<String, (usize, usize)>,
    sets: Vec<(String, String)>,
}

impl Positions {
    /// Scan `text` (the contents of `file`) for the positions of its keys.
    pub fn scan(file: &Path, text: &str) -> Self {
        let mut keys = BTreeMap::new();
        // (indent of the key, dotted path of the key)
        let mut stack: Vec<(usize, String)> = Vec::new();
        // next sequence index per parent path
        let mut seq_next: BTreeMap<String, usize> = BTreeMap::new();
        for (ln, raw) in text.lines().enumerate() {
            let line = ln + 1;
            let content = raw.trim_start();
            if content.is_empty() || content.starts_with('#') || content.starts_with("---") {
                continue;
            }
            let mut indent = raw.len() - content.len();
            let mut rest = content;
            // sequence items: `- value` or `- key: value`
            while let Some(after) = rest.strip_prefix('-') {
                if !(after.is_empty() || after.starts_with(' ')) || stack.len() >= MAX_DEPTH {
                    break;
                }
                while stack.last().is_some_and(|(i, _)| *i > indent) {
                    stack.pop();
                }
                // a sequence may sit at the same indent as its parent key
                let parent = match stack.last() {
                    Some((i, p)) if *i <= indent => p.clone(),
                    _ => String::new(),
                };
                let idx = seq_next.entry(parent.clone()).or_insert(0);
                let path = format!("{parent}[{idx}]");
                *idx += 1;
                keys.entry(path.clone()).or_insert((line, indent + 1));
                let trimmed = after.trim_start();
                indent += 1 + (after.len() - trimmed.len());
                stack.push((indent - 1, path));
                rest = trimmed;
            }
            let Some((key, value)) = split_key(rest) else {
                continue;
            };
            while stack.last().is_some_and(|(i, _)| *i >= indent) {
                stack.pop();
            }
            if stack.len() >= MAX_DEPTH {
                // Deeper than any pipeline: no positions, so memory stays linear in the text
                // (the parser refuses such nesting itself).
                continue;
            }
            let parent = stack.last().map(|(_, p)| p.clone()).unwrap_or_default();
            let path = join(&parent, key);
            keys.entry(path.clone()).or_insert((line, indent + 1));
            seq_next.remove(&path);
            let value_col = indent + (rest.len() - value.len());
            if value.trim_start().starts_with(['{', '[']) {
                scan_flow(&path, value, line, value_col, &mut keys);
            }
            stack.push((indent, path));
        }
        Positions {
            file: file.to_path_buf(),
            keys,
            sets: Vec::new(),
        }
    }

    /// The file the positions refer to.
    pub fn file(&self) -> &Path {
        &self.file
    }

    /// Record that `--set assignment` set `path`.
    pub fn record_set(&mut self, path: &str, assignment: &str) {
        self.sets.push((path.to_string(), assignment.to_string()));
    }

    /// Where `path` was set: the last `--set` covering it, else its position in the file
    /// (or the position of its nearest ancestor that is in the file).
    pub fn origin(&self, path: &str) -> Origin {
        for (p, a) in self.sets.iter().rev() {
            if path == p || is_descendant(path, p) || is_descendant(p, path) {
                return Origin::Set(a.clone());
            }
        }
        let mut probe = path.to_string();
        loop {
            if let Some(&(line, column)) = self.keys.get(&probe) {
                return Origin::File { line, column };
            }
            match parent_of(&probe) {
                Some(p) => probe = p,
                None => return Origin::Default,
            }
        }
    }

    /// `file:line:column` (or `--set k=v`) for messages about `path`.
    pub fn describe(&self, path: &str) -> String {
        match self.origin(path) {
            Origin::File { line, column } => format!("{}:{line}:{column}", self.file.display()),
            Origin::Set(a) => format!("{} (from `--set {a}`)", self.file.display()),
            Origin::Default => format!("{} (default value)", self.file.display()),
        }
    }

    /// A configuration error about `path`: location, then the message.
    pub fn error(&self, path: &str, message: impl std::fmt::Display) -> Error {
        Error::config(format!("{}: {message}", self.describe(path)))
    }
}

fn is_descendant(path: &str, ancestor: &str) -> bool {
    path.len() > ancestor.len()
        && path.starts_with(ancestor)
        && matches!(path.as_bytes()[ancestor.len()], b'.' | b'[')
}

fn parent_of(path: &str) -> Option<String> {
    let cut = path.rfind(['.', '['])?;
    Some(path[..cut].to_string())
}

fn join(parent: &str, key: &str) -> String {
    if parent.is_empty() {
        key.to_string()
    } else {
        format!("{parent}.{key}")
    }
}

/// Split `key: value` at the first `:` followed by space or end of line; `None` if the
/// text is not a mapping entry.
fn split_key(s: &str) -> Option<(&str, &str)> {
    let bytes = s.as_bytes();
    if bytes
        .first()
        .is_some_and(|b| matches!(b, b'{' | b'[' | b'"' | b'\''))
    {
        // quoted keys are not used in pipeline files; treat as values
        return None;
    }
    for (i, &b) in bytes.iter().enumerate() {
        if b == b'#' && i > 0 && bytes[i - 1] == b' ' {
            return None;
        }
        if b == b':' && (i + 1 == bytes.len() || bytes[i + 1] == b' ') {
            let key = s[..i].trim();
            if key.is_empty() {
                return None;
            }
            return Some((key, &s[i + 1..]));
        }
    }
    None
}

/// Keys and items of a one-line flow value (`{ a: 1, b: [2, 3] }`, `[4, 6]`) starting at
/// 0-based column `col0`.
/// Nesting depth beyond which the position scan records nothing: every path is as long as
/// its depth, so an unlimited depth would make the scan quadratic in the text.
const MAX_DEPTH: usize = 64;

fn scan_flow(
    parent: &str,
    text: &str,
    line: usize,
    col0: usize,
    keys: &mut BTreeMap<String, (usize, usize)>,
) {
    // (path of the collection, Some(next index) for a sequence, None for a mapping)
    let mut stack: Vec<(String, Option<usize>)> = Vec::new();
    let mut token_start: Option<usize> = None;
    let mut last_key = String::new();
    for (i, ch) in text.char_indices() {
        match ch {
            '{' | '[' => {
                if stack.len() >= MAX_DEPTH {
                    return;
                }
                let base = match stack.last() {
                    None => parent.to_string(),
                    Some((p, Some(idx))) => format!("{p}[{idx}]"),
                    Some((p, None)) => join(p, &last_key),
                };
                stack.push((base, (ch == '[').then_some(0)));
                token_start = None;
            }
            '}' | ']' => {
                stack.pop();
                token_start = None;
                if stack.is_empty() {
                    return;
                }
            }
            ',' => {
                if let Some((_, Some(idx))) = stack.last_mut() {
                    *idx += 1;
                }
                token_start = None;
            }
            ':' => {
                if let (Some(s), Some((base, None))) = (token_start, stack.last()) {
                    let key = text[s..i].trim();
                    if !key.is_empty() {
                        keys.entry(join(base, key)).or_insert((line, col0 + s + 1));
                        last_key = key.to_string();
                    }
                }
                token_start = None;
            }
            c if c.is_whitespace() => {}
            _ => {
                if token_start.is_none() {
                    token_start = Some(i);
                    if let Some((base, Some(idx))) = stack.last() {
                        keys.entry(format!("{base}[{idx}]"))
                            .or_insert((line, col0 + i + 1));
                    }
                }
            }
        }
    }
}

/// Apply `--set key.path=value` to `root`: the value is parsed as a YAML scalar or flow
/// value; missing intermediate mappings are created (an unknown key is then reported by
/// the typed parse with the `--set` argument as its origin). Returns the dotted path.
pub fn apply_set(root: &mut Value, assignment: &str) -> Result<String> {
    let Some((path, raw)) = assignment.split_once('=') else {
        return Err(Error::config(format!(
            "`--set {assignment}`: expected KEY=VALUE with a dotted key path, e.g. `--set resampling.samples=50`"
        )));
    };
    let path = path.trim();
    if path.is_empty() || path.split('.').any(str::is_empty) {
        return Err(Error::config(format!(
            "`--set {assignment}`: the key path `{path}` is empty or has an empty part"
        )));
    }
    let value: Value = if raw.trim().is_empty() {
        Value::String(String::new())
    } else {
        serde_yaml_ng::from_str(raw).map_err(|e| {
            Error::config(format!(
                "`--set {assignment}`: the value `{raw}` is not a YAML scalar or flow value: {e}"
            ))
        })?
    };
    let mut node = root;
    let parts: Vec<&str> = path.split('.').collect();
    for (i, part) in parts.iter().enumerate() {
        if !node.is_mapping() {
            let at = parts[..i].join(".");
            return Err(Error::config(format!(
                "`--set {assignment}`: `{at}` is not a mapping, so it has no key `{part}`"
            )));
        }
        let map = node
            .as_mapping_mut()
            .ok_or_else(|| Error::config("unreachable"))?;
        let key = Value::String((*part).to_string());
        if i + 1 == parts.len() {
            map.insert(key, value);
            return Ok(path.to_string());
        }
        if !map.contains_key(&key) || map.get(&key).is_some_and(Value::is_null) {
            map.insert(key.clone(), Value::Mapping(Mapping::new()));
        }
        node = map
            .get_mut(&key)
            .ok_or_else(|| Error::config("unreachable"))?;
    }
    Ok(path.to_string())
}

/// Refuse every key of the input `given` that the typed parse dropped: `resolved` is the
/// typed spec serialized back, so a key missing there was not recognised. Null values are
/// skipped (an explicit `key: null` means "default").
pub fn check_known_keys(
    given: &Value,
    resolved: &Value,
    path: &str,
    positions: &Positions,
) -> Result<()> {
    match (given, resolved) {
        (Value::Mapping(g), Value::Mapping(r)) => {
            for (k, v) in g {
                if v.is_null() {
                    continue;
                }
                let key = key_text(k);
                let child = join(path, &key);
                match r.get(k) {
                    Some(rv) => check_known_keys(v, rv, &child, positions)?,
                    None => {
                        let valid: Vec<String> = r.keys().map(key_text).collect();
                        let valid: Vec<&str> = valid.iter().map(String::as_str).collect();
                        let section = if path.is_empty() {
                            "the top level".to_string()
                        } else {
                            format!("`{path}`")
                        };
                        let mut m = format!("unknown key `{key}` in {section}");
                        if let Some(s) = suggest(&key, &valid) {
                            m.push_str(&format!("; did you mean `{s}`?"));
                        }
                        m.push_str(&format!(" Valid keys: {}.", valid.join(", ")));
                        return Err(positions.error(&child, m));
                    }
                }
            }
            Ok(())
        }
        // enums serialize as YAML tags: `{variant: {..}}` comes back as `!variant {..}`
        (Value::Mapping(g), Value::Tagged(t)) if g.len() == 1 => match g.iter().next() {
            Some((k, v)) if t.tag == key_text(k) => {
                check_known_keys(v, &t.value, &join(path, &key_text(k)), positions)
            }
            _ => Ok(()),
        },
        (Value::Sequence(g), Value::Sequence(r)) => {
            for (i, (gv, rv)) in g.iter().zip(r).enumerate() {
                check_known_keys(gv, rv, &format!("{path}[{i}]"), positions)?;
            }
            Ok(())
        }
        _ => Ok(()),
    }
}

fn key_text(k: &Value) -> String {
    match k {
        Value::String(s) => s.clone(),
        other => serde_yaml_ng::to_string(other)
            .map(|s| s.trim().to_string())
            .unwrap_or_default(),
    }
}

/// Parse the section `section` of `root`, without the pipeline's own keys `own`, as the
/// stage settings type `T` it embeds: errors then carry the key path inside the section
/// (a flattened parse of the whole file cannot say which key was wrong).
pub fn check_embedded<T: serde::de::DeserializeOwned>(
    root: &Value,
    section: &str,
    own: &[&str],
    positions: &Positions,
) -> Result<()> {
    let Some(Value::Mapping(m)) = root.get(section) else {
        return Ok(());
    };
    let mut rest = Value::Mapping(m.clone());
    for k in own {
        if let Value::Mapping(r) = &mut rest {
            r.remove(*k);
        }
    }
    // serde_yaml_ng reads a data-carrying enum variant only in tag form (`!variant {..}`)
    // when parsing text, while the schema and the flattened parse use `{variant: {..}}`:
    // turn each such mapping the parser stumbles on into a tag and try again.
    for _ in 0..16 {
        let text = serde_yaml_ng::to_string(&rest)
            .map_err(|e| Error::config(format!("cannot re-read `{section}`: {e}")))?;
        let err = match serde_yaml_ng::from_str::<T>(&text) {
            Ok(_) => return Ok(()),
            Err(e) => e,
        };
        let msg = err.to_string();
        let retag = msg
            .split_once(": invalid type: map, expected a YAML tag")
            .map(|(p, _)| p.to_string())
            .filter(|p| is_path(p))
            .and_then(|p| tag_mapping_at(&mut rest, &p).then_some(()));
        if retag.is_none() {
            return Err(translate_with(&err, positions, section, own));
        }
    }
    Ok(())
}

/// Replace the one-key mapping `{k: v}` at dotted `path` (no sequence indices) by the
/// tagged value `!k v`; false if there is no such mapping.
fn tag_mapping_at(root: &mut Value, path: &str) -> bool {
    let mut node = root;
    for part in path.split('.') {
        match node.get_mut(part) {
            Some(n) => node = n,
            None => return false,
        }
    }
    let Value::Mapping(m) = node else {
        return false;
    };
    let Some((Value::String(k), v)) = m.iter().next().filter(|_| m.len() == 1) else {
        return false;
    };
    *node = Value::Tagged(Box::new(serde_yaml_ng::value::TaggedValue {
        tag: serde_yaml_ng::value::Tag::new(k.clone()),
        value: v.clone(),
    }));
    true
}

/// Levenshtein edit distance between two strings (by characters).
pub fn levenshtein(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    let mut cur = vec![0; b.len() + 1];
    for (i, ca) in a.chars().enumerate() {
        cur[0] = i + 1;
        for (j, &cb) in b.iter().enumerate() {
            let sub = prev[j] + usize::from(ca != cb);
            cur[j + 1] = sub.min(prev[j + 1] + 1).min(cur[j] + 1);
        }
        std::mem::swap(&mut prev, &mut cur);
    }
    prev[b.len()]
}

/// The candidate closest to `word` if it is a plausible misspelling (distance at most a
/// third of the word's length, at least 1; ties go to the first candidate).
pub fn suggest<'a>(word: &str, candidates: &[&'a str]) -> Option<&'a str> {
    let limit = (word.chars().count() / 3).max(1);
    candidates
        .iter()
        .map(|c| (levenshtein(word, c), *c))
        .filter(|(d, _)| *d <= limit)
        .min_by_key(|(d, _)| *d)
        .map(|(_, c)| c)
}

/// Turn a serde_yaml_ng error from parsing the pipeline into a configuration error that
/// names the location, the key path and, for a misspelt key, the near miss.
pub fn translate(err: &serde_yaml_ng::Error, positions: &Positions) -> Error {
    translate_in(err, positions, "")
}

/// [`translate`] for an error from parsing the sub-tree at `prefix` on its own (its
/// location refers to re-serialized text, so positions come from the key path).
fn translate_in(err: &serde_yaml_ng::Error, positions: &Positions, prefix: &str) -> Error {
    translate_with(err, positions, prefix, &[])
}

/// [`translate_in`] where the section also accepts the keys `extra` (the pipeline's own keys
/// beside an embedded stage's settings), so they are offered as valid too.
fn translate_with(
    err: &serde_yaml_ng::Error,
    positions: &Positions,
    prefix: &str,
    extra: &[&str],
) -> Error {
    let text = err.to_string();
    // Display is "[path: ]message[ at line L column C]"
    let body = match text.rfind(" at line ") {
        Some(i) if err.location().is_some() => &text[..i],
        _ => text.as_str(),
    };
    let (path, message) = match body.split_once(": ") {
        Some((p, m)) if is_path(p) => (join(prefix, p), m.to_string()),
        _ => (prefix.to_string(), body.to_string()),
    };
    let mut key_path = path.clone();
    let friendly = if let Some(rest) = message.strip_prefix("unknown field `") {
        let (field, tail) = rest.split_once('`').unwrap_or((rest, ""));
        key_path = join(&path, field);
        let mut expected = backticked(tail);
        if path == prefix {
            expected.extend_from_slice(extra);
        }
        let section = if path.is_empty() {
            "the top level".to_string()
        } else {
            format!("`{path}`")
        };
        let mut m = format!("unknown key `{field}` in {section}");
        if let Some(s) = suggest(field, &expected) {
            m.push_str(&format!("; did you mean `{s}`?"));
        }
        if !expected.is_empty() {
            m.push_str(&format!(" Valid keys: {}.", expected.join(", ")));
        }
        m
    } else if let Some(rest) = message.strip_prefix("unknown variant `") {
        let (word, tail) = rest.split_once('`').unwrap_or((rest, ""));
        let expected = backticked(tail);
        let mut m = format!("`{word}` is not a valid value for `{path}`");
        if let Some(s) = suggest(word, &expected) {
            m.push_str(&format!("; did you mean `{s}`?"));
        }
        if !expected.is_empty() {
            m.push_str(&format!(" Valid values: {}.", expected.join(", ")));
        }
        m
    } else if path.is_empty() {
        message.clone()
    } else {
        format!("`{path}`: {message}")
    };
    let origin = positions.origin(&key_path);
    let place = match (&origin, err.location()) {
        (Origin::Set(_), _) | (_, None) => positions.describe(&key_path),
        _ if !prefix.is_empty() => positions.describe(&key_path),
        (_, Some(loc)) => format!(
            "{}:{}:{}",
            positions.file().display(),
            loc.line(),
            loc.column()
        ),
    };
    Error::config(format!("{place}: {friendly}"))
}

fn is_path(s: &str) -> bool {
    !s.is_empty()
        && s.chars()
            .all(|c| c.is_alphanumeric() || matches!(c, '_' | '.' | '[' | ']' | '?' | '-'))
}

/// All backticked words in `s` (serde's "expected one of `a`, `b`").
fn backticked(s: &str) -> Vec<&str> {
    s.split('`').skip(1).step_by(2).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn levenshtein_known_values() {
        // Textbook examples (Wagner & Fischer 1974; the kitten/sitting pair is the usual one).
        assert_eq!(levenshtein("kitten", "sitting"), 3);
        assert_eq!(levenshtein("", "abc"), 3);
        assert_eq!(levenshtein("flaw", "lawn"), 2);
        assert_eq!(levenshtein("tsep_mni", "tsep_min"), 2);
        assert_eq!(
            suggest("tsep_mni", &["tau_cut", "tsep_min"]),
            Some("tsep_min")
        );
        assert_eq!(suggest("zzz", &["tau_cut", "tsep_min"]), None);
    }

    #[test]
    fn positions_of_block_flow_and_sequence_keys() {
        let text = "# c\nensemble:\n  L: 24\n  T: 48\nratio:\n  tau_cut: 2\n  fit: {a: 1, b: {c: [5, 6]}}\nlist:\n  - x: 1\n    y: 2\n  - x: 3\ntop: 1\n";
        let p = Positions::scan(Path::new("f.yaml"), text);
        assert_eq!(p.origin("ensemble"), Origin::File { line: 2, column: 1 });
        assert_eq!(p.origin("ensemble.T"), Origin::File { line: 4, column: 3 });
        assert_eq!(
            p.origin("ratio.tau_cut"),
            Origin::File { line: 6, column: 3 }
        );
        assert_eq!(
            p.origin("ratio.fit.b"),
            Origin::File {
                line: 7,
                column: 15
            }
        );
        assert_eq!(
            p.origin("ratio.fit.b.c"),
            Origin::File {
                line: 7,
                column: 19
            }
        );
        assert_eq!(
            p.origin("ratio.fit.b.c[1]"),
            Origin::File {
                line: 7,
                column: 26
            }
        );
        assert_eq!(
            p.origin("list[0].y"),
            Origin::File {
                line: 10,
                column: 5
            }
        );
        assert_eq!(
            p.origin("list[1].x"),
            Origin::File {
                line: 11,
                column: 5
            }
        );
        assert_eq!(
            p.origin("top"),
            Origin::File {
                line: 12,
                column: 1
            }
        );
        // unknown paths fall back to the nearest ancestor
        assert_eq!(p.origin("ratio.nope"), Origin::File { line: 5, column: 1 });
        assert_eq!(p.origin("nope"), Origin::Default);
    }

    #[test]
    fn set_creates_and_overrides() {
        let mut v: Value = serde_yaml_ng::from_str("a:\n  b: 1\n").unwrap();
        apply_set(&mut v, "a.b=[1, 2]").unwrap();
        apply_set(&mut v, "a.c.d=x").unwrap();
        assert_eq!(
            v["a"]["b"],
            serde_yaml_ng::from_str::<Value>("[1, 2]").unwrap()
        );
        assert_eq!(v["a"]["c"]["d"], Value::String("x".into()));
        assert!(apply_set(&mut v, "a.b.c=1").is_err());
        assert!(apply_set(&mut v, "novalue").is_err());
        assert!(apply_set(&mut v, "a..b=1").is_err());
    }
}
