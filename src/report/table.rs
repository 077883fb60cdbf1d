//! A plain table section of a report: a heading and rows of cells already escaped.

use std::fmt::Write as _;

/// A section `id` with heading `title`, a table of `head` and `rows` (cells are HTML the
/// caller escaped), or "None." when there are no rows.
pub(super) fn simple_table(
    out: &mut String,
    id: &str,
    title: &str,
    head: &[&str],
    rows: Vec<Vec<String>>,
) {
    let _ = writeln!(out, "<section id=\"{id}\">\n<h2>{title}</h2>");
    if rows.is_empty() {
        let _ = writeln!(out, "<p>None.</p>\n</section>");
        return;
    }
    out.push_str("<table><thead><tr>");
    for h in head {
        let _ = write!(out, "<th>{h}</th>");
    }
    out.push_str("</tr></thead>\n<tbody>\n");
    for row in rows {
        out.push_str("<tr>");
        for cell in row {
            let _ = write!(out, "<td>{cell}</td>");
        }
        out.push_str("</tr>\n");
    }
    out.push_str("</tbody></table>\n</section>\n");
}
