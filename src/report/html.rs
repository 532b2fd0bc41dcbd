//! Writing the report page: escaping, tables, sections and the page around them (inline style,
//! no script, no address of anything outside the file).

/// Text with the five characters HTML gives meaning to replaced by their entities.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
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

/// A number for a table cell: 4 significant digits, or the text as it is when not a number.
pub fn cell(text: &str) -> String {
    match text.parse::<f64>() {
        Ok(x) if x.is_finite() && text.contains(['.', 'e', 'E']) => {
            if x != 0.0 && (x.abs() < 1e-3 || x.abs() >= 1e5) {
                format!("{x:.3e}")
            } else {
                let digits = (3 - x.abs().log10().floor() as i32).clamp(0, 6) as usize;
                format!("{x:.digits$}")
            }
        }
        _ => escape(text),
    }
}

/// An HTML table of `header` and `rows` (cells formatted by [`cell`]).
pub fn table(header: &[&str], rows: &[Vec<String>]) -> String {
    let mut out = String::from("<table><thead><tr>");
    for h in header {
        out.push_str(&format!("<th>{}</th>", escape(h)));
    }
    out.push_str("</tr></thead><tbody>");
    for row in rows {
        out.push_str("<tr>");
        for c in row {
            out.push_str(&format!("<td>{}</td>", cell(c)));
        }
        out.push_str("</tr>");
    }
    out.push_str("</tbody></table>");
    out
}

/// A figure: the SVG with a caption.
pub fn figure(svg: &str, caption: &str) -> String {
    format!(
        "<figure>{svg}<figcaption>{}</figcaption></figure>",
        escape(caption)
    )
}

/// One section of the report.
pub struct Section {
    /// Anchor.
    pub id: &'static str,
    /// Heading.
    pub title: String,
    /// Its HTML.
    pub body: String,
}

const STYLE: &str = "body{font-family:sans-serif;max-width:1100px;margin:2em auto;padding:0 1em;\
color:#222;line-height:1.45}h1{font-size:1.6em}h2{border-bottom:1px solid #ccc;margin-top:2em}\
table{border-collapse:collapse;font-size:0.85em;margin:0.8em 0}th,td{border:1px solid #ddd;\
padding:3px 6px;text-align:right}th{background:#f2f2f2}td:first-child,th:first-child{text-align:left}\
figure{display:inline-block;margin:0.5em;vertical-align:top}figcaption{font-size:0.8em;\
max-width:520px;color:#444}.caution{border:2px solid #d55e00;background:#fff6ef;padding:0.6em 1em}\
pre{background:#f6f6f6;padding:0.6em;overflow-x:auto;font-size:0.8em}nav a{margin-right:1em}\
.methods{background:#f4f8fb;padding:0.6em 1em;border-left:4px solid #0072b2}";

/// The whole page: title, caution, table of contents, sections.
pub fn page(title: &str, caution: &str, sections: &[Section]) -> String {
    let mut out = format!(
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\
         <title>{}</title><style>{STYLE}</style></head><body>\n<h1>{}</h1>\n\
         <p class=\"caution\"><strong>Research use only.</strong> {}</p>\n<nav>",
        escape(title),
        escape(title),
        escape(caution)
    );
    for s in sections {
        out.push_str(&format!("<a href=\"#{}\">{}</a>", s.id, escape(&s.title)));
    }
    out.push_str("</nav>\n");
    for s in sections {
        out.push_str(&format!(
            "<section id=\"{}\"><h2>{}</h2>\n{}\n</section>\n",
            s.id,
            escape(&s.title),
            s.body
        ));
    }
    out.push_str("</body></html>\n");
    out
}
