"""Checks of a report page as Chromium rendered it (the DOM from --dump-dom).

Fails (exit 1, one line per problem) when a section has no content besides its heading, a
table has a header but no rows, a plot has no drawn elements, a figure has no caption, an image points at a file that is not
there, or the navigation links to a section that does not exist.

    python3 dom_check.py DOM.html RUN_DIR
"""
import os
import sys
from html.parser import HTMLParser

DRAWN = {"path", "polyline", "polygon", "line", "circle", "rect", "text"}
CONTENT = {"table", "figure", "p", "ul", "pre", "div"}


class Page(HTMLParser):
    def __init__(self):
        super().__init__()
        self.sections = []  # [id, heading, content tags, text chars]
        self.svgs = []  # drawn element count per svg
        self.figures = []  # caption text per figure
        self.images = []
        self.links = []
        self.tables = []  # [caption, rows]
        self.stack = []
        self.in_caption = False

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.stack.append(tag)
        if tag == "section":
            self.sections.append([a.get("id", ""), "", 0, 0])
        elif self.sections and tag in CONTENT and "svg" not in self.stack[:-1]:
            self.sections[-1][2] += 1
        if tag == "svg":
            self.svgs.append(0)
        elif self.svgs and tag in DRAWN and "svg" in self.stack[:-1]:
            self.svgs[-1] += 1
        if tag == "figure":
            self.figures.append("")
        if tag == "table":
            self.tables.append(["", 0])
        if tag == "tr" and self.tables:
            self.tables[-1][1] += 1
        if tag == "figcaption":
            self.in_caption = True
        if tag in ("img", "image"):
            self.images.append(a.get("src") or a.get("href") or a.get("xlink:href") or "")
        if tag == "a" and a.get("href", "").startswith("#"):
            self.links.append(a["href"][1:])

    def handle_startendtag(self, tag, attrs):
        self.handle_starttag(tag, attrs)
        self.handle_endtag(tag)

    def handle_endtag(self, tag):
        if tag == "figcaption":
            self.in_caption = False
        while self.stack:
            if self.stack.pop() == tag:
                break

    def handle_data(self, data):
        if self.stack and self.stack[-1] == "caption" and self.tables:
            self.tables[-1][0] += data
        if self.in_caption and self.figures:
            self.figures[-1] += data
        if self.sections and self.stack and self.stack[-1] == "h2":
            self.sections[-1][1] += data
        elif self.sections:
            self.sections[-1][3] += len(data.strip())


def main():
    dom_path, run_dir = sys.argv[1], sys.argv[2]
    with open(dom_path, encoding="utf-8") as f:
        page = Page()
        page.feed(f.read())
    problems = []
    if not page.sections:
        problems.append("no sections")
    for sid, heading, blocks, chars in page.sections:
        if blocks == 0 or chars == 0:
            problems.append(f"section {heading.strip() or sid!r} is empty")
    for i, n in enumerate(page.svgs):
        if n < 5:
            problems.append(f"plot {i + 1} draws only {n} elements")
    for caption, rows in page.tables:
        if rows < 2:
            problems.append(f"table {caption.strip()!r} has no rows")
    for i, c in enumerate(page.figures):
        if not c.strip():
            problems.append(f"figure {i + 1} has no caption")
    for src in page.images:
        if src.startswith("data:"):
            continue
        if not src or src.startswith(("http:", "https:", "//")):
            problems.append(f"image {src!r} is not part of the run")
        elif not os.path.exists(os.path.join(run_dir, src)):
            problems.append(f"image {src!r} is missing")
    ids = {s[0] for s in page.sections}
    for target in page.links:
        if target not in ids:
            problems.append(f"link to #{target} has no section")
    for p in problems:
        print(f"{dom_path}: {p}", file=sys.stderr)
    print(f"{os.path.basename(run_dir)}: {len(page.sections)} sections, "
          f"{len(page.svgs)} plots, {len(problems)} problem(s)")
    return 1 if problems else 0


if __name__ == "__main__":
    sys.exit(main())
