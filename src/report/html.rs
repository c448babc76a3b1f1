//! The report's Markdown as one self-contained HTML page, with every figure inlined
//! as SVG, a table of contents, and embedded screen and print styles (no scripts, fonts or other
//! files). Handles the Markdown the report writer produces (ATX headings, paragraphs, a
//! blockquote, bullet lists, pipe tables, figures on their own line followed by an italic caption,
//! code spans, bold, italic, links and backslash escapes) and renders anything else as escaped
//! text. Pure and deterministic: no I/O, no clock; the caller supplies each figure's SVG text.

use std::collections::BTreeSet;

/// The id of the table of contents, kept out of the heading ids.
const CONTENTS_ID: &str = "contents";

/// How deep blockquotes, emphasis and links may nest before the rest is taken as plain text
/// (bounds the recursion on hostile input).
const MAX_NESTING: usize = 24;

/// Entities the report text may already hold; they pass through unchanged.
const KEPT_ENTITIES: [&str; 5] = ["&lt;", "&gt;", "&amp;", "&quot;", "&#39;"];

/// Renders the report's Markdown as one self-contained HTML document.
///
/// `figure(path)` returns the SVG text of a figure referenced as `![alt](path)` (paths like
/// `charts/residual-histogram.svg`), or None when the file is missing.
pub fn render_html(markdown: &str, figure: &dyn Fn(&str) -> Option<String>) -> String {
    let lines: Vec<&str> = markdown.lines().collect();
    let mut outline = Outline::new();
    let blocks = parse_blocks(&lines, &mut outline, 0);
    let nav_at = nav_position(&blocks);
    let mut page = Page { figure, figures: 0, out: String::with_capacity(markdown.len() * 2) };
    for (k, block) in blocks.iter().enumerate() {
        if k == nav_at {
            page.out.push_str(&contents_nav(&outline.entries));
        }
        page.block(block);
    }
    if nav_at >= blocks.len() {
        page.out.push_str(&contents_nav(&outline.entries));
    }
    let title = outline.title.unwrap_or_else(|| "Report".to_string());
    document(&title, &page.out)
}

// ---------------------------------------------------------------------------------------------
// Blocks

/// One block of the document, its inline text still Markdown (headings already rendered).
enum Block {
    Heading {
        level: usize,
        html: String,
        id: Option<String>,
    },
    Paragraph(String),
    Quote(Vec<Block>),
    /// `start` is None for a bullet list, the first number for an ordered one.
    List {
        start: Option<u64>,
        items: Vec<String>,
    },
    Table(Table),
    Figure {
        alt: String,
        path: String,
        caption: Option<String>,
    },
    Code(Vec<String>),
    Rule,
}

/// A pipe table: cells as Markdown, split on unescaped `|`.
struct Table {
    aligns: Vec<Align>,
    head: Vec<String>,
    rows: Vec<Vec<String>>,
}

#[derive(Clone, Copy, PartialEq)]
enum Align {
    Left,
    Right,
    Center,
}

/// A list marker: `-`, `*` or `+` for bullets, `.` or `)` after the number for ordered items.
#[derive(Clone, Copy, PartialEq)]
enum ListKind {
    Bullet(char),
    Ordered(char),
}

/// Heading ids handed out so far, the h2/h3 entries of the table of contents, and the title.
struct Outline {
    used: BTreeSet<String>,
    entries: Vec<Entry>,
    title: Option<String>,
}

/// A table-of-contents entry: heading level, id and the heading's HTML (links left out).
struct Entry {
    level: usize,
    id: String,
    html: String,
}

impl Outline {
    fn new() -> Self {
        Outline { used: BTreeSet::from([CONTENTS_ID.to_string()]), entries: Vec::new(), title: None }
    }

    /// The heading block for `text`, with a unique id and a contents entry for h2 and h3.
    fn heading(&mut self, level: usize, text: &str) -> Block {
        let plain = render_inline_str(text, Mode::TEXT);
        if level == 1 && self.title.is_none() && !plain.trim().is_empty() {
            self.title = Some(plain.clone());
        }
        let id = if level == 2 || level == 3 {
            let id = self.unique(&slug(&plain));
            self.entries.push(Entry { level, id: id.clone(), html: render_inline_str(text, Mode::NO_LINKS) });
            Some(id)
        } else {
            None
        };
        Block::Heading { level, html: inline_html(text), id }
    }

    /// `base`, or `base-2`, `base-3`, ... when taken.
    fn unique(&mut self, base: &str) -> String {
        let mut id = base.to_string();
        let mut n = 2;
        while self.used.contains(&id) {
            id = format!("{base}-{n}");
            n += 1;
        }
        self.used.insert(id.clone());
        id
    }
}

/// The blocks of `lines`, figure captions attached to their figures.
fn parse_blocks(lines: &[&str], outline: &mut Outline, depth: usize) -> Vec<Block> {
    let mut blocks = Vec::new();
    let mut i = 0;
    while i < lines.len() {
        if lines[i].trim().is_empty() {
            i += 1;
            continue;
        }
        let (block, next) = parse_block(lines, i, outline, depth);
        blocks.push(block);
        i = next.max(i + 1);
    }
    attach_captions(blocks)
}

/// The block starting at the non-blank line `i`, and the index of the line after it.
fn parse_block(lines: &[&str], i: usize, outline: &mut Outline, depth: usize) -> (Block, usize) {
    let line = lines[i].trim();
    if let Some((level, text)) = heading(line) {
        return (outline.heading(level, text), i + 1);
    }
    if let Some(marker) = fence(line) {
        return code_block(lines, i, marker);
    }
    if line.starts_with('>') && depth < MAX_NESTING {
        return quote(lines, i, outline, depth);
    }
    if is_rule(line) {
        return (Block::Rule, i + 1);
    }
    if let Some((alt, path)) = image_line(line) {
        return (Block::Figure { alt, path, caption: None }, i + 1);
    }
    if list_item(line).is_some() {
        return list(lines, i);
    }
    if table_starts(lines, i) {
        return table(lines, i);
    }
    paragraph(lines, i)
}

/// Whether line `j` starts a block that ends a paragraph or a list item (an ordered list only
/// when it starts at 1, so a sentence beginning with a year or a count stays in its paragraph).
fn starts_block(lines: &[&str], j: usize) -> bool {
    let Some(line) = lines.get(j).map(|l| l.trim()) else { return false };
    heading(line).is_some()
        || fence(line).is_some()
        || line.starts_with('>')
        || is_rule(line)
        || image_line(line).is_some()
        || matches!(list_item(line), Some((ListKind::Bullet(_), _, _)) | Some((ListKind::Ordered(_), 1, _)))
        || table_starts(lines, j)
}

/// `# text` to `###### text`: the level and the text without a closing `#` sequence.
fn heading(line: &str) -> Option<(usize, &str)> {
    let level = line.bytes().take_while(|&b| b == b'#').count();
    if level == 0 || level > 6 {
        return None;
    }
    let rest = &line[level..];
    if !(rest.is_empty() || rest.starts_with([' ', '\t'])) {
        return None;
    }
    let text = rest.trim();
    let open = text.trim_end_matches('#');
    let text = if open.is_empty() {
        open
    } else if open.ends_with([' ', '\t']) {
        open.trim_end()
    } else {
        text
    };
    Some((level, text))
}

/// A code fence (three or more backticks or tildes): its character and length.
fn fence(line: &str) -> Option<(char, usize)> {
    let c = line.chars().next().filter(|c| *c == '`' || *c == '~')?;
    let n = line.chars().take_while(|x| *x == c).count();
    let info_ok = c == '~' || !line[n..].contains('`');
    (n >= 3 && info_ok).then_some((c, n))
}

/// The lines up to the closing fence (or the end of the text), kept as written.
fn code_block(lines: &[&str], i: usize, (c, n): (char, usize)) -> (Block, usize) {
    let mut body = Vec::new();
    let mut j = i + 1;
    while j < lines.len() {
        let t = lines[j].trim();
        if t.chars().take_while(|x| *x == c).count() >= n && t.trim_start_matches(c).is_empty() {
            return (Block::Code(body), j + 1);
        }
        body.push(lines[j].to_string());
        j += 1;
    }
    (Block::Code(body), j)
}

/// Consecutive `>` lines, their content parsed as blocks of their own.
fn quote(lines: &[&str], i: usize, outline: &mut Outline, depth: usize) -> (Block, usize) {
    let mut inner = Vec::new();
    let mut j = i;
    while let Some(rest) = lines.get(j).and_then(|l| l.trim_start().strip_prefix('>')) {
        inner.push(rest.strip_prefix(' ').unwrap_or(rest));
        j += 1;
    }
    (Block::Quote(parse_blocks(&inner, outline, depth + 1)), j)
}

/// `---`, `***` or `___` (three or more, spaces allowed between).
fn is_rule(line: &str) -> bool {
    let Some(c) = line.chars().next().filter(|c| matches!(c, '-' | '*' | '_')) else { return false };
    line.chars().all(|x| x == c || x == ' ' || x == '\t') && line.chars().filter(|x| *x == c).count() >= 3
}

/// `![alt](path)` filling the whole line: the alt text (Markdown) and the path.
fn image_line(line: &str) -> Option<(String, String)> {
    if !line.starts_with("![") {
        return None;
    }
    let cs: Vec<char> = line.chars().collect();
    let span = bracket_link(&cs, 1)?;
    (span.end == cs.len()).then(|| (cs[2..span.text_end].iter().collect(), span.url))
}

/// A list item: its kind, its number (1 for bullets) and its text.
fn list_item(line: &str) -> Option<(ListKind, u64, &str)> {
    let first = line.chars().next()?;
    if matches!(first, '-' | '*' | '+') {
        let rest = &line[1..];
        let text = rest.strip_prefix(' ').or_else(|| rest.strip_prefix('\t'))?;
        return Some((ListKind::Bullet(first), 1, text.trim()));
    }
    let digits = line.bytes().take_while(u8::is_ascii_digit).count();
    if digits == 0 || digits > 9 {
        return None;
    }
    let delim = line[digits..].chars().next().filter(|c| *c == '.' || *c == ')')?;
    let text = line[digits + 1..].strip_prefix(' ')?;
    let number = line[..digits].parse().ok()?;
    Some((ListKind::Ordered(delim), number, text.trim()))
}

/// Items of one kind; a line that starts no block continues the item before it, and blank
/// lines between items keep the list open.
fn list(lines: &[&str], i: usize) -> (Block, usize) {
    let Some((kind, start, first)) = list_item(lines[i].trim()) else { return paragraph(lines, i) };
    let mut items = vec![first.to_string()];
    let mut j = i + 1;
    while j < lines.len() {
        let line = lines[j].trim();
        if line.is_empty() {
            let k = (j..lines.len()).find(|&k| !lines[k].trim().is_empty()).unwrap_or(lines.len());
            let same = lines.get(k).and_then(|l| list_item(l.trim())).is_some_and(|(kd, _, _)| kd == kind);
            if same && !is_rule(lines[k].trim()) {
                j = k;
                continue;
            }
            break;
        }
        if is_rule(line) {
            break;
        }
        match list_item(line) {
            Some((kd, _, text)) if kd == kind => items.push(text.to_string()),
            _ if starts_block(lines, j) => break,
            _ => {
                if let Some(last) = items.last_mut() {
                    if !last.is_empty() {
                        last.push(' ');
                    }
                    last.push_str(line);
                }
            }
        }
        j += 1;
    }
    let start = matches!(kind, ListKind::Ordered(_)).then_some(start);
    (Block::List { start, items }, j)
}

/// Consecutive lines up to a blank line or the start of another block, joined by a space.
fn paragraph(lines: &[&str], i: usize) -> (Block, usize) {
    let mut text = lines[i].trim().to_string();
    let mut j = i + 1;
    while j < lines.len() && !lines[j].trim().is_empty() && !starts_block(lines, j) {
        text.push(' ');
        text.push_str(lines[j].trim());
        j += 1;
    }
    (Block::Paragraph(text), j)
}

/// Whether line `i` is a table header: it holds an unescaped `|` and the next line is a
/// delimiter row with as many cells.
fn table_starts(lines: &[&str], i: usize) -> bool {
    let (Some(head), Some(next)) = (lines.get(i), lines.get(i + 1)) else { return false };
    let head = head.trim();
    has_unescaped_pipe(head) && delimiter_row(next.trim()).is_some_and(|a| a.len() == split_cells(head).len())
}

/// The column alignments of a delimiter row (`| --- | ---: | :---: |`), or None when the line
/// is not one.
fn delimiter_row(line: &str) -> Option<Vec<Align>> {
    if !line.contains('-') {
        return None;
    }
    let cells = split_cells(line);
    if cells.is_empty() {
        return None;
    }
    cells
        .iter()
        .map(|c| {
            let left = c.strip_prefix(':');
            let body = left.unwrap_or(c);
            let right = body.strip_suffix(':');
            let dashes = right.unwrap_or(body);
            if dashes.is_empty() || !dashes.chars().all(|x| x == '-') {
                return None;
            }
            Some(match (left.is_some(), right.is_some()) {
                (true, true) => Align::Center,
                (false, true) => Align::Right,
                _ => Align::Left,
            })
        })
        .collect()
}

/// The header, delimiter and body rows of a table; the body ends at a blank line or a line
/// without an unescaped `|`.
fn table(lines: &[&str], i: usize) -> (Block, usize) {
    let head = split_cells(lines[i].trim());
    let aligns = lines.get(i + 1).and_then(|l| delimiter_row(l.trim())).unwrap_or_default();
    let mut rows = Vec::new();
    let mut j = i + 2;
    while let Some(line) = lines.get(j).map(|l| l.trim()) {
        let other_block = heading(line).is_some() || fence(line).is_some() || line.starts_with('>');
        if line.is_empty() || other_block || !has_unescaped_pipe(line) {
            break;
        }
        rows.push(split_cells(line));
        j += 1;
    }
    (Block::Table(Table { aligns, head, rows }), j)
}

fn has_unescaped_pipe(line: &str) -> bool {
    let mut chars = line.chars();
    while let Some(c) = chars.next() {
        match c {
            '\\' => {
                chars.next();
            }
            '|' => return true,
            _ => {}
        }
    }
    false
}

/// The cells of a table row, split on `|` not escaped as `\|` (escapes are kept for the inline
/// pass), without the empty cells outside a leading and a trailing pipe.
fn split_cells(line: &str) -> Vec<String> {
    let mut cells = Vec::new();
    let mut cell = String::new();
    let mut ended_with_pipe = false;
    let mut chars = line.chars();
    while let Some(c) = chars.next() {
        ended_with_pipe = false;
        match c {
            '\\' => {
                cell.push(c);
                if let Some(next) = chars.next() {
                    cell.push(next);
                }
            }
            '|' => {
                cells.push(std::mem::take(&mut cell));
                ended_with_pipe = true;
            }
            _ => cell.push(c),
        }
    }
    if !ended_with_pipe {
        cells.push(cell);
    }
    if line.starts_with('|') && !cells.is_empty() {
        cells.remove(0);
    }
    cells.into_iter().map(|c| c.trim().to_string()).collect()
}

/// A paragraph starting `*Figure` right after a figure becomes that figure's caption.
fn attach_captions(blocks: Vec<Block>) -> Vec<Block> {
    let mut out: Vec<Block> = Vec::with_capacity(blocks.len());
    for block in blocks {
        match block {
            Block::Paragraph(text)
                if text.starts_with("*Figure") && matches!(out.last(), Some(Block::Figure { caption: None, .. })) =>
            {
                if let Some(Block::Figure { caption, .. }) = out.last_mut() {
                    *caption = Some(text);
                }
            }
            other => out.push(other),
        }
    }
    out
}

/// Where the table of contents goes: after a leading `#` heading and the blockquotes after it.
fn nav_position(blocks: &[Block]) -> usize {
    let mut k = usize::from(matches!(blocks.first(), Some(Block::Heading { level: 1, .. })));
    while matches!(blocks.get(k), Some(Block::Quote(_))) {
        k += 1;
    }
    k
}

// ---------------------------------------------------------------------------------------------
// Rendering blocks

/// The HTML written so far and the figures numbered so far.
struct Page<'a> {
    figure: &'a dyn Fn(&str) -> Option<String>,
    figures: usize,
    out: String,
}

impl Page<'_> {
    fn block(&mut self, block: &Block) {
        match block {
            Block::Heading { level, html, id } => {
                let id = id.as_ref().map(|id| format!(" id=\"{}\"", escape(id))).unwrap_or_default();
                self.out.push_str(&format!("<h{level}{id}>{html}</h{level}>\n"));
            }
            Block::Paragraph(text) => self.out.push_str(&format!("<p>{}</p>\n", inline_html(text))),
            Block::Quote(inner) => {
                self.out.push_str("<blockquote>\n");
                for b in inner {
                    self.block(b);
                }
                self.out.push_str("</blockquote>\n");
            }
            Block::List { start, items } => self.list(*start, items),
            Block::Table(table) => self.out.push_str(&table_html(table)),
            Block::Figure { alt, path, caption } => self.figure_block(alt, path, caption.as_deref()),
            Block::Code(lines) => {
                let body: Vec<String> = lines.iter().map(|l| escape(l)).collect();
                self.out.push_str(&format!("<pre><code>{}</code></pre>\n", body.join("\n")));
            }
            Block::Rule => self.out.push_str("<hr>\n"),
        }
    }

    fn list(&mut self, start: Option<u64>, items: &[String]) {
        let (open, close) = match start {
            None => ("<ul>".to_string(), "</ul>"),
            Some(1) => ("<ol>".to_string(), "</ol>"),
            Some(n) => (format!("<ol start=\"{n}\">"), "</ol>"),
        };
        self.out.push_str(&open);
        self.out.push('\n');
        for item in items {
            self.out.push_str(&format!("<li>{}</li>\n", inline_html(item)));
        }
        self.out.push_str(close);
        self.out.push('\n');
    }

    /// The figure's SVG inline (ids prefixed per figure), or a note that it is missing, with
    /// its caption.
    fn figure_block(&mut self, alt: &str, path: &str, caption: Option<&str>) {
        self.figures += 1;
        let note = |what: &str| format!("<p class=\"missing-figure\">{what}: {}</p>", escape(path));
        let body = match (self.figure)(path) {
            None => note("Figure file missing"),
            Some(svg) => inline_svg(&svg, &format!("fig{}__", self.figures), &render_inline_str(alt, Mode::TEXT))
                .unwrap_or_else(|| note("Figure file is not an SVG image")),
        };
        self.out.push_str("<figure class=\"chart\">\n");
        self.out.push_str(&body);
        self.out.push('\n');
        if let Some(text) = caption {
            self.out.push_str(&format!("<figcaption>{}</figcaption>\n", caption_html(text)));
        }
        self.out.push_str("</figure>\n");
    }
}

/// Body cells longer than this (in characters of Markdown) make their column wrap; the cells
/// of other columns stay on one line, and the table scrolls in its wrapper when that makes it
/// wider than the page.
const LONG_CELL: usize = 40;

/// A table in a scrolling wrapper; rows with more cells than the header widen it (the header
/// is padded) rather than lose cells, rows with fewer are padded.
fn table_html(t: &Table) -> String {
    let columns = t.rows.iter().map(Vec::len).chain([t.head.len()]).max().unwrap_or(0);
    let mut head_classes = Vec::with_capacity(columns);
    let mut body_classes = Vec::with_capacity(columns);
    for k in 0..columns {
        let align = match t.aligns.get(k) {
            Some(Align::Right) => "right",
            Some(Align::Center) => "center",
            Some(Align::Left) | None => "",
        };
        let long = t.rows.iter().any(|r| r.get(k).is_some_and(|c| c.chars().count() > LONG_CELL));
        let wrap = if long && align != "right" { "wrap" } else { "" };
        head_classes.push(class_attr(&[align]));
        body_classes.push(class_attr(&[align, wrap]));
    }
    let mut s = String::from("<div class=\"table-wrap\">\n<table>\n<thead>\n");
    row_html(&mut s, "th", &t.head, &head_classes);
    s.push_str("</thead>\n<tbody>\n");
    for row in &t.rows {
        row_html(&mut s, "td", row, &body_classes);
    }
    s.push_str("</tbody>\n</table>\n</div>\n");
    s
}

/// ` class="a b"` from the non-empty names, or nothing.
fn class_attr(names: &[&str]) -> String {
    let names: Vec<&str> = names.iter().copied().filter(|n| !n.is_empty()).collect();
    if names.is_empty() {
        String::new()
    } else {
        format!(" class=\"{}\"", names.join(" "))
    }
}

/// One row, a cell per column (`classes` has one entry per column).
fn row_html(s: &mut String, tag: &str, cells: &[String], classes: &[String]) {
    s.push_str("<tr>");
    for (k, class) in classes.iter().enumerate() {
        let text = cells.get(k).map(|c| inline_html(c)).unwrap_or_default();
        s.push_str(&format!("<{tag}{class}>{text}</{tag}>"));
    }
    s.push_str("</tr>\n");
}

/// A caption: the text inside the `*...*` that wraps it whole (the figure styles it), or the
/// text as written when it is not wrapped.
fn caption_html(text: &str) -> String {
    let cs: Vec<char> = text.chars().collect();
    let wrapped = cs.first() == Some(&'*') && emphasis(&cs, 0, Mode::HTML).is_some_and(|(_, end)| end == cs.len());
    let mut out = String::new();
    if wrapped {
        render_inline(&cs[1..cs.len() - 1], Mode::HTML, &mut out);
    } else {
        render_inline(&cs, Mode::HTML, &mut out);
    }
    out
}

/// The nested list of links to every h2 and h3 (an h3 before the first h2 sits at the top).
fn contents_nav(entries: &[Entry]) -> String {
    if entries.is_empty() {
        return String::new();
    }
    let mut s =
        format!("<nav id=\"{CONTENTS_ID}\" aria-label=\"Contents\">\n<p class=\"contents-title\">Contents</p>\n<ul>\n");
    let (mut item_open, mut sub_open) = (false, false);
    for e in entries {
        let link = format!("<a href=\"#{}\">{}</a>", escape(&e.id), e.html);
        if e.level == 2 {
            if sub_open {
                s.push_str("</ul>\n");
                sub_open = false;
            }
            if item_open {
                s.push_str("</li>\n");
            }
            s.push_str(&format!("<li>{link}"));
            item_open = true;
        } else {
            if item_open && !sub_open {
                s.push_str("\n<ul>\n");
                sub_open = true;
            }
            s.push_str(&format!("<li>{link}</li>\n"));
        }
    }
    if sub_open {
        s.push_str("</ul>\n");
    }
    if item_open {
        s.push_str("</li>\n");
    }
    s.push_str("</ul>\n</nav>\n");
    s
}

/// An id from a heading's text: lower-case letters and digits, other runs as one `-`.
fn slug(escaped_text: &str) -> String {
    let text = escaped_text
        .replace("&lt;", "<")
        .replace("&gt;", ">")
        .replace("&quot;", "\"")
        .replace("&#39;", "'")
        .replace("&amp;", "&");
    let mut s = String::new();
    for c in text.chars() {
        if c.is_alphanumeric() {
            s.extend(c.to_lowercase());
        } else if !s.is_empty() && !s.ends_with('-') {
            s.push('-');
        }
    }
    let s = s.trim_end_matches('-');
    if s.is_empty() {
        "section".to_string()
    } else {
        s.to_string()
    }
}

// ---------------------------------------------------------------------------------------------
// Inline text

/// How inline Markdown is rendered: with tags or as escaped plain text, with or without link
/// anchors (a link's text is kept either way), and how deeply nested the current span is.
#[derive(Clone, Copy)]
struct Mode {
    tags: bool,
    links: bool,
    depth: usize,
}

impl Mode {
    const HTML: Mode = Mode { tags: true, links: true, depth: 0 };
    const TEXT: Mode = Mode { tags: false, links: true, depth: 0 };
    const NO_LINKS: Mode = Mode { tags: true, links: false, depth: 0 };

    fn nested(self) -> Mode {
        Mode { depth: self.depth + 1, ..self }
    }
}

fn inline_html(text: &str) -> String {
    render_inline_str(text, Mode::HTML)
}

fn render_inline_str(text: &str, mode: Mode) -> String {
    let cs: Vec<char> = text.chars().collect();
    let mut out = String::with_capacity(text.len() + 16);
    render_inline(&cs, mode, &mut out);
    out
}

/// Inline Markdown to HTML: escapes, code spans, emphasis, links; everything else is text,
/// escaped (keeping the entities in [`KEPT_ENTITIES`]).
fn render_inline(cs: &[char], mode: Mode, out: &mut String) {
    let mut plain = String::new();
    let mut i = 0;
    let nest = mode.depth < MAX_NESTING;
    while i < cs.len() {
        let c = cs[i];
        let span = match c {
            '\\' => escaped_char(cs, i),
            '`' => code_span(cs, i, mode),
            '*' if nest => emphasis(cs, i, mode),
            '[' if nest => link(cs, i, mode),
            '!' if nest && cs.get(i + 1) == Some(&'[') => inline_image(cs, i, mode),
            _ => None,
        };
        if let Some((html, next)) = span {
            escape_into(out, &plain);
            plain.clear();
            out.push_str(&html);
            i = next;
        } else {
            let n = if c == '`' || c == '*' { run_len(cs, i) } else { 1 };
            plain.extend(&cs[i..i + n]);
            i += n;
        }
    }
    escape_into(out, &plain);
}

/// How many times `cs[i]` repeats from `i`.
fn run_len(cs: &[char], i: usize) -> usize {
    cs.get(i).map_or(0, |&c| cs[i..].iter().take_while(|&&x| x == c).count())
}

/// `\` before ASCII punctuation: the character itself.
fn escaped_char(cs: &[char], i: usize) -> Option<(String, usize)> {
    let c = cs.get(i + 1).filter(|c| c.is_ascii_punctuation())?;
    Some((escape(&c.to_string()), i + 2))
}

/// The backslash escapes of `cs` resolved.
fn unescape(cs: &[char]) -> String {
    let mut s = String::with_capacity(cs.len());
    let mut i = 0;
    while i < cs.len() {
        match cs.get(i + 1) {
            Some(&n) if cs[i] == '\\' && n.is_ascii_punctuation() => {
                s.push(n);
                i += 2;
            }
            _ => {
                s.push(cs[i]);
                i += 1;
            }
        }
    }
    s
}

/// The start of the backtick run closing the code span opened at `i` (a run of the same
/// length; a backslash escapes the character after it, as the report writer escapes them).
fn code_span_close(cs: &[char], i: usize) -> Option<usize> {
    let n = run_len(cs, i);
    let mut j = i + n;
    while j < cs.len() {
        match cs[j] {
            '\\' => j += 2,
            '`' => {
                let m = run_len(cs, j);
                if m == n {
                    return Some(j);
                }
                j += m;
            }
            _ => j += 1,
        }
    }
    None
}

fn code_span(cs: &[char], i: usize, mode: Mode) -> Option<(String, usize)> {
    let n = run_len(cs, i);
    let close = code_span_close(cs, i)?;
    let content = unescape(&cs[i + n..close]);
    let content = match content.strip_prefix(' ').and_then(|c| c.strip_suffix(' ')) {
        Some(inner) if !inner.trim().is_empty() => inner.to_string(),
        _ => content,
    };
    let mut html = String::new();
    if mode.tags {
        html.push_str("<code>");
    }
    escape_into(&mut html, &content);
    if mode.tags {
        html.push_str("</code>");
    }
    Some((html, close + n))
}

/// `*em*` or `**strong**`: the opening run must be followed by a non-space and not follow a
/// letter or digit, the closing one the reverse, so `A*B` in a name stays as written.
fn emphasis(cs: &[char], i: usize, mode: Mode) -> Option<(String, usize)> {
    let r = run_len(cs, i);
    let opens = r <= 2 && cs.get(i + r).is_some_and(|c| !c.is_whitespace()) && (i == 0 || !cs[i - 1].is_alphanumeric());
    if !opens {
        return None;
    }
    let close = emphasis_close(cs, i + r, r)?;
    let mut inner = String::new();
    render_inline(&cs[i + r..close], mode.nested(), &mut inner);
    let html = match (mode.tags, r) {
        (false, _) => inner,
        (true, 2) => format!("<strong>{inner}</strong>"),
        (true, _) => format!("<em>{inner}</em>"),
    };
    Some((html, close + r))
}

/// The start of a run of `r` stars that closes emphasis opened just before `from` (runs of
/// another length belong to nested emphasis; code spans and escapes are skipped).
fn emphasis_close(cs: &[char], from: usize, r: usize) -> Option<usize> {
    let mut j = from;
    while j < cs.len() {
        match cs[j] {
            '\\' => j += 2,
            '`' => j = code_span_close(cs, j).unwrap_or(j) + run_len(cs, j),
            '*' => {
                let m = run_len(cs, j);
                let closes = m == r
                    && j > from
                    && !cs[j - 1].is_whitespace()
                    && !cs.get(j + m).is_some_and(|c| c.is_alphanumeric());
                if closes {
                    return Some(j);
                }
                j += m;
            }
            _ => j += 1,
        }
    }
    None
}

/// `[text](url)` found at a `[`: where the text ends, the target, and the index after `)`.
struct LinkSpan {
    text_end: usize,
    url: String,
    end: usize,
}

fn bracket_link(cs: &[char], open: usize) -> Option<LinkSpan> {
    let text_end = closing_bracket(cs, open)?;
    if cs.get(text_end + 1) != Some(&'(') {
        return None;
    }
    let url_start = text_end + 2;
    let url_end = closing_paren(cs, url_start)?;
    let raw: String = cs[url_start..url_end].iter().collect();
    let target = raw.split_whitespace().next().unwrap_or("");
    let target = target.strip_prefix('<').and_then(|t| t.strip_suffix('>')).unwrap_or(target);
    let url = unescape(&target.chars().collect::<Vec<_>>());
    Some(LinkSpan { text_end, url, end: url_end + 1 })
}

fn closing_bracket(cs: &[char], open: usize) -> Option<usize> {
    let mut depth = 0usize;
    let mut j = open + 1;
    while j < cs.len() {
        match cs[j] {
            '\\' => j += 1,
            '`' => j = code_span_close(cs, j).unwrap_or(j) + run_len(cs, j) - 1,
            '[' => depth += 1,
            ']' if depth == 0 => return Some(j),
            ']' => depth -= 1,
            _ => {}
        }
        j += 1;
    }
    None
}

fn closing_paren(cs: &[char], from: usize) -> Option<usize> {
    let mut depth = 0usize;
    let mut j = from;
    while j < cs.len() {
        match cs[j] {
            '\\' => j += 1,
            '(' => depth += 1,
            ')' if depth == 0 => return Some(j),
            ')' => depth -= 1,
            _ => {}
        }
        j += 1;
    }
    None
}

/// A link; one to a scheme other than http, https or mailto keeps only its text.
fn link(cs: &[char], i: usize, mode: Mode) -> Option<(String, usize)> {
    let span = bracket_link(cs, i)?;
    let mut text = String::new();
    render_inline(&cs[i + 1..span.text_end], Mode { links: false, ..mode.nested() }, &mut text);
    if !mode.tags || !mode.links || !safe_url(&span.url) {
        return Some((text, span.end));
    }
    Some((format!("<a href=\"{}\">{text}</a>", escape(&span.url)), span.end))
}

/// An image inside running text is not inlined: its alt text stands in for it.
fn inline_image(cs: &[char], i: usize, mode: Mode) -> Option<(String, usize)> {
    let span = bracket_link(cs, i + 1)?;
    let mut alt = String::new();
    render_inline(&cs[i + 2..span.text_end], Mode { tags: false, ..mode.nested() }, &mut alt);
    let html = if mode.tags { format!("<span class=\"inline-figure\">{alt}</span>") } else { alt };
    Some((html, span.end))
}

fn safe_url(url: &str) -> bool {
    let u = url.trim().to_ascii_lowercase();
    match u.find(':') {
        Some(k) if !u[..k].contains(['/', '?', '#']) => ["http", "https", "mailto"].contains(&&u[..k]),
        _ => true,
    }
}

/// `text` escaped for HTML text or a double-quoted attribute.
fn escape(text: &str) -> String {
    let mut s = String::with_capacity(text.len());
    escape_into(&mut s, text);
    s
}

/// Escapes `<`, `>`, `"` and `&`, except an `&` that starts one of [`KEPT_ENTITIES`]; control
/// characters other than tab become spaces.
fn escape_into(out: &mut String, text: &str) {
    for (k, c) in text.char_indices() {
        match c {
            '&' if KEPT_ENTITIES.iter().any(|e| text[k..].starts_with(e)) => out.push('&'),
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            c if c.is_control() && c != '\t' => out.push(' '),
            c => out.push(c),
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Figures

/// The SVG element of `svg` ready to sit in the page: the XML declaration, DOCTYPE and
/// comments before it and any script removed, its ids prefixed with `prefix` (and the
/// references to them), labelled with `label` (escaped text). None when it holds no `<svg>`
/// element.
fn inline_svg(svg: &str, prefix: &str, label: &str) -> Option<String> {
    let body = skip_prolog(svg)?;
    let after_name = body.strip_prefix("<svg")?;
    if !after_name.starts_with(|c: char| c.is_ascii_whitespace() || c == '>' || c == '/') {
        return None;
    }
    let end = body.rfind("</svg>")? + "</svg>".len();
    let body = without_scripts(&body[..end]);
    let body = prefix_ids(&body, prefix);
    Some(with_label(body, label))
}

/// `svg` after its byte-order mark, XML declaration, processing instructions, comments and
/// DOCTYPE.
fn skip_prolog(svg: &str) -> Option<&str> {
    let mut s = svg.trim_start_matches('\u{feff}').trim_start();
    loop {
        if s.starts_with("<?") {
            s = after(s, "?>")?;
        } else if s.starts_with("<!--") {
            s = after(s, "-->")?;
        } else if s.get(..9).is_some_and(|h| h.eq_ignore_ascii_case("<!doctype")) {
            s = after_doctype(s)?;
        } else {
            return Some(s);
        }
        s = s.trim_start();
    }
}

fn after<'a>(s: &'a str, end: &str) -> Option<&'a str> {
    s.find(end).map(|k| &s[k + end.len()..])
}

/// The text after a DOCTYPE, which may hold an internal subset in brackets.
fn after_doctype(s: &str) -> Option<&str> {
    let close = s.find('>')?;
    match s.find('[') {
        Some(open) if open < close => {
            let subset_end = open + s[open..].find(']')?;
            after(&s[subset_end..], ">")
        }
        _ => Some(&s[close + 1..]),
    }
}

/// `svg` without `<script>` elements (the page carries no scripts).
fn without_scripts(svg: &str) -> String {
    let lower = svg.to_ascii_lowercase();
    let mut out = String::with_capacity(svg.len());
    let mut pos = 0;
    while let Some(k) = lower[pos..].find("<script") {
        let start = pos + k;
        out.push_str(&svg[pos..start]);
        let tail = &lower[start..];
        let end = match tail.find("</script") {
            Some(c) => tail[c..].find('>').map(|g| c + g + 1),
            None => tail.find('>').map(|g| g + 1),
        };
        pos = end.map_or(svg.len(), |e| start + e);
    }
    out.push_str(&svg[pos..]);
    out
}

/// `svg` with every id it defines prefixed, and the `url(#id)`, `href="#id"` and
/// `xlink:href="#id"` references to them, so that figures sharing one page keep their own.
fn prefix_ids(svg: &str, prefix: &str) -> String {
    let b = svg.as_bytes();
    let ids: BTreeSet<&str> =
        (0..b.len()).filter_map(|i| id_value_at(b, i)).map(|(s, e)| &svg[s..e]).filter(|v| !v.is_empty()).collect();
    if ids.is_empty() {
        return svg.to_string();
    }
    let mut out = String::with_capacity(svg.len() + 16 * ids.len());
    let mut last = 0;
    let mut i = 0;
    while i < b.len() {
        match reference_at(svg, i, &ids) {
            Some(at) => {
                out.push_str(&svg[last..at]);
                out.push_str(prefix);
                last = at;
                i = at.max(i + 1);
            }
            None => i += 1,
        }
    }
    out.push_str(&svg[last..]);
    out
}

/// The value range of an `id` attribute whose name starts at `i`.
fn id_value_at(b: &[u8], i: usize) -> Option<(usize, usize)> {
    let named = b[i..].starts_with(b"id") && i > 0 && b[i - 1].is_ascii_whitespace();
    if named {
        attr_value(b, i + 2)
    } else {
        None
    }
}

/// Where to insert the prefix when an id definition or a reference to one of `ids` starts at
/// byte `i`.
fn reference_at(svg: &str, i: usize, ids: &BTreeSet<&str>) -> Option<usize> {
    let b = svg.as_bytes();
    if let Some((s, e)) = id_value_at(b, i) {
        return ids.contains(&svg[s..e]).then_some(s);
    }
    if b[i..].starts_with(b"href") && i > 0 && (b[i - 1].is_ascii_whitespace() || b[i - 1] == b':') {
        let (s, e) = attr_value(b, i + 4)?;
        let value = &svg[s..e];
        return value.strip_prefix('#').is_some_and(|id| ids.contains(id)).then_some(s + 1);
    }
    if b[i..].starts_with(b"url(") {
        let mut j = i + 4;
        while j < b.len() && (b[j].is_ascii_whitespace() || b[j] == b'"' || b[j] == b'\'') {
            j += 1;
        }
        if b.get(j) != Some(&b'#') {
            return None;
        }
        let start = j + 1;
        let len =
            b[start..].iter().take_while(|&&c| !matches!(c, b')' | b'"' | b'\'') && !c.is_ascii_whitespace()).count();
        return ids.contains(&svg[start..start + len]).then_some(start);
    }
    None
}

/// The range of a quoted attribute value after `= ` at `k` (spaces allowed around `=`).
fn attr_value(b: &[u8], k: usize) -> Option<(usize, usize)> {
    let skip = |mut j: usize| {
        while b.get(j).is_some_and(u8::is_ascii_whitespace) {
            j += 1;
        }
        j
    };
    let eq = skip(k);
    if b.get(eq) != Some(&b'=') {
        return None;
    }
    let q = skip(eq + 1);
    let quote = *b.get(q).filter(|c| **c == b'"' || **c == b'\'')?;
    let start = q + 1;
    let len = b.get(start..)?.iter().position(|&c| c == quote)?;
    Some((start, start + len))
}

/// `role="img"` and the figure's alt text on the `<svg>` tag, unless it has its own.
fn with_label(svg: String, label: &str) -> String {
    let open = &svg[..svg.find('>').unwrap_or(svg.len())];
    if label.is_empty() || open.contains("aria-label") || open.contains("role=") {
        return svg;
    }
    format!("<svg role=\"img\" aria-label=\"{label}\"{}", &svg[4..])
}

// ---------------------------------------------------------------------------------------------
// Page

fn document(title: &str, body: &str) -> String {
    format!(
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <title>{title}</title>\n<style>\n{STYLE}</style>\n</head>\n<body>\n<main>\n{body}</main>\n</body>\n</html>\n"
    )
}

/// Screen and print styles: text at a readable width, wide tables scrolling in their wrapper,
/// figures scaled to the page; in print, A4 pages, a page per h2 after the first, and tables,
/// figures and rows kept whole where they fit.
const STYLE: &str = r#":root { color: #20262c; background: #ffffff; }
body { margin: 0; padding: 1.5rem 1.5rem 4rem;
  font-family: "Helvetica Neue", Helvetica, Arial, "Liberation Sans", sans-serif; font-size: 14px; line-height: 1.5; }
main { max-width: 100em; margin: 0 auto; }
h1, h2, h3, h4, h5, h6, p, ul, ol, blockquote, nav, pre, figcaption { max-width: 60em; }
h1 { font-size: 1.6em; margin: 0.4em 0 0.8em; }
h2 { font-size: 1.3em; margin: 2.2em 0 0.6em; padding-bottom: 0.2em; border-bottom: 1px solid #cfd6dd; }
h3 { font-size: 1.1em; margin: 1.8em 0 0.5em; }
p, li { overflow-wrap: break-word; }
a { color: #1d5fa6; }
code { font-family: "DejaVu Sans Mono", Menlo, Consolas, monospace; font-size: 0.9em;
  background: #eef1f4; padding: 0.05em 0.3em; border-radius: 3px; }
pre { background: #eef1f4; padding: 0.6em 0.8em; overflow-x: auto; }
pre code { background: none; padding: 0; }
blockquote { margin: 1em 0; padding: 0.5em 1em; border-left: 4px solid #b7822e; background: #faf5eb; }
blockquote p { margin: 0.3em 0; }
nav#contents { margin: 1.2em 0 1.6em; padding: 0.7em 1.2em; background: #f3f5f7; border: 1px solid #dde2e7; border-radius: 4px; }
nav#contents .contents-title { margin: 0 0 0.3em; font-weight: bold; }
nav#contents ul { list-style: none; margin: 0; padding-left: 0; }
nav#contents ul ul { padding-left: 1.4em; font-size: 0.95em; }
nav#contents li { margin: 0.1em 0; }
nav#contents a { text-decoration: none; }
nav#contents a:hover { text-decoration: underline; }
.table-wrap { max-width: 100%; overflow-x: auto; margin: 0.8em 0 1.4em; }
table { border-collapse: collapse; font-size: 12.5px; font-variant-numeric: tabular-nums; }
th, td { padding: 0.25em 0.6em; text-align: left; vertical-align: top; }
td { white-space: nowrap; }
td.wrap { white-space: normal; min-width: 18em; }
th { vertical-align: bottom; background: #e8ecf0; border-bottom: 2px solid #9aa5b0; }
td { border-bottom: 1px solid #e2e6ea; }
tbody tr:nth-child(even) { background: #f5f7f9; }
th.right, td.right { text-align: right; }
th.center, td.center { text-align: center; }
figure.chart { margin: 1.4em 0; max-width: 100%; }
figure.chart svg { display: block; max-width: 100%; height: auto; }
figcaption { margin-top: 0.4em; font-size: 0.92em; font-style: italic; color: #48525c; }
.missing-figure { padding: 0.5em 0.8em; border: 1px dashed #b4463f; color: #8c2f29; }
.inline-figure { font-style: italic; }
hr { border: none; border-top: 1px solid #cfd6dd; margin: 2em 0; }
@media print {
  @page { size: A4; margin: 16mm 14mm 18mm; }
  :root { background: none; }
  body { padding: 0; font-size: 9.5pt; }
  main { max-width: none; }
  nav#contents { background: none; border: none; padding: 0; }
  main > h2 ~ h2 { break-before: page; page-break-before: always; }
  h1, h2, h3 { break-after: avoid; page-break-after: avoid; }
  table, figure, blockquote, tr { break-inside: avoid; page-break-inside: avoid; }
  thead { display: table-header-group; }
  .table-wrap { overflow: visible; }
  table { font-size: 7.5pt; }
  td { white-space: normal; }
  td.right { white-space: nowrap; }
  th, td { padding: 0.15em 0.35em; }
  td.wrap { min-width: 8em; }
  a, nav#contents a { color: inherit; text-decoration: none; }
  code { background: none; padding: 0; }
}
"#;

#[cfg(test)]
mod tests {
    use super::{inline_html, render_html};
    use std::path::{Path, PathBuf};

    fn no_figures(_: &str) -> Option<String> {
        None
    }

    /// Opening tags `<name>` and `<name ...>` against closing ones.
    fn balanced(html: &str, name: &str) -> bool {
        let opens = html.matches(&format!("<{name}>")).count() + html.matches(&format!("<{name} ")).count();
        opens == html.matches(&format!("</{name}>")).count()
    }

    const BLOCK_TAGS: [&str; 16] = [
        "table",
        "thead",
        "tbody",
        "tr",
        "figure",
        "figcaption",
        "ul",
        "ol",
        "li",
        "blockquote",
        "p",
        "nav",
        "pre",
        "em",
        "strong",
        "code",
    ];

    fn assert_balanced(html: &str) {
        for tag in BLOCK_TAGS.iter().chain(&["a", "h2", "h3", "main"]) {
            assert!(balanced(html, tag), "<{tag}> unbalanced in\n{html}");
        }
    }

    fn nav(html: &str) -> &str {
        let start = html.find("<nav").expect("a table of contents");
        let end = html.find("</nav>").expect("the end of the table of contents");
        &html[start..end]
    }

    #[test]
    fn headings_get_unique_ids_and_the_first_h1_is_the_title() {
        let md = "# Review of A&lt;B&gt; & co\n\n## 1. Summary\n\n### Findings\n\n## 2. More\n\n### Findings\n\n\
                  ## Uses `cell\\|code` here ##\n\n## Contents\n\n#### Deep\n\n# Second top\n";
        let html = render_html(md, &no_figures);
        assert!(html.starts_with("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">"), "{html}");
        assert!(html.contains("<title>Review of A&lt;B&gt; &amp; co</title>"), "{html}");
        assert!(html.contains("<h1>Review of A&lt;B&gt; &amp; co</h1>"));
        assert!(html.contains("<h2 id=\"1-summary\">1. Summary</h2>"));
        assert!(html.contains("<h3 id=\"findings\">Findings</h3>"));
        assert!(html.contains("<h3 id=\"findings-2\">Findings</h3>"));
        assert!(html.contains("<h2 id=\"uses-cell-code-here\">Uses <code>cell|code</code> here</h2>"), "{html}");
        assert!(html.contains("<h2 id=\"contents-2\">Contents</h2>"), "the nav keeps its id: {html}");
        assert!(html.contains("<h4>Deep</h4>") && html.contains("<h1>Second top</h1>"));
        assert_eq!(html.matches("<title>").count(), 1);
    }

    #[test]
    fn contents_follow_the_title_and_caution_and_nest_h3_under_h2() {
        let md =
            "# T\n\n> **Caution.** Read this.\n\nIntro.\n\n### Early\n\n## One\n\n### A\n\n### B\n\n## Two [x](y)\n";
        let html = render_html(md, &no_figures);
        let expected =
            "<nav id=\"contents\" aria-label=\"Contents\">\n<p class=\"contents-title\">Contents</p>\n<ul>\n\
                        <li><a href=\"#early\">Early</a></li>\n<li><a href=\"#one\">One</a>\n<ul>\n\
                        <li><a href=\"#a\">A</a></li>\n<li><a href=\"#b\">B</a></li>\n</ul>\n</li>\n\
                        <li><a href=\"#two-x\">Two x</a></li>\n</ul>\n";
        assert_eq!(nav(&html), expected);
        let quote =
            html.find("<blockquote>\n<p><strong>Caution.</strong> Read this.</p>\n</blockquote>").expect("quote");
        let nav_at = html.find("<nav").expect("nav");
        let intro = html.find("<p>Intro.</p>").expect("intro");
        assert!(quote < nav_at && nav_at < intro, "{html}");
        assert!(html.contains("<h2 id=\"two-x\">Two <a href=\"y\">x</a></h2>"), "{html}");
    }

    #[test]
    fn tables_split_on_unescaped_pipes_and_align_columns() {
        let md = "| name | code | value | mid |\n| --- | :--- | ---: | :---: |\n| A\\|B | `x\\|y` | 1.5 | c |\n\
                  | short |\n| a | b | 2 | d | extra |\n| back\\\\| slash |\nAfter.\n";
        let html = render_html(md, &no_figures);
        assert!(html.contains(
            "<thead>\n<tr><th>name</th><th>code</th><th class=\"right\">value</th><th class=\"center\">mid</th>\
             <th></th></tr>\n</thead>"
        ));
        assert!(html.contains(
            "<tr><td>A|B</td><td><code>x|y</code></td><td class=\"right\">1.5</td><td class=\"center\">c</td>\
             <td></td></tr>"
        ));
        assert!(html
            .contains("<tr><td>short</td><td></td><td class=\"right\"></td><td class=\"center\"></td><td></td></tr>"));
        assert!(html.contains(
            "<tr><td>a</td><td>b</td><td class=\"right\">2</td><td class=\"center\">d</td><td>extra</td></tr>"
        ));
        assert!(html.contains("<tr><td>back\\</td><td>slash</td>"), "{html}");
        assert!(html.contains("<div class=\"table-wrap\">\n<table>") && html.contains("<p>After.</p>"));
        assert!(!html.contains("\\|"));
        assert_balanced(&html);
        let long = "a sentence long enough to need wrapping in its cell";
        let html = render_html(&format!("| note | n |\n| --- | ---: |\n| {long} | 1 |\n| short | 2 |\n"), &no_figures);
        assert!(html.contains(&format!("<tr><td class=\"wrap\">{long}</td><td class=\"right\">1</td></tr>")));
        assert!(html.contains("<tr><td class=\"wrap\">short</td><td class=\"right\">2</td></tr>"), "{html}");
        assert!(html.contains("<tr><th>note</th><th class=\"right\">n</th></tr>"));
    }

    #[test]
    fn a_line_with_a_pipe_but_no_delimiter_row_is_text() {
        let html = render_html("a | b\nnext line\n\n| x |\n| y |\n", &no_figures);
        assert!(html.contains("<p>a | b next line</p>") && html.contains("<p>| x | | y |</p>"), "{html}");
        assert!(!html.contains("<table"));
    }

    const SMALL_SVG: &str = "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n<svg width=\"10\" height=\"10\" \
                             xmlns=\"http://www.w3.org/2000/svg\"><rect width=\"10\" height=\"10\"/></svg>\n";

    #[test]
    fn a_figure_is_inlined_with_its_caption() {
        let md = "Text.\n\n![Chart of A\\[1\\]](charts/a.svg)\n\n*Figure 1. The **first** chart of `A`.*\n\n\
                  ![Chart of B](charts/a.svg)\n\nPlain text after.\n";
        let fig = |p: &str| (p == "charts/a.svg").then(|| SMALL_SVG.to_string());
        let html = render_html(md, &fig);
        assert!(
            html.contains(
                "<figure class=\"chart\">\n<svg role=\"img\" aria-label=\"Chart of A[1]\" width=\"10\" height=\"10\" \
             xmlns=\"http://www.w3.org/2000/svg\"><rect width=\"10\" height=\"10\"/></svg>\n\
             <figcaption>Figure 1. The <strong>first</strong> chart of <code>A</code>.</figcaption>\n</figure>"
            ),
            "{html}"
        );
        assert!(html.contains("aria-label=\"Chart of B\"") && html.contains("<p>Plain text after.</p>"));
        assert_eq!(html.matches("<figure").count(), 2);
        assert_eq!(html.matches("<figcaption>").count(), 1);
        assert!(!html.contains("<?xml") && !html.contains("*Figure") && !html.contains("<p>*"));
    }

    #[test]
    fn a_caption_after_several_figures_goes_with_the_last() {
        let md = "![one](a.svg)\n\n![two](b.svg)\n\n*Figures 1 to 2. Both.*\n";
        let fig = |_: &str| Some(SMALL_SVG.to_string());
        let html = render_html(md, &fig);
        let first = html.find("aria-label=\"one\"").expect("first");
        let second = html.find("aria-label=\"two\"").expect("second");
        let caption = html.find("<figcaption>Figures 1 to 2. Both.</figcaption>").expect("caption");
        assert!(first < second && second < caption, "{html}");
        assert_eq!(html.matches("<figcaption>").count(), 1);
    }

    #[test]
    fn a_missing_figure_says_so_and_keeps_its_caption() {
        let md = "![Gone](charts/gone&more.svg)\n\n*Figure 3. Gone.*\n\n![Odd](odd.svg)\n";
        let fig = |p: &str| (p == "odd.svg").then(|| "<html>not a drawing</html>".to_string());
        let html = render_html(md, &fig);
        assert!(html.contains(
            "<figure class=\"chart\">\n<p class=\"missing-figure\">Figure file missing: charts/gone&amp;more.svg</p>\n\
             <figcaption>Figure 3. Gone.</figcaption>\n</figure>"
        ), "{html}");
        assert!(html.contains("<p class=\"missing-figure\">Figure file is not an SVG image: odd.svg</p>"));
        assert!(!html.contains("not a drawing"));
    }

    #[test]
    fn entities_stay_and_raw_markup_is_escaped() {
        let md = "AT&T said &lt;b&gt; &amp; &quot;q&quot; &#39;s &nbsp; <i>raw</i> \"x\" \\\\ \\[ \\] \\` \\| \\& a\\b";
        let html = render_html(md, &no_figures);
        let expected = "<p>AT&amp;T said &lt;b&gt; &amp; &quot;q&quot; &#39;s &amp;nbsp; &lt;i&gt;raw&lt;/i&gt; \
                        &quot;x&quot; \\ [ ] ` | &amp; a\\b</p>";
        assert!(html.contains(expected), "{html}");
        assert_eq!(inline_html("`a &lt; b` & `c\\`d`"), "<code>a &lt; b</code> &amp; <code>c`d</code>");
    }

    #[test]
    fn emphasis_needs_both_ends_and_leaves_names_alone() {
        assert_eq!(inline_html("a **b** *c* d"), "a <strong>b</strong> <em>c</em> d");
        assert_eq!(inline_html("a **b"), "a **b");
        assert_eq!(inline_html("A*B and C*D"), "A*B and C*D");
        assert_eq!(inline_html("2 * 3 * 4"), "2 * 3 * 4");
        assert_eq!(inline_html("**x `**` y**"), "<strong>x <code>**</code> y</strong>");
        assert_eq!(inline_html("*it **bold** it*"), "<em>it <strong>bold</strong> it</em>");
        assert_eq!(inline_html("[0.00%, 4.06%] P[D >= d]"), "[0.00%, 4.06%] P[D &gt;= d]");
    }

    #[test]
    fn links_keep_safe_targets_only() {
        assert_eq!(
            inline_html("[site](https://example.org/a?b=1&c=2) [x](javascript:alert(1)) [rel](notes.md)"),
            "<a href=\"https://example.org/a?b=1&amp;c=2\">site</a> x <a href=\"notes.md\">rel</a>"
        );
        assert_eq!(inline_html("see ![a chart](c.svg) here"), "see <span class=\"inline-figure\">a chart</span> here");
    }

    const CLIP_SVG: &str =
        "<?xml version=\"1.0\" standalone=\"no\"?>\n<!DOCTYPE svg PUBLIC \"-//W3C//DTD SVG 1.1//EN\" \
        \"http://www.w3.org/Graphics/SVG/1.1/DTD/svg11.dtd\">\n<!-- drawn -->\n\
        <svg xmlns=\"http://www.w3.org/2000/svg\" xmlns:xlink=\"http://www.w3.org/1999/xlink\" viewBox=\"0 0 4 4\">\
        <defs><clipPath id=\"clip\"><rect width=\"4\" height=\"4\"/></clipPath><linearGradient id='shade'/></defs>\
        <script>alert(1)</script><g clip-path=\"url(#clip)\" fill=\"url('#shade')\" data-id=\"clip\">\
        <use xlink:href=\"#clip\"/><use href=\"#other\"/><rect width=\"1\" height=\"1\"/></g></svg>";

    #[test]
    fn svg_ids_are_prefixed_per_figure() {
        let md = "![a](a.svg)\n\n![b](b.svg)\n";
        let fig = |_: &str| Some(CLIP_SVG.to_string());
        let html = render_html(md, &fig);
        for n in [1, 2] {
            for part in [
                format!("<clipPath id=\"fig{n}__clip\">"),
                format!("<linearGradient id='fig{n}__shade'/>"),
                format!("clip-path=\"url(#fig{n}__clip)\" fill=\"url('#fig{n}__shade')\""),
                format!("<use xlink:href=\"#fig{n}__clip\"/>"),
            ] {
                assert_eq!(html.matches(&part).count(), 1, "{part} in\n{html}");
            }
        }
        assert_eq!(html.matches("<use href=\"#other\"/>").count(), 2, "unknown ids stay");
        assert_eq!(html.matches("data-id=\"clip\"").count(), 2, "only the id attribute itself");
        assert_eq!(html.matches("id=\"clip\"").count(), 2, "left only inside data-id");
        assert!(!html.contains("url(#clip)") && !html.contains("\"#clip\""));
        let lower = html.to_ascii_lowercase();
        assert!(!lower.contains("<!doctype svg") && !lower.contains("<?xml") && !lower.contains("<script"));
        assert!(!html.contains("<!-- drawn -->"));
    }

    #[test]
    fn odd_inputs_render_without_panicking() {
        let fig = |p: &str| (p == "x.svg").then(|| CLIP_SVG.to_string());
        let cases: [(&str, &str); 17] = [
            ("a **b", "<p>a **b</p>"),
            ("|", "<p>|</p>"),
            ("![]()", "<p class=\"missing-figure\">Figure file missing: </p>"),
            ("![x](x.svg", "<p>![x](x.svg</p>"),
            ("**", "<p>**</p>"),
            ("`", "<p>`</p>"),
            ("\\", "<p>\\</p>"),
            ("#", "<h1></h1>"),
            ("##", "<h2 id=\"section\"></h2>"),
            (">", "<blockquote>\n</blockquote>"),
            ("- ", "<p>-</p>"),
            ("3. three\n4. four", "<ol start=\"3\">\n<li>three</li>\n<li>four</li>\n</ol>"),
            ("```\n<b>\n", "<pre><code>&lt;b&gt;</code></pre>"),
            ("| a |\n| --- |\n| b | c | d |", "<tr><td>b</td><td>c</td><td>d</td></tr>"),
            ("- one\n  more\n\n- two\n---", "<ul>\n<li>one more</li>\n<li>two</li>\n</ul>\n<hr>"),
            ("para\n- item", "<p>para</p>\n<ul>\n<li>item</li>\n</ul>"),
            ("\u{0}\r\n\t", "<p> </p>"),
        ];
        for (md, part) in cases {
            let html = render_html(md, &fig);
            assert!(html.contains(part), "{md:?} should give {part:?}:\n{html}");
            assert!(html.ends_with("</html>\n"));
            assert_balanced(&html);
        }
        let deep = [
            ">".repeat(5000) + " deep",
            "*a ".repeat(3000) + "b*".repeat(3000).as_str(),
            "[".repeat(4000) + "](".repeat(2000).as_str(),
            "`".repeat(3000),
            "**a ".repeat(2000),
            "[".repeat(5000) + "x" + "](u)".repeat(5000).as_str(),
            "| x ".repeat(3000) + "\n" + "| --- ".repeat(3000).as_str(),
        ];
        for md in &deep {
            assert_balanced(&render_html(md, &fig));
        }
    }

    #[test]
    fn random_markdown_keeps_the_markup_balanced() {
        let pieces = [
            "*",
            "**",
            "`",
            "\\",
            "|",
            "[",
            "]",
            "(",
            ")",
            "!",
            "# ",
            "## ",
            "### ",
            "> ",
            "- ",
            "1. ",
            "\n",
            "\n\n",
            "a",
            "b c",
            "&",
            "&lt;",
            "<",
            "---",
            "| --- |",
            "| ---: |",
            "![x](x.svg)",
            "![y](",
            "é",
            ":",
            "*Figure ",
            "```",
            "_",
        ];
        let fig = |p: &str| (p == "x.svg").then(|| CLIP_SVG.to_string());
        let mut state: u64 = 0x2545_f491_4f6c_dd1d;
        for _ in 0..3000 {
            let mut md = String::new();
            for _ in 0..60 {
                state = state.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1_442_695_040_888_963_407);
                md.push_str(pieces[(state >> 33) as usize % pieces.len()]);
            }
            let html = render_html(&md, &fig);
            for tag in BLOCK_TAGS.iter().chain(&["a", "h2", "h3"]) {
                assert!(balanced(&html, tag), "<{tag}> unbalanced for {md:?}:\n{html}");
            }
            assert!(!html.to_ascii_lowercase().contains("<script"), "{md:?}");
        }
    }

    fn demo_dir() -> PathBuf {
        Path::new(env!("CARGO_MANIFEST_DIR")).join("validation-reports/demo/2015-2019")
    }

    fn is_delimiter_row(line: &str) -> bool {
        line.starts_with('|') && line.contains('-') && line.chars().all(|c| matches!(c, '|' | '-' | ':' | ' '))
    }

    #[test]
    fn the_demo_report_renders_whole() {
        let dir = demo_dir();
        let md = std::fs::read_to_string(dir.join("report.md")).expect("the demo report is checked in");
        let fig = |p: &str| std::fs::read_to_string(dir.join(p)).ok();
        let html = render_html(&md, &fig);
        let contents = nav(&html);
        for line in md.lines() {
            let (level, text) = match (line.strip_prefix("## "), line.strip_prefix("### ")) {
                (Some(t), _) => (2, t),
                (_, Some(t)) => (3, t),
                _ => continue,
            };
            let close = format!(">{}</h{level}>", inline_html(text));
            let at = html.find(&close).unwrap_or_else(|| panic!("heading {text:?} missing"));
            let open = format!("<h{level} id=\"");
            let start = html[..at].rfind(&open).expect("heading with an id") + open.len();
            let id = &html[start..at - 1];
            let entry = format!("<a href=\"#{id}\">{}</a>", inline_html(text));
            assert!(contents.contains(&entry), "no contents entry {entry}");
        }
        let images = md.lines().filter(|l| l.trim_start().starts_with("![")).count();
        let captions = md.lines().filter(|l| l.starts_with("*Figure")).count();
        let tables = md.lines().filter(|l| is_delimiter_row(l)).count();
        assert!(images > 20 && tables > 30, "{images} figures, {tables} tables");
        assert_eq!(html.matches("<figure").count(), images);
        assert_eq!(html.matches("<svg").count(), images, "every demo figure file is there");
        assert_eq!(html.matches("<figcaption>").count(), captions);
        assert_eq!(html.matches("<table").count(), tables);
        assert!(!html.contains("missing-figure\">"));
        assert!(!html.contains("**") && !html.contains("\\|") && !html.contains("<script"));
        assert!(html.contains("<title>Validation review: demo (2015-2019)</title>"), "title");
        assert_balanced(&html);
        for tag in ["table", "figure", "ul", "blockquote"] {
            assert!(html.matches(&format!("<{tag}")).count() > 0, "{tag} appears");
        }
    }
}
