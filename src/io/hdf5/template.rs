//! Path templates of the HDF5 mapping: text with `{field}` placeholders that name channel
//! fields, matched against the file and dataset paths a contraction code wrote.
//!
//! It exists so that the user describes a layout instead of converting files: the reader
//! walks the files, matches every path against the template and reads the channel key out of
//! the placeholders. Integer fields (configuration, momentum components, `tsep`, source)
//! match an optionally signed run of digits (leading zeros allowed); text fields match any
//! non-empty text without `/`. Matching backtracks, so `p{px}{py}{pz}` with one-digit
//! components and `mom_{px}_{py}_{pz}` both work.

use crate::error::{Error, Result};

/// A placeholder name and whether it holds an integer.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Field {
    /// The placeholder name, e.g. `px`.
    pub name: &'static str,
    /// Integer fields match digits only.
    pub integer: bool,
}

const fn int(name: &'static str) -> Field {
    Field {
        name,
        integer: true,
    }
}

const fn text(name: &'static str) -> Field {
    Field {
        name,
        integer: false,
    }
}

/// Every placeholder a template may use.
pub const FIELDS: &[Field] = &[
    int("config"),
    int("source"),
    int("px"),
    int("py"),
    int("pz"),
    int("pfx"),
    int("pfy"),
    int("pfz"),
    int("qx"),
    int("qy"),
    int("qz"),
    int("tsep"),
    text("smear"),
    text("current"),
    text("projector"),
    text("flavor"),
    text("diagram"),
    text("sink_op"),
    text("source_op"),
];

#[derive(Clone, Debug, PartialEq, Eq)]
enum Piece {
    Literal(String),
    Hole(Field),
}

/// A parsed template.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Template {
    text: String,
    pieces: Vec<Piece>,
}

/// The values a path gave to the placeholders, in template order.
pub type Captures = Vec<(&'static str, String)>;

impl Template {
    /// Parse `text`; `what` names the setting in errors (e.g. `data.hdf5.twopt`).
    pub fn parse(text: &str, what: &str) -> Result<Template> {
        let mut pieces = Vec::new();
        let mut rest = text;
        while !rest.is_empty() {
            if let Some(open) = rest.find('{') {
                if open > 0 {
                    pieces.push(Piece::Literal(rest[..open].to_string()));
                }
                let Some(close) = rest[open..].find('}') else {
                    return Err(Error::config(format!(
                        "{what}: `{text}` has a `{{` without a closing `}}`"
                    )));
                };
                let name = &rest[open + 1..open + close];
                let Some(field) = FIELDS.iter().find(|f| f.name == name) else {
                    let names: Vec<&str> = FIELDS.iter().map(|f| f.name).collect();
                    return Err(Error::config(format!(
                        "{what}: unknown placeholder `{{{name}}}` in `{text}`; expected one of {}",
                        names.join(", ")
                    )));
                };
                if let Some(Piece::Hole(prev)) = pieces.last() {
                    if !(prev.integer && field.integer) {
                        return Err(Error::config(format!(
                            "{what}: `{{{}}}{{{name}}}` in `{text}` cannot be told apart; put a separator between them",
                            prev.name
                        )));
                    }
                }
                pieces.push(Piece::Hole(*field));
                rest = &rest[open + close + 1..];
            } else {
                pieces.push(Piece::Literal(rest.to_string()));
                rest = "";
            }
        }
        Ok(Template {
            text: text.to_string(),
            pieces,
        })
    }

    /// The template as written.
    pub fn text(&self) -> &str {
        &self.text
    }

    /// Whether the template has the placeholder `name`.
    pub fn has(&self, name: &str) -> bool {
        self.pieces
            .iter()
            .any(|p| matches!(p, Piece::Hole(f) if f.name == name))
    }

    /// Match `path` in full; the captured values, or `None`. A placeholder used twice must
    /// capture the same value both times.
    pub fn matches(&self, path: &str) -> Option<Captures> {
        let mut caps = Vec::new();
        if match_from(&self.pieces, path, &mut caps) {
            Some(caps.into_iter().map(|(n, v)| (n, v.to_string())).collect())
        } else {
            None
        }
    }

    /// The path with every placeholder replaced by `value(name)`; placeholders without a
    /// value are left as written.
    pub fn expand(&self, value: impl Fn(&str) -> Option<String>) -> String {
        let mut out = String::new();
        for p in &self.pieces {
            match p {
                Piece::Literal(s) => out.push_str(s),
                Piece::Hole(f) => match value(f.name) {
                    Some(v) => out.push_str(&v),
                    None => {
                        out.push('{');
                        out.push_str(f.name);
                        out.push('}');
                    }
                },
            }
        }
        out
    }
}

/// Match `s` against `pieces`, capturing slices of `s`. A hole tries the longest value
/// first and backtracks to shorter ones; values that cannot lead to a match are skipped
/// without recursing: an integer hole only tries ends inside its leading run of sign and
/// digits, and a hole followed by a literal only ends where that literal starts (the
/// recursion would refuse every other end at once, so the result is the same).
fn match_from<'s>(pieces: &[Piece], s: &'s str, caps: &mut Vec<(&'static str, &'s str)>) -> bool {
    let Some((first, rest)) = pieces.split_first() else {
        return s.is_empty();
    };
    match first {
        Piece::Literal(lit) => s
            .strip_prefix(lit.as_str())
            .is_some_and(|tail| match_from(rest, tail, caps)),
        Piece::Hole(f) => {
            let mut limit = s.find('/').unwrap_or(s.len());
            if f.integer {
                let sign = usize::from(s.starts_with(['-', '+']));
                let digits = s.as_bytes()[sign..limit]
                    .iter()
                    .take_while(|b| b.is_ascii_digit())
                    .count();
                limit = sign + digits;
            }
            let next = match rest.first() {
                Some(Piece::Literal(lit)) => Some(lit.as_str()),
                _ => None,
            };
            // Try the longest capture first; backtrack to shorter ones.
            for end in (1..=limit).rev() {
                if !s.is_char_boundary(end) || next.is_some_and(|l| !s[end..].starts_with(l)) {
                    continue;
                }
                let value = &s[..end];
                if f.integer && !is_integer(value) {
                    continue;
                }
                if let Some((_, v)) = caps.iter().find(|(n, _)| *n == f.name) {
                    if *v != value {
                        continue;
                    }
                }
                caps.push((f.name, value));
                if match_from(rest, &s[end..], caps) {
                    return true;
                }
                caps.pop();
            }
            false
        }
    }
}

fn is_integer(s: &str) -> bool {
    let digits = s.strip_prefix(['-', '+']).unwrap_or(s);
    !digits.is_empty() && digits.len() <= 18 && digits.bytes().all(|b| b.is_ascii_digit())
}

/// Levenshtein distance, for "nearest existing path" hints.
pub fn distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut cur = vec![i + 1; b.len() + 1];
        for (j, cb) in b.iter().enumerate() {
            let sub = prev[j] + usize::from(ca != *cb);
            cur[j + 1] = sub.min(prev[j + 1] + 1).min(cur[j] + 1);
        }
        prev = cur;
    }
    prev[b.len()]
}

/// The entry of `candidates` nearest to `target` (smallest edit distance).
pub fn nearest<'a>(target: &str, candidates: impl IntoIterator<Item = &'a str>) -> Option<&'a str> {
    candidates.into_iter().min_by_key(|c| distance(target, c))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn matches_and_captures() {
        let t = Template::parse("/2pt/{smear}/p{px}_{py}_{pz}", "t").unwrap();
        let c = t.matches("/2pt/SS/p0_-1_2").unwrap();
        assert_eq!(
            c,
            vec![
                ("smear", "SS".to_string()),
                ("px", "0".into()),
                ("py", "-1".into()),
                ("pz", "2".into())
            ]
        );
        assert!(t.matches("/2pt/SS/p0_-1").is_none());
        assert!(
            t.matches("/2pt/a/b/p0_1_2").is_none(),
            "text holes stop at /"
        );
    }

    #[test]
    fn adjacent_integer_holes_backtrack() {
        let t = Template::parse("q{qx}{qy}{qz}", "t").unwrap();
        let c = t.matches("q101").unwrap();
        let v: Vec<&str> = c.iter().map(|(_, v)| v.as_str()).collect();
        assert_eq!(v.len(), 3);
        assert_eq!(v.concat(), "101");
    }

    #[test]
    fn repeated_placeholder_must_agree() {
        let t = Template::parse("cfg{config}/c{config}.h5", "t").unwrap();
        assert!(t.matches("cfg12/c12.h5").is_some());
        assert!(t.matches("cfg12/c13.h5").is_none());
    }

    #[test]
    fn bad_templates_are_refused() {
        assert!(Template::parse("/x/{mom}", "t").is_err());
        assert!(Template::parse("/x/{px", "t").is_err());
        assert!(Template::parse("/x/{current}{projector}", "t").is_err());
    }

    #[test]
    fn expand_fills_known_values() {
        let t = Template::parse("c{config}/{current}", "t").unwrap();
        let s = t.expand(|n| (n == "config").then(|| "7".to_string()));
        assert_eq!(s, "c7/{current}");
    }

    #[test]
    fn nearest_by_edit_distance() {
        assert_eq!(
            nearest("/a/p0_0_1", ["/a/p0_0_2", "/b/zz"]),
            Some("/a/p0_0_2")
        );
    }
}
