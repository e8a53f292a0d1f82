//! `report.html`: one self-contained page per run (inline CSS and SVG, nothing fetched from
//! the network), readable offline, archivable beside the tables and safe to mail.
//!
//! The page is built from a small document model — a [`Report`] of [`Section`]s of
//! [`Block`]s — and every piece of text is HTML-escaped, so labels from the user's data or
//! pipeline file cannot break the markup.

use super::plot::markup;
use super::table::{Cell, Table};
use crate::error::{Error, Result};
use std::fmt::Write as _;
use std::path::Path;

/// A whole report page.
#[derive(Clone, Debug, Default)]
pub struct Report {
    /// Page title and top heading.
    pub title: String,
    /// The sections, in page order; a table of contents links to them.
    pub sections: Vec<Section>,
}

/// One section with a heading.
#[derive(Clone, Debug, Default)]
pub struct Section {
    /// The section heading.
    pub heading: String,
    /// The content, in order.
    pub blocks: Vec<Block>,
}

/// One piece of content.
#[derive(Clone, Debug)]
pub enum Block {
    /// A paragraph of plain text.
    Paragraph(String),
    /// A table (numbers shown with 6 significant digits; the CSV has full precision).
    Table(Table),
    /// A figure: an SVG document as produced by [`super::plot`], with a caption.
    Svg {
        /// The SVG text (must start with `<svg`; an XML declaration in front is dropped).
        svg: String,
        /// Caption under the figure.
        caption: String,
    },
    /// Preformatted text (settings as YAML, logs).
    Pre(String),
    /// A highlighted list of warnings; an empty list says "No warnings."
    Warnings(Vec<String>),
}

impl Section {
    /// A section with no content yet.
    pub fn new(heading: impl Into<String>) -> Self {
        Section {
            heading: heading.into(),
            blocks: Vec::new(),
        }
    }

    /// Append a block (builder style).
    pub fn with(mut self, block: Block) -> Self {
        self.blocks.push(block);
        self
    }
}

const STYLE: &str = "\
body{font-family:system-ui,-apple-system,'Segoe UI',Helvetica,Arial,sans-serif;color:#222;\
margin:0 auto;max-width:1100px;padding:1em 2em 3em;line-height:1.45}\
h1{font-size:1.6em;border-bottom:2px solid #444;padding-bottom:.2em}\
h2{font-size:1.25em;margin-top:2em;border-bottom:1px solid #bbb;padding-bottom:.15em}\
nav ol{font-size:.95em}\
table{border-collapse:collapse;margin:.8em 0;font-size:.9em}\
caption{text-align:left;font-weight:600;padding-bottom:.3em}\
th,td{border-bottom:1px solid #ddd;padding:.25em .7em;vertical-align:top}\
td{white-space:nowrap}\
div.t{overflow-x:auto}\
th{background:#f2f2f2;text-align:left}\
code{font-family:ui-monospace,Menlo,Consolas,monospace;font-size:.92em;background:#f2f2f2;padding:0 .2em}\
td.n{text-align:right;font-variant-numeric:tabular-nums;font-family:ui-monospace,Menlo,Consolas,monospace}\
figure{margin:1.2em 0}\
figure svg{max-width:100%;height:auto;border:1px solid #eee}\
figcaption{font-size:.9em;color:#444;margin-top:.3em}\
pre{background:#f7f7f7;border:1px solid #ddd;padding:.8em;overflow-x:auto;font-size:.85em}\
.warnings{background:#fff6e0;border-left:4px solid #d08a00;padding:.5em 1em}\
.ok{color:#2a6e2a}\
footer{margin-top:3em;font-size:.8em;color:#777}\
th{cursor:pointer}th[data-dir=asc]::after{content:' ▲'}th[data-dir=desc]::after{content:' ▼'}";

/// Sorting of every table by a click on a column heading (numbers by their value, so
/// `0.968(18)(8)` sorts as 0.968; text in natural order; a second click reverses). Inline
/// and without any URL, like the rest of the page; the page reads the same without it.
const SCRIPT: &str = "\
document.querySelectorAll('th').forEach(function(th){\
th.title='click to sort';\
th.addEventListener('click',function(){\
var row=th.parentNode,body=row.closest('table').tBodies[0];\
var i=Array.prototype.indexOf.call(row.children,th),asc=th.dataset.dir!=='asc';\
row.querySelectorAll('th').forEach(function(h){delete h.dataset.dir;});\
th.dataset.dir=asc?'asc':'desc';\
var key=function(r){var t=r.cells[i]?r.cells[i].textContent.trim():'';\
var n=parseFloat(t.replace('\\u2212','-'));return isNaN(n)?t:n;};\
var rows=Array.prototype.slice.call(body.rows);\
rows.sort(function(a,b){var x=key(a),y=key(b);\
var c=(typeof x==='number'&&typeof y==='number')?x-y:String(x).localeCompare(String(y),undefined,{numeric:true});\
return asc?c:-c;});\
rows.forEach(function(r){body.appendChild(r);});});});";

impl Report {
    /// A report with a title and no sections yet.
    pub fn new(title: impl Into<String>) -> Self {
        Report {
            title: title.into(),
            sections: Vec::new(),
        }
    }

    /// The complete page as one string.
    pub fn render(&self) -> String {
        let mut h = String::with_capacity(64 * 1024);
        let title = escape(&self.title);
        let _ = write!(
            h,
            "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
             <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
             <title>{title}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n<h1>{title}</h1>\n"
        );
        if self.sections.len() > 1 {
            h.push_str("<nav><ol>\n");
            for (i, s) in self.sections.iter().enumerate() {
                let _ = writeln!(
                    h,
                    "<li><a href=\"#s{}\">{}</a></li>",
                    i + 1,
                    escape(&s.heading)
                );
            }
            h.push_str("</ol></nav>\n");
        }
        for (i, s) in self.sections.iter().enumerate() {
            let _ = writeln!(
                h,
                "<section id=\"s{}\">\n<h2>{}</h2>",
                i + 1,
                escape(&s.heading)
            );
            for b in &s.blocks {
                render_block(&mut h, b);
            }
            h.push_str("</section>\n");
        }
        let _ = write!(
            h,
            "<footer>Written by {} {}.</footer>\n<script>{SCRIPT}</script>\n</body>\n</html>\n",
            env!("CARGO_PKG_NAME"),
            env!("CARGO_PKG_VERSION")
        );
        h
    }

    /// Write the page to `path`.
    pub fn write(&self, path: &Path) -> Result<()> {
        std::fs::write(path, self.render()).map_err(|e| Error::io(path, e))
    }
}

fn render_block(h: &mut String, b: &Block) {
    match b {
        Block::Paragraph(p) => {
            let _ = writeln!(h, "<p>{}</p>", text(p));
        }
        Block::Table(t) => render_table(h, t),
        Block::Svg { svg, caption } => {
            h.push_str("<figure>\n");
            h.push_str(&inline_svg(svg));
            let _ = writeln!(
                h,
                "\n<figcaption>{}</figcaption>\n</figure>",
                markup::html(&escape(caption))
            );
        }
        Block::Pre(p) => {
            let _ = writeln!(h, "<pre>{}</pre>", escape(p));
        }
        Block::Warnings(w) if w.is_empty() => {
            h.push_str("<p class=\"ok\">No warnings.</p>\n");
        }
        Block::Warnings(w) => {
            h.push_str("<div class=\"warnings\"><ul>\n");
            for line in w {
                let _ = writeln!(h, "<li>{}</li>", text(line));
            }
            h.push_str("</ul></div>\n");
        }
    }
}

fn render_table(h: &mut String, t: &Table) {
    let _ = write!(
        h,
        "<div class=\"t\"><table>\n<caption>{}</caption>\n<thead><tr>",
        escape(&t.name)
    );
    for c in &t.columns {
        let _ = write!(h, "<th>{}</th>", text(c));
    }
    h.push_str("</tr></thead>\n<tbody>\n");
    for row in &t.rows {
        h.push_str("<tr>");
        for cell in row {
            let class = if matches!(cell, Cell::Text(_)) {
                ""
            } else {
                " class=\"n\""
            };
            let _ = write!(h, "<td{class}>{}</td>", text(&cell.to_display()));
        }
        h.push_str("</tr>\n");
    }
    h.push_str("</tbody>\n</table></div>\n");
}

/// Prepare an SVG document for inlining: drop an XML declaration or doctype in front of the
/// `<svg` element (not allowed inline) and the SVG namespace attribute, which HTML5 implies,
/// so the page holds no URL at all.
fn inline_svg(svg: &str) -> String {
    let body = svg.find("<svg").map_or(svg, |i| &svg[i..]);
    body.replacen(" xmlns=\"http://www.w3.org/2000/svg\"", "", 1)
}

/// Running text for the page: escaped, `code` between backticks as `<code>`, and the
/// sub/superscript markup (`G_{E}`, `Q^{2}`) as `<sub>`/`<sup>`. An unpaired backtick
/// stays as it is.
fn text(s: &str) -> String {
    let escaped = escape(s);
    let parts: Vec<&str> = escaped.split('`').collect();
    let mut out = String::with_capacity(escaped.len() + 16);
    let paired = parts.len() % 2 == 1;
    for (i, part) in parts.iter().enumerate() {
        if i % 2 == 0 {
            out.push_str(&markup::html(part));
        } else if !paired && i + 1 == parts.len() {
            out.push('`');
            out.push_str(&markup::html(part));
        } else {
            out.push_str("<code>");
            out.push_str(part);
            out.push_str("</code>");
        }
    }
    out
}

/// Escape `&`, `<`, `>`, `"` and `'` for HTML text and attribute values.
pub fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_all_text() {
        assert_eq!(
            escape("<b>a & \"b\" 'c'</b>"),
            "&lt;b&gt;a &amp; &quot;b&quot; &#39;c&#39;&lt;/b&gt;"
        );
        let mut t = Table::new("t<1>", &["a&b"]);
        t.push_row(vec!["<script>".into()]).unwrap();
        let r = Report {
            title: "Run <x>".into(),
            sections: vec![Section::new("S & T")
                .with(Block::Paragraph("1 < 2".into()))
                .with(Block::Table(t))
                .with(Block::Pre("key: \"<v>\"".into()))
                .with(Block::Warnings(vec!["<w>".into()]))],
        };
        let html = r.render();
        // the user's text is escaped; the one script is the page's own table sorting
        assert!(html.contains("&lt;script&gt;"));
        assert_eq!(html.matches("<script").count(), 1);
        assert!(!html.contains("<x>") && !html.contains("<w>") && !html.contains("<v>"));
        assert!(html.contains("<title>Run &lt;x&gt;</title>"));
        assert!(html.contains("<h2>S &amp; T</h2>"));
        assert!(html.contains("<caption>t&lt;1&gt;</caption>"));
        assert!(html.contains("<th>a&amp;b</th>"));
        assert!(html.contains("key: &quot;&lt;v&gt;&quot;"));
    }

    #[test]
    fn backticks_and_scripts_become_markup() {
        assert_eq!(
            text("set `final_value.pin` for G_{E} < 1"),
            "set <code>final_value.pin</code> for G<sub>E</sub> &lt; 1"
        );
        assert_eq!(text("a `b"), "a `b");
        assert_eq!(text("plateau_tsep8"), "plateau_tsep8");
    }

    #[test]
    fn svg_is_inlined_without_prolog() {
        let r = Report {
            title: "x".into(),
            sections: vec![Section::new("plots").with(Block::Svg {
                svg: "<?xml version=\"1.0\"?>\n<svg width=\"10\" height=\"10\" \
                      xmlns=\"http://www.w3.org/2000/svg\"></svg>"
                    .into(),
                caption: "E_eff".into(),
            })],
        };
        let html = r.render();
        assert!(!html.contains("<?xml"));
        assert!(html.contains("<figure>\n<svg width=\"10\" height=\"10\"></svg>"));
        assert!(!html.contains("http"));
        assert!(html.contains("<figcaption>E_eff</figcaption>"));
    }

    #[test]
    fn warnings_block_and_navigation() {
        let r = Report {
            title: "x".into(),
            sections: vec![
                Section::new("one").with(Block::Warnings(vec![])),
                Section::new("two").with(Block::Warnings(vec!["a".into(), "b".into()])),
            ],
        };
        let html = r.render();
        assert!(html.contains("No warnings."));
        assert!(html.contains("<li>a</li>\n<li>b</li>"));
        assert!(html.contains("<a href=\"#s2\">two</a>"));
        assert!(html.contains("<section id=\"s2\">"));
    }
}
