//! The report as a list of blocks, written twice from the same content: `report.html` (one
//! self-contained page, figures as inline SVG, images as data URIs) and `summary.md` (figures as
//! PNG files beside it).

use base64::Engine;

/// One piece of the report.
#[derive(Debug, Clone)]
pub enum Block {
    /// A heading of `level` (1-4) with an anchor id.
    Heading { level: u8, id: String, text: String },
    /// A paragraph of plain text.
    Para(String),
    /// A plain-sentence finding (highlighted).
    Finding(String),
    /// The caution box.
    Caution(String),
    /// A table with a header row.
    Table { head: Vec<String>, rows: Vec<Vec<String>> },
    /// A plot: inline SVG in HTML, `figures/{id}.png` in Markdown. `chart` marks plots with
    /// data axes (as opposed to diagrams).
    Figure { id: String, caption: String, chart: bool, svg: String, png: Vec<u8> },
    /// A raster image (stimulus frames): data URI in HTML, `figures/{id}.png` in Markdown.
    Image { id: String, caption: String, png: Vec<u8> },
    /// Preformatted text (model summary).
    Pre(String),
    /// A collapsible group (run settings).
    Details { summary: String, blocks: Vec<Block> },
}

/// Escape text for HTML.
pub fn esc(s: &str) -> String {
    s.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

const STYLE: &str = "body{font-family:sans-serif;max-width:1150px;margin:2em auto;padding:0 1em;color:#111;line-height:1.45}\
h1{border-bottom:2px solid #0072b2}h2{border-bottom:1px solid #ccc;margin-top:2em}\
table{border-collapse:collapse;margin:0.6em 0;font-size:0.9em}td,th{border:1px solid #bbb;padding:2px 8px;text-align:right}\
th{background:#eef}td:first-child,th:first-child{text-align:left}\
.caution{border:2px solid #d55e00;background:#fff4ec;padding:0.6em 1em;margin:1em 0}\
.finding{border-left:4px solid #009e73;padding-left:0.6em}\
figure{margin:1em 0}figure svg,figure img{max-width:100%;height:auto}figcaption{font-size:0.9em;color:#333}\
pre{background:#f6f6f6;padding:0.6em;overflow-x:auto;font-size:0.85em}\
@media print{body{max-width:none}figure{page-break-inside:avoid}}";

/// The whole page.
pub fn html(title: &str, blocks: &[Block]) -> String {
    let mut out = format!(
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>{}</title>\
         <style>{STYLE}</style></head><body>\n",
        esc(title)
    );
    for b in blocks {
        html_block(b, &mut out);
    }
    out += "</body></html>\n";
    out
}

fn html_block(b: &Block, out: &mut String) {
    match b {
        Block::Heading { level, id, text } => {
            *out += &format!("<h{level} id=\"{}\">{}</h{level}>\n", esc(id), esc(text))
        }
        Block::Para(t) => *out += &format!("<p>{}</p>\n", esc(t)),
        Block::Finding(t) => *out += &format!("<p class=\"finding\">{}</p>\n", esc(t)),
        Block::Caution(t) => *out += &format!("<div class=\"caution\"><strong>Caution.</strong> {}</div>\n", esc(t)),
        Block::Table { head, rows } => {
            *out += "<table><tr>";
            for h in head {
                *out += &format!("<th>{}</th>", esc(h));
            }
            *out += "</tr>\n";
            for r in rows {
                *out += "<tr>";
                for c in r {
                    *out += &format!("<td>{}</td>", esc(c));
                }
                *out += "</tr>\n";
            }
            *out += "</table>\n";
        }
        Block::Figure { id, caption, chart, svg, .. } => {
            // The SVG's own XML declaration is not allowed inside HTML.
            let body = svg.find("<svg").map_or(svg.as_str(), |i| &svg[i..]);
            let class = if *chart { "chart" } else { "diagram" };
            *out += &format!(
                "<figure class=\"{class}\" id=\"{}\">{body}<figcaption>{}</figcaption></figure>\n",
                esc(id),
                esc(caption)
            );
        }
        Block::Image { id, caption, png } => {
            let data = base64::engine::general_purpose::STANDARD.encode(png);
            *out += &format!(
                "<figure class=\"image\" id=\"{}\"><img alt=\"{}\" src=\"data:image/png;base64,{data}\">\
                 <figcaption>{}</figcaption></figure>\n",
                esc(id),
                esc(caption),
                esc(caption)
            );
        }
        Block::Pre(t) => *out += &format!("<pre>{}</pre>\n", esc(t)),
        Block::Details { summary, blocks } => {
            *out += &format!("<details><summary>{}</summary>\n", esc(summary));
            for b in blocks {
                html_block(b, out);
            }
            *out += "</details>\n";
        }
    }
}

/// The Markdown summary; figures are linked as `figures/{id}.png`.
pub fn markdown(title: &str, blocks: &[Block]) -> String {
    let mut out = format!("# {title}\n\n");
    for b in blocks {
        md_block(b, &mut out);
    }
    out
}

fn md_cell(s: &str) -> String {
    s.replace('|', "\\|").replace('\n', " ")
}

fn md_block(b: &Block, out: &mut String) {
    match b {
        Block::Heading { level, text, .. } => *out += &format!("{} {text}\n\n", "#".repeat(*level as usize + 1)),
        Block::Para(t) => *out += &format!("{t}\n\n"),
        Block::Finding(t) => *out += &format!("- {t}\n\n"),
        Block::Caution(t) => *out += &format!("> **Caution.** {t}\n\n"),
        Block::Table { head, rows } => {
            *out += &format!("| {} |\n", head.iter().map(|h| md_cell(h)).collect::<Vec<_>>().join(" | "));
            *out += &format!("|{}\n", " --- |".repeat(head.len()));
            for r in rows {
                *out += &format!("| {} |\n", r.iter().map(|c| md_cell(c)).collect::<Vec<_>>().join(" | "));
            }
            *out += "\n";
        }
        Block::Figure { id, caption, .. } | Block::Image { id, caption, .. } => {
            *out += &format!("![{}](figures/{id}.png)\n\n*{}*\n\n", md_cell(caption), md_cell(caption))
        }
        Block::Pre(t) => *out += &format!("```\n{t}\n```\n\n"),
        Block::Details { summary, blocks } => {
            *out += &format!("**{summary}**\n\n");
            for b in blocks {
                md_block(b, out);
            }
        }
    }
}

/// Every PNG the Markdown links: (file name inside `figures/`, bytes).
pub fn pngs(blocks: &[Block]) -> Vec<(String, &[u8])> {
    let mut out = Vec::new();
    for b in blocks {
        match b {
            Block::Figure { id, png, .. } | Block::Image { id, png, .. } => {
                out.push((format!("{id}.png"), png.as_slice()))
            }
            Block::Details { blocks, .. } => out.extend(pngs(blocks)),
            _ => {}
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn text_is_escaped_and_both_formats_carry_the_same_content() {
        let blocks = vec![
            Block::Heading { level: 1, id: "a".into(), text: "Cell <0>".into() },
            Block::Table { head: vec!["x".into()], rows: vec![vec!["1 | 2".into()]] },
        ];
        let h = html("t", &blocks);
        assert!(h.contains("Cell &lt;0&gt;") && !h.contains("<0>"));
        let m = markdown("t", &blocks);
        assert!(m.contains("## Cell <0>") && m.contains("1 \\| 2"), "{m}");
    }
}
