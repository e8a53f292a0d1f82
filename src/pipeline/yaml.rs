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
    /// The text parsed is not the file's (overrides were merged in): place errors by their
    /// key path, never by the parser's line and column.
    by_key: bool,
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
            by_key: false,
        }
    }

    /// The same positions for errors from parsing a text other than the file's.
    pub fn by_key_only(&self) -> Positions {
        Positions {
            by_key: true,
            ..self.clone()
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

/// Deepest nesting of flow collections (`[` / `{`) a YAML text may have. Pipeline files
/// need three or four levels; the YAML parser takes time quadratic in the depth, so
/// deeper text is refused before it is parsed.
pub const MAX_FLOW_DEPTH: usize = 256;

/// Refuse text whose flow brackets nest deeper than [`MAX_FLOW_DEPTH`], naming the line and
/// column of the first bracket too many; `origin` (e.g. `p.yaml`) prefixes the message.
/// Brackets inside quoted strings and comments do not count.
pub fn check_flow_depth(origin: &str, text: &str) -> Result<()> {
    match deep_flow_bracket(text) {
        None => Ok(()),
        Some((line, column)) => Err(Error::config(format!(
            "{origin}:{line}:{column}: brackets `[`/`{{` nested more than {MAX_FLOW_DEPTH} \
             levels deep; a YAML settings file needs only a few levels (unbalanced \
             brackets, or generated text?)"
        ))),
    }
}

/// Line and column (1-based, in characters) of the first flow bracket opened beyond
/// [`MAX_FLOW_DEPTH`] levels, if any.
fn deep_flow_bracket(text: &str) -> Option<(usize, usize)> {
    let mut depth = 0usize;
    let mut quote: Option<char> = None;
    let mut comment = false;
    let mut escaped = false;
    let (mut line, mut column) = (1usize, 0usize);
    let mut prev = '\n';
    for ch in text.chars() {
        column += 1;
        if ch == '\n' {
            (line, column) = (line + 1, 0);
            comment = false;
        }
        match quote {
            _ if comment => {}
            Some('"') if escaped => escaped = false,
            Some('"') if ch == '\\' => escaped = true,
            Some(q) if ch == q => quote = None,
            Some(_) => {}
            None => match ch {
                '#' if prev.is_whitespace() => comment = true,
                // a quote opens a string only where a scalar may begin
                '"' | '\''
                    if prev.is_whitespace()
                        || matches!(prev, '[' | '{' | ',' | ':')
                        || (ch == '\'' && prev == '\'') =>
                {
                    quote = Some(ch)
                }
                '[' | '{' => {
                    depth += 1;
                    if depth > MAX_FLOW_DEPTH {
                        return Some((line, column));
                    }
                }
                ']' | '}' => depth = depth.saturating_sub(1),
                _ => {}
            },
        }
        prev = ch;
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
        check_flow_depth(&format!("`--set {assignment}`"), raw)?;
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

pub use crate::error::{levenshtein, suggest};

/// Turn a serde_yaml_ng error from parsing the pipeline into a configuration error that
/// names the location, the key path and, for a misspelt key, the near miss.
pub fn translate(err: &serde_yaml_ng::Error, positions: &Positions) -> Error {
    let text = err.to_string();
    // Display is "[path: ]message[ at line L column C]"
    let body = match text.rfind(" at line ") {
        Some(i) if err.location().is_some() => &text[..i],
        _ => text.as_str(),
    };
    let (path, message) = match body.split_once(": ") {
        Some((p, m)) if is_path(p) => (p.to_string(), m.to_string()),
        _ => (String::new(), body.to_string()),
    };
    let mut key_path = path.clone();
    let friendly = if let Some(rest) = message.strip_prefix("unknown field `") {
        let (field, tail) = rest.split_once('`').unwrap_or((rest, ""));
        key_path = join(&path, field);
        let expected = backticked(tail);
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
        _ if positions.by_key => positions.describe(&key_path),
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
    fn flow_depth_limit_counts_only_real_brackets() {
        let deep = |n: usize| format!("a: {}1{}\n", "[".repeat(n), "]".repeat(n));
        assert_eq!(deep_flow_bracket(&deep(MAX_FLOW_DEPTH)), None);
        // the first bracket too many is at column 3 + MAX_FLOW_DEPTH (after `a: `)
        assert_eq!(
            deep_flow_bracket(&format!("x: 1\n{}", deep(MAX_FLOW_DEPTH + 1))),
            Some((2, 4 + MAX_FLOW_DEPTH))
        );
        // closed brackets do not accumulate
        assert_eq!(deep_flow_bracket(&deep(100).repeat(10)), None);
        // quoted strings and comments do not count; `''` is an escaped quote
        let many = "[".repeat(MAX_FLOW_DEPTH + 1);
        assert_eq!(deep_flow_bracket(&format!("a: '{many}'\n")), None);
        assert_eq!(deep_flow_bracket(&format!("a: 'it''s {many}'\n")), None);
        assert_eq!(deep_flow_bracket(&format!("a: \"\\\" {many}\"\n")), None);
        assert_eq!(deep_flow_bracket(&format!("a: 1 # {many}\n")), None);
        // an apostrophe inside a word opens no string
        assert!(deep_flow_bracket(&format!("a: don't {many}\n")).is_some());
        let err = check_flow_depth("p.yaml", &deep(1000))
            .unwrap_err()
            .to_string();
        assert!(err.contains("p.yaml:1:260: brackets"), "{err}");
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
