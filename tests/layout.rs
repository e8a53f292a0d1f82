//! The layout rules of the contributor guide (DEVELOPERS.md § Architecture), checked on the
//! sources: no file of `src/` imports a file that imports it back, no file is longer than
//! 500 lines without its tests, no function longer than 120 lines.
//!
//! A file's imports are its `use` items and its inline `crate::` / `super::` / `self::` paths
//! (visibility paths such as `pub(in crate::pipeline)` included), each resolved to the
//! deepest module file it names; a `mod.rs` re-exporting a child (`pub use child::Item`) does
//! not import it. Comments and the `#[cfg(test)]` module at the end of a file are left out.

use crate::common::repo_root;
use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

type Module = Vec<String>;

/// Every `.rs` file under `dir`, by module path (`src/report/plot/mod.rs` → `report::plot`).
fn sources(dir: &Path, root: &Path, out: &mut BTreeMap<Module, PathBuf>) {
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.is_dir() {
            sources(&path, root, out);
        } else if path.extension().is_some_and(|x| x == "rs") {
            let rel = path.strip_prefix(root).unwrap().with_extension("");
            let mut module: Module = rel
                .components()
                .map(|c| c.as_os_str().to_string_lossy().into_owned())
                .collect();
            if matches!(
                module.last().map(String::as_str),
                Some("mod" | "lib" | "main")
            ) {
                module.pop();
            }
            out.insert(module, path);
        }
    }
}

/// The lines of a file before its test module.
fn without_tests(text: &str) -> Vec<&str> {
    let lines: Vec<&str> = text.lines().collect();
    let end = (0..lines.len())
        .find(|&i| {
            lines[i].trim() == "#[cfg(test)]"
                && lines
                    .get(i + 1)
                    .is_some_and(|l| l.trim_start().starts_with("mod "))
        })
        .unwrap_or(lines.len());
    lines[..end].to_vec()
}

/// The code of a file: test module and `//` comments removed.
fn code(text: &str) -> String {
    without_tests(text)
        .iter()
        .map(|l| l.split_once("//").map_or(*l, |(c, _)| c))
        .collect::<Vec<_>>()
        .join("\n")
}

fn is_ident(c: char) -> bool {
    c.is_alphanumeric() || c == '_'
}

/// A use tree without its aliases (`a as b` → `a`) and without whitespace.
fn without_aliases(tree: &str) -> String {
    let words: Vec<&str> = tree.split_whitespace().collect();
    let mut out = String::new();
    let mut i = 0;
    while i < words.len() {
        if words[i] == "as" && i + 1 < words.len() {
            // keep what follows the alias's name (`,` or `}`)
            out.extend(words[i + 1].chars().skip_while(|&c| is_ident(c)));
            i += 2;
        } else {
            out.push_str(words[i]);
            i += 1;
        }
    }
    out
}

/// The paths of a use tree (`a::{b, c::{d, e}}` → `a::b`, `a::c::d`, `a::c::e`).
fn expand(tree: &str) -> Vec<Vec<String>> {
    let tree = without_aliases(tree);
    let split = |s: &str| -> Vec<String> {
        s.split("::")
            .filter(|x| !x.is_empty())
            .map(String::from)
            .collect()
    };
    let Some(open) = tree.find('{') else {
        return vec![split(&tree)];
    };
    let prefix = split(&tree[..open]);
    let close = tree.rfind('}').filter(|&c| c > open).unwrap_or(tree.len());
    let inner = &tree[open + 1..close];
    let (mut depth, mut start, mut parts) = (0, 0, Vec::new());
    for (i, c) in inner.char_indices() {
        match c {
            '{' => depth += 1,
            '}' => depth -= 1,
            ',' if depth == 0 => {
                parts.push(&inner[start..i]);
                start = i + 1;
            }
            _ => {}
        }
    }
    parts.push(&inner[start..]);
    parts
        .into_iter()
        .filter(|p| !p.is_empty())
        .flat_map(|p| {
            if p == "self" {
                vec![prefix.clone()]
            } else {
                expand(p)
                    .into_iter()
                    .map(|tail| prefix.iter().cloned().chain(tail).collect())
                    .collect()
            }
        })
        .collect()
}

/// The module file a path used in `module` names, if it is a file of the crate.
fn resolve(files: &BTreeMap<Module, PathBuf>, module: &Module, path: &[String]) -> Option<Module> {
    let (mut base, rest): (Module, &[String]) = match path.first().map(String::as_str) {
        Some("crate") => (Vec::new(), &path[1..]),
        Some("self") => (module.clone(), &path[1..]),
        Some("super") => {
            let supers = path.iter().take_while(|s| *s == "super").count();
            let keep = module.len().checked_sub(supers)?;
            (module[..keep].to_vec(), &path[supers..])
        }
        Some(first) => {
            // a child module named without `self::`
            let mut child = module.clone();
            child.push(first.to_string());
            if !files.contains_key(&child) {
                return None;
            }
            (module.clone(), path)
        }
        None => return None,
    };
    for segment in rest {
        base.push(segment.clone());
        if !files.contains_key(&base) {
            base.pop();
            break;
        }
    }
    Some(base)
}

/// The module files `module` imports (itself excluded).
fn imports(files: &BTreeMap<Module, PathBuf>, module: &Module, code: &str) -> BTreeSet<Module> {
    let mut out = BTreeSet::new();
    let is_mod_file = files[module]
        .file_name()
        .is_some_and(|n| n == "mod.rs" || n == "lib.rs");
    let add = |out: &mut BTreeSet<Module>, path: &[String], reexport: bool| {
        if let Some(target) = resolve(files, module, path) {
            let child = target.len() > module.len() && target.starts_with(module);
            if target != *module && !(is_mod_file && reexport && child) {
                out.insert(target);
            }
        }
    };
    // use items
    let mut rest = code;
    while let Some(at) = rest.find("use ") {
        let before = &rest[..at];
        // a `use` item starts its line, after nothing or a visibility
        let line_start = before.rfind('\n').map_or(0, |i| i + 1);
        let lead = before[line_start..].trim();
        let boundary = lead.is_empty() || (lead.starts_with("pub") && !lead.contains('"'));
        let after = &rest[at + 4..];
        let Some(end) = after.find(';') else { break };
        if boundary {
            for path in expand(&after[..end]) {
                add(&mut out, &path, !lead.is_empty());
            }
        }
        rest = if boundary { &after[end..] } else { after };
    }
    // inline paths
    for start in ["crate::", "super::", "self::"] {
        let mut from = 0;
        while let Some(i) = code[from..].find(start) {
            let at = from + i;
            from = at + start.len();
            if code[..at]
                .chars()
                .last()
                .is_some_and(|c| is_ident(c) || c == ':')
            {
                continue;
            }
            let len = code[at..]
                .find(|c: char| !(is_ident(c) || c == ':'))
                .unwrap_or(code.len() - at);
            let path: Vec<String> = code[at..at + len]
                .split("::")
                .filter(|s| !s.is_empty())
                .map(String::from)
                .collect();
            add(&mut out, &path, false);
        }
    }
    out
}

/// A cycle through `start` in the import graph, if any (depth-first search).
fn cycle(graph: &BTreeMap<Module, BTreeSet<Module>>, start: &Module) -> Option<Vec<Module>> {
    let mut stack = vec![(start.clone(), vec![start.clone()])];
    let mut seen = BTreeSet::new();
    while let Some((node, path)) = stack.pop() {
        for next in graph.get(&node).into_iter().flatten() {
            if next == start {
                return Some(path.clone());
            }
            if seen.insert(next.clone()) {
                let mut p = path.clone();
                p.push(next.clone());
                stack.push((next.clone(), p));
            }
        }
    }
    None
}

#[test]
fn no_file_imports_a_file_that_imports_it_back() {
    let root = repo_root().join("src");
    let mut files = BTreeMap::new();
    sources(&root, &root, &mut files);
    let graph: BTreeMap<Module, BTreeSet<Module>> = files
        .iter()
        .map(|(m, p)| {
            let text = std::fs::read_to_string(p).unwrap();
            (m.clone(), imports(&files, m, &code(&text)))
        })
        .collect();
    let edges: usize = graph.values().map(BTreeSet::len).sum();
    assert!(
        edges > 300,
        "only {edges} imports found: the scan is broken"
    );
    let cycles: Vec<String> = files
        .keys()
        .filter_map(|m| cycle(&graph, m))
        .map(|c| {
            c.iter()
                .map(|m| files[m].strip_prefix(&root).unwrap().display().to_string())
                .collect::<Vec<_>>()
                .join(" → ")
        })
        .collect();
    assert!(cycles.is_empty(), "file cycles:\n{}", cycles.join("\n"));
}

/// A known cycle is found (guards the scan itself): `a.rs` uses its parent's item while the
/// parent uses `a`'s.
#[test]
fn the_cycle_scan_finds_a_parent_child_cycle() {
    let files: BTreeMap<Module, PathBuf> = [
        (vec!["p".to_string()], PathBuf::from("src/p/mod.rs")),
        (vec!["p".into(), "a".into()], PathBuf::from("src/p/a.rs")),
    ]
    .into_iter()
    .collect();
    let parent = imports(
        &files,
        &vec!["p".into()],
        "mod a;\nuse a::{f, g};\npub use a::h;",
    );
    let child = imports(
        &files,
        &vec!["p".into(), "a".into()],
        "use super::{Chart, Series};",
    );
    assert_eq!(parent, [vec!["p".to_string(), "a".to_string()]].into());
    assert_eq!(child, [vec!["p".to_string()]].into());
    let only_reexport = imports(&files, &vec!["p".into()], "mod a;\npub use a::{f, g};");
    assert!(only_reexport.is_empty(), "{only_reexport:?}");
    let graph = [
        (vec!["p".to_string()], parent),
        (vec!["p".into(), "a".into()], child),
    ]
    .into();
    assert!(cycle(&graph, &vec!["p".to_string()]).is_some());
}

#[test]
fn no_file_above_500_lines_and_no_function_above_120() {
    let root = repo_root().join("src");
    let mut files = BTreeMap::new();
    sources(&root, &root, &mut files);
    let mut long = Vec::new();
    for path in files.values() {
        let text = std::fs::read_to_string(path).unwrap();
        let lines = without_tests(&text);
        let name = path.strip_prefix(&root).unwrap().display().to_string();
        if lines.len() > 500 {
            long.push(format!("{name}: {} lines", lines.len()));
        }
        for (i, line) in lines.iter().enumerate() {
            let trimmed = line.trim_start();
            let signature = trimmed
                .trim_start_matches("pub ")
                .trim_start_matches("pub(crate) ")
                .trim_start_matches("pub(super) ")
                .trim_start_matches("const ")
                .trim_start_matches("unsafe ");
            let is_fn = signature.starts_with("fn ")
                || (trimmed.starts_with("pub(in ") && trimmed.contains(") fn "));
            if !is_fn || trimmed.ends_with(';') || trimmed.ends_with('}') {
                continue;
            }
            // the end of the signature: a body opens, or a declaration ends with `;`
            let Some(sig_end) = (i..lines.len())
                .find(|&j| lines[j].contains('{') || lines[j].trim_end().ends_with(';'))
            else {
                continue;
            };
            if !lines[sig_end].contains('{') {
                continue;
            }
            let indent = &line[..line.len() - trimmed.len()];
            let close = format!("{indent}}}");
            let Some(end) = (sig_end..lines.len()).find(|&j| lines[j].starts_with(&close)) else {
                continue;
            };
            if end - i + 1 > 120 {
                long.push(format!(
                    "{name}:{}: a function of {} lines",
                    i + 1,
                    end - i + 1
                ));
            }
        }
    }
    assert!(long.is_empty(), "too long:\n{}", long.join("\n"));
}
