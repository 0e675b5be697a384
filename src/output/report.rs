//! `report.html`: one self-contained page per run or study, to hand on. Inline CSS and inline
//! SVG charts only: no script, no font and no file is fetched, so the page reads the same
//! offline, attached to a mail or printed. The layout is one column that narrows to a phone's
//! width (tables scroll inside their own box, charts scale to the column).
//!
//! A page is a list of blocks that the studies compose; this module only writes HTML (it opens
//! no file) and escapes every text it is given.

use std::fmt::Write as _;

/// One block of a page.
#[derive(Debug, Clone, PartialEq)]
pub enum Block {
    /// A section heading.
    Heading(String),
    /// A paragraph of text.
    Paragraph(String),
    /// A highlighted verdict line: the word and the reasons under it.
    Verdict { word: String, reasons: Vec<String> },
    /// Two columns, a name and a value.
    Facts(Vec<(String, String)>),
    /// A table with a header row; numeric-looking cells are right-aligned.
    Table {
        header: Vec<String>,
        rows: Vec<Vec<String>>,
    },
    /// A chart: SVG text as plotters writes it, and a caption.
    Chart { svg: String, caption: String },
    /// Preformatted text (a setup file as run).
    Code(String),
    /// A bulleted list (cautions).
    List(Vec<String>),
}

/// A whole page.
#[derive(Debug, Clone, PartialEq)]
pub struct Page {
    pub title: String,
    /// One line under the title (what produced the page).
    pub subtitle: String,
    pub blocks: Vec<Block>,
}

/// Colours of the page: the ink and rules of the charts; the verdict colours are blue for `ok`
/// and vermilion for a flag, a pair that reads apart for the common colour-vision deficiencies
/// (Okabe & Ito, "Color Universal Design", 2008).
const CSS: &str = "\
*{box-sizing:border-box}\
body{margin:0;padding:12px;font:15px/1.45 system-ui,-apple-system,'Segoe UI',Roboto,sans-serif;color:#24282e;background:#fff}\
main{max-width:960px;margin:0 auto}\
h1{font-size:1.35em;margin:.2em 0}\
h2{font-size:1.1em;margin:1.4em 0 .4em;border-bottom:1px solid #d6d9de;padding-bottom:.2em}\
.sub{color:#5b6270;margin:0 0 1em}\
.verdict{border-left:6px solid #0072b2;background:#eef5fb;padding:.5em .8em;margin:.8em 0}\
.verdict.flag{border-color:#d55e00;background:#fdf1ea}\
.verdict b{font-size:1.15em}\
.verdict ul{margin:.3em 0 0 1.1em;padding:0}\
.scroll{overflow-x:auto;max-width:100%}\
table{border-collapse:collapse;font-size:.9em;margin:.3em 0}\
th,td{padding:.25em .6em;border-bottom:1px solid #e3e5e9;text-align:left;vertical-align:top}\
th{background:#f3f4f6;white-space:nowrap}\
td.n{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}\
table.facts th{background:none;font-weight:600}\
figure{margin:.8em 0}\
figure svg{width:100%;height:auto;display:block;border:1px solid #e3e5e9}\
figcaption{color:#5b6270;font-size:.9em;margin-top:.3em}\
pre{background:#f6f7f9;padding:.6em;overflow-x:auto;font-size:.82em;line-height:1.35}\
ul.list{padding-left:1.2em}\
";

/// Escapes text for HTML element content and attribute values.
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

/// Whether a cell reads as a number (right-aligned in tables).
fn numeric(cell: &str) -> bool {
    let t = cell.trim().trim_end_matches('%').trim();
    !t.is_empty() && t.parse::<f64>().is_ok()
}

/// Makes plotters' fixed-size SVG scale with the column: the width and height attributes of the
/// root element go (the viewBox keeps the aspect ratio); an XML prolog, if any, is dropped.
fn responsive_svg(svg: &str) -> String {
    let body = match svg.find("<svg") {
        Some(k) => &svg[k..],
        None => return String::new(),
    };
    let Some(end) = body.find('>') else {
        return String::new();
    };
    let (open, rest) = body.split_at(end);
    let mut attrs = String::new();
    let mut has_viewbox = false;
    let (mut w, mut h) = (None, None);
    // Attributes of the root element, as plotters writes them: name="value".
    let mut s = open.trim_start_matches("<svg");
    while let Some(eq) = s.find("=\"") {
        let name = s[..eq].trim();
        let after = &s[eq + 2..];
        let Some(close) = after.find('"') else { break };
        let value = &after[..close];
        match name {
            "width" => w = Some(value.to_string()),
            "height" => h = Some(value.to_string()),
            _ => {
                has_viewbox |= name == "viewBox";
                let _ = write!(attrs, " {name}=\"{value}\"");
            }
        }
        s = &after[close + 1..];
    }
    if !has_viewbox {
        if let (Some(w), Some(h)) = (w, h) {
            let _ = write!(attrs, " viewBox=\"0 0 {w} {h}\"");
        }
    }
    format!("<svg{attrs} role=\"img\"{rest}")
}

/// The page as HTML text.
pub fn render(page: &Page) -> String {
    let mut h = String::with_capacity(64 * 1024);
    let _ = write!(
        h,
        "<!doctype html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <title>{}</title>\n<style>{CSS}</style>\n</head>\n<body>\n<main>\n<h1>{}</h1>\n\
         <p class=\"sub\">{}</p>\n",
        escape(&page.title),
        escape(&page.title),
        escape(&page.subtitle)
    );
    for b in &page.blocks {
        block(&mut h, b);
    }
    h.push_str("</main>\n</body>\n</html>\n");
    h
}

fn block(h: &mut String, b: &Block) {
    match b {
        Block::Heading(t) => {
            let _ = writeln!(h, "<h2>{}</h2>", escape(t));
        }
        Block::Paragraph(t) => {
            let _ = writeln!(h, "<p>{}</p>", escape(t));
        }
        Block::Verdict { word, reasons } => {
            let class = if word == "ok" {
                "verdict"
            } else {
                "verdict flag"
            };
            let _ = write!(h, "<div class=\"{class}\">Verdict: <b>{}</b>", escape(word));
            if !reasons.is_empty() {
                h.push_str("<ul>");
                for r in reasons {
                    let _ = write!(h, "<li>{}</li>", escape(r));
                }
                h.push_str("</ul>");
            }
            h.push_str("</div>\n");
        }
        Block::Facts(rows) => {
            h.push_str("<div class=\"scroll\"><table class=\"facts\">\n");
            for (k, v) in rows {
                let _ = writeln!(h, "<tr><th>{}</th><td>{}</td></tr>", escape(k), escape(v));
            }
            h.push_str("</table></div>\n");
        }
        Block::Table { header, rows } => {
            h.push_str("<div class=\"scroll\"><table>\n<tr>");
            for c in header {
                let _ = write!(h, "<th>{}</th>", escape(c));
            }
            h.push_str("</tr>\n");
            for r in rows {
                h.push_str("<tr>");
                for c in r {
                    let class = if numeric(c) { " class=\"n\"" } else { "" };
                    let _ = write!(h, "<td{class}>{}</td>", escape(c));
                }
                h.push_str("</tr>\n");
            }
            h.push_str("</table></div>\n");
        }
        Block::Chart { svg, caption } => {
            let _ = writeln!(
                h,
                "<figure>{}<figcaption>{}</figcaption></figure>",
                responsive_svg(svg),
                escape(caption)
            );
        }
        Block::Code(t) => {
            let _ = writeln!(h, "<pre>{}</pre>", escape(t));
        }
        Block::List(items) => {
            h.push_str("<ul class=\"list\">");
            for i in items {
                let _ = write!(h, "<li>{}</li>", escape(i));
            }
            h.push_str("</ul>\n");
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn text_is_escaped_everywhere() {
        let page = Page {
            title: "a <b> & \"c\"".into(),
            subtitle: "x'y".into(),
            blocks: vec![
                Block::Paragraph("<script>alert(1)</script>".into()),
                Block::Facts(vec![("k<".into(), "v>".into())]),
                Block::Table {
                    header: vec!["h&".into()],
                    rows: vec![vec!["<td>".into()]],
                },
                Block::Code("(name: \"<x>\")".into()),
                Block::List(vec!["a&b".into()]),
            ],
        };
        let html = render(&page);
        assert!(!html.contains("<script>"), "{html}");
        assert!(
            !html.contains("<b>") && !html.contains("<td><td>"),
            "{html}"
        );
        assert!(html.contains("a &lt;b&gt; &amp; &quot;c&quot;"));
        assert!(html.contains("&lt;script&gt;alert(1)&lt;/script&gt;"));
        assert!(html.contains("(name: &quot;&lt;x&gt;&quot;)"));
    }

    #[test]
    fn charts_lose_their_fixed_size_but_keep_their_aspect_ratio() {
        let svg = "<?xml version=\"1.0\"?>\n<svg width=\"1200\" height=\"600\" xmlns=\"http://www.w3.org/2000/svg\">\n<rect/></svg>";
        let out = responsive_svg(svg);
        assert!(out.starts_with("<svg"), "{out}");
        assert!(!out.contains("width=\"1200\"") && !out.contains("height=\"600\""));
        assert!(out.contains("viewBox=\"0 0 1200 600\""), "{out}");
        assert!(out.contains("<rect/></svg>"));
        // An existing viewBox is kept, not doubled.
        let out = responsive_svg("<svg width=\"10\" height=\"5\" viewBox=\"0 0 10 5\"><g/></svg>");
        assert_eq!(out.matches("viewBox").count(), 1, "{out}");
    }

    #[test]
    fn the_page_fetches_nothing_and_runs_no_script() {
        let page = Page {
            title: "t".into(),
            subtitle: String::new(),
            blocks: vec![Block::Chart {
                svg:
                    "<svg width=\"4\" height=\"2\"><text font-family=\"sans-serif\">x</text></svg>"
                        .into(),
                caption: "c".into(),
            }],
        };
        let html = render(&page).to_lowercase();
        for bad in ["<script", "src=", "href=", "@import", "url(", "<link"] {
            assert!(!html.contains(bad), "{bad} in {html}");
        }
    }

    #[test]
    fn numbers_are_right_aligned_words_are_not() {
        let html = render(&Page {
            title: String::new(),
            subtitle: String::new(),
            blocks: vec![Block::Table {
                header: vec!["a".into(), "b".into(), "c".into()],
                rows: vec![vec!["12.5".into(), "ok".into(), "-3 %".into()]],
            }],
        });
        assert!(html.contains("<td class=\"n\">12.5</td><td>ok</td><td class=\"n\">-3 %</td>"));
    }
}
