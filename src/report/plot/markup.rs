//! Sub- and superscripts in chart and report text: `G_{E}`, `Q^{2}`, `r_{E}^{2}`,
//! `τ − t_{sep}/2`. Labels are written once in this small markup and turned into SVG
//! `<tspan>`s for the plots ([`svg_text`]), `<sub>`/`<sup>` for the HTML page ([`html`])
//! and plain text for widths and file names ([`plain`]).
//!
//! The SVG form shifts the baseline with `dy` (relative to the surrounding text) rather
//! than `baseline-shift`, which not every SVG renderer honours.

/// One run of text and its position.
#[derive(Clone, Copy, PartialEq, Debug)]
enum Script {
    Normal,
    Sub,
    Sup,
}

/// The runs of `s`: `_{…}` is a subscript, `^{…}` a superscript; anything else, including a
/// lone `_` or `^`, is normal text. An unclosed brace runs to the end.
fn runs(s: &str) -> Vec<(Script, &str)> {
    let mut out = Vec::new();
    let mut rest = s;
    while !rest.is_empty() {
        let next = [("_{", Script::Sub), ("^{", Script::Sup)]
            .into_iter()
            .filter_map(|(m, k)| rest.find(m).map(|i| (i, k)))
            .min_by_key(|(i, _)| *i);
        let Some((i, kind)) = next else {
            out.push((Script::Normal, rest));
            break;
        };
        if i > 0 {
            out.push((Script::Normal, &rest[..i]));
        }
        let inner = &rest[i + 2..];
        let end = inner.find('}').unwrap_or(inner.len());
        out.push((kind, &inner[..end]));
        rest = inner.get(end + 1..).unwrap_or("");
    }
    out
}

/// The text without braces: `G_{E}(Q^{2})` → `G_E(Q^2)`, for widths and plain-text output.
pub fn plain(s: &str) -> String {
    runs(s)
        .into_iter()
        .map(|(k, t)| match k {
            Script::Normal => t.to_string(),
            Script::Sub => format!("_{t}"),
            Script::Sup => format!("^{t}"),
        })
        .collect()
}

/// HTML for text that is already escaped: scripts become `<sub>` and `<sup>`.
pub fn html(escaped: &str) -> String {
    runs(escaped)
        .into_iter()
        .map(|(k, t)| match k {
            Script::Normal => t.to_string(),
            Script::Sub => format!("<sub>{t}</sub>"),
            Script::Sup => format!("<sup>{t}</sup>"),
        })
        .collect()
}

/// Scripts at 70 % of the size, subscripts 0.3 em below and superscripts 0.45 em above the
/// baseline (in units of the surrounding font; common typographic practice).
const SCRIPT_SIZE: f64 = 0.7;
const SUB_SHIFT: f64 = 0.3;
const SUP_SHIFT: f64 = -0.45;

/// The SVG content of one `<text>` element (already escaped) with its markup as `<tspan>`s.
fn svg_runs(escaped: &str) -> String {
    let parts = runs(escaped);
    if parts.iter().all(|(k, _)| *k == Script::Normal) {
        return escaped.to_string();
    }
    let mut out = String::new();
    let mut level = 0.0;
    for (kind, text) in parts {
        let (target, size) = match kind {
            Script::Normal => (0.0, 1.0),
            Script::Sub => (SUB_SHIFT, SCRIPT_SIZE),
            Script::Sup => (SUP_SHIFT, SCRIPT_SIZE),
        };
        let shift = target - level;
        level = target;
        let mut attrs = String::new();
        if shift != 0.0 {
            // `dy` in em of the tspan's own font
            attrs.push_str(&format!(" dy=\"{:.3}em\"", shift / size));
        }
        if size != 1.0 {
            attrs.push_str(" font-size=\"70%\"");
        }
        if attrs.is_empty() {
            out.push_str(text);
        } else {
            out.push_str(&format!("<tspan{attrs}>{text}</tspan>"));
        }
    }
    out
}

/// An SVG document with the markup of every `<text>` element turned into `<tspan>`s.
pub fn svg_text(svg: &str) -> String {
    let mut out = String::with_capacity(svg.len() + 256);
    let mut rest = svg;
    while let Some(open) = rest.find("<text") {
        let Some(gt) = rest[open..].find('>') else {
            break;
        };
        let body_start = open + gt + 1;
        let Some(close) = rest[body_start..].find("</text>") else {
            break;
        };
        out.push_str(&rest[..body_start]);
        out.push_str(&svg_runs(&rest[body_start..body_start + close]));
        rest = &rest[body_start + close..];
    }
    out.push_str(rest);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn markup_forms() {
        assert_eq!(plain("G_{E}(Q^{2})"), "G_E(Q^2)");
        assert_eq!(plain("two_state plateau_tsep8"), "two_state plateau_tsep8");
        assert_eq!(
            html("r_{E}^{2} &amp; x"),
            "r<sub>E</sub><sup>2</sup> &amp; x"
        );
        assert_eq!(plain("a_{open"), "a_open");
        assert_eq!(plain(""), "");
    }

    #[test]
    fn svg_scripts_return_to_the_baseline() {
        let svg =
            "<svg><text x=\"1\" dy=\"0.5ex\">Q^{2} (GeV^{2})\n</text><text>plain_name</text></svg>";
        let out = svg_text(svg);
        assert_eq!(
            out,
            "<svg><text x=\"1\" dy=\"0.5ex\">Q<tspan dy=\"-0.643em\" font-size=\"70%\">2</tspan>\
             <tspan dy=\"0.450em\"> (GeV</tspan><tspan dy=\"-0.643em\" font-size=\"70%\">2</tspan>\
             <tspan dy=\"0.450em\">)\n</tspan></text><text>plain_name</text></svg>"
        );
        // a subscript followed by a superscript moves straight from one to the other
        let out = svg_runs("r_{E}^{2}");
        assert_eq!(
            out,
            "r<tspan dy=\"0.429em\" font-size=\"70%\">E</tspan>\
             <tspan dy=\"-1.071em\" font-size=\"70%\">2</tspan>"
        );
    }
}
