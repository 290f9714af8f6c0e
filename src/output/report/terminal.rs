//! The report's blocks as plain text for a terminal: the third renderer
//! beside Markdown and HTML, so `pick` prints the same tables, words and
//! numbers as `report.md` (the brief selection of blocks, `Detail::Brief`).
//! Markup is dropped (`**bold**`, `` `code` ``), paragraphs are wrapped,
//! tables are aligned with numbers to the right, images are left out.

use super::{Block, is_unit, numeric_columns, padded_cell};

/// Line width paragraphs and list items are wrapped to, characters.
const WIDTH: usize = 100;

/// `blocks` as terminal text.
pub(super) fn text(blocks: &[Block]) -> String {
    let mut out = String::new();
    for b in blocks {
        match b {
            Block::Heading(1, t) => {
                out.push_str(&plain(t));
                out.push_str("\n\n");
            }
            Block::Heading(_, t) => {
                let t = plain(t);
                out.push_str(&format!("{t}\n{}\n", "-".repeat(t.chars().count())));
            }
            Block::Para(t) => {
                out.push_str(&wrap(&plain(t), "", ""));
                out.push('\n');
            }
            Block::List(items) => {
                for i in items {
                    out.push_str(&wrap(&plain(i), "- ", "  "));
                }
                out.push('\n');
            }
            Block::Table(head, rows) => {
                out.push_str(&table(head, rows));
                out.push('\n');
            }
            Block::Image { .. } => {}
            Block::Summary(rows) => {
                let width = rows
                    .iter()
                    .map(|(l, _)| l.chars().count() + 1)
                    .max()
                    .unwrap_or(0);
                for (label, t) in rows {
                    let lead = format!("{:<width$} ", format!("{label}:"));
                    let hang = " ".repeat(lead.chars().count());
                    out.push_str(&wrap(&plain(t), &lead, &hang));
                }
                out.push('\n');
            }
        }
    }
    // One blank line at the end, not two.
    while out.ends_with("\n\n") {
        out.pop();
    }
    out
}

/// Inline markup removed: `**` and backticks.
fn plain(s: &str) -> String {
    s.replace("**", "").replace('`', "")
}

/// `s` wrapped at [`WIDTH`] on spaces, the first line led by `first` and
/// the rest by `rest`; a word longer than the line stays whole.
fn wrap(s: &str, first: &str, rest: &str) -> String {
    let mut out = String::new();
    let mut line = first.to_string();
    let mut empty = true;
    for word in words(s) {
        let word = word.as_str();
        let fits = line.chars().count() + 1 + word.chars().count() <= WIDTH;
        if !empty && !fits {
            out.push_str(line.trim_end());
            out.push('\n');
            line = rest.to_string();
            empty = true;
        }
        if !empty {
            line.push(' ');
        }
        line.push_str(word);
        empty = false;
    }
    out.push_str(line.trim_end());
    out.push('\n');
    out
}

/// The words of `s`, a unit kept with the number before it (`691.0 Hz`,
/// `25 %,`), so a line never breaks between them.
fn words(s: &str) -> Vec<String> {
    let mut out: Vec<String> = Vec::new();
    for w in s.split_whitespace() {
        let bare = w.trim_end_matches([',', '.', ';', ':', ')']);
        let after_number = out
            .last()
            .is_some_and(|p| p.ends_with(|c: char| c.is_ascii_digit()));
        match out.last_mut() {
            Some(prev) if after_number && is_unit(bare) => {
                prev.push(' ');
                prev.push_str(w);
            }
            _ => out.push(w.to_string()),
        }
    }
    out
}

/// A table with columns two spaces apart, numbers right-aligned, the
/// header underlined.
fn table(head: &[String], rows: &[Vec<String>]) -> String {
    let numeric = numeric_columns(head, rows);
    let cell = |r: &[String], j: usize| plain(r.get(j).map_or("", String::as_str));
    let width: Vec<usize> = (0..head.len())
        .map(|j| {
            rows.iter()
                .map(|r| cell(r, j).chars().count())
                .chain([cell(head, j).chars().count()])
                .max()
                .unwrap_or(0)
        })
        .collect();
    let line = |r: &[String]| -> String {
        let cells: Vec<String> = (0..head.len())
            .map(|j| padded_cell(&cell(r, j), width[j], numeric[j]))
            .collect();
        format!("{}\n", cells.join("  ").trim_end())
    };
    let mut out = line(head);
    let rule: Vec<String> = width.iter().map(|&w| "-".repeat(w)).collect();
    out.push_str(&format!("{}\n", rule.join("  ")));
    for r in rows {
        out.push_str(&line(r));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn markup_goes_numbers_align_right_and_lines_wrap() {
        let blocks = vec![
            Block::Heading(1, "A loop".into()),
            Block::Summary(vec![("Answer".into(), "**1.396 kHz**".into())]),
            Block::Heading(2, "Methods".into()),
            Block::Table(
                vec!["method".into(), "f*".into()],
                vec![
                    vec!["`tustin`".into(), "275.9 Hz".into()],
                    vec!["step-invariant".into(), "1.124 kHz".into()],
                ],
            ),
            Block::Para(format!("{}1.000 kHz", "word ".repeat(19))),
        ];
        let t = text(&blocks);
        assert!(t.starts_with("A loop\n\nAnswer: 1.396 kHz\n"), "{t}");
        assert!(t.contains("method                 f*\n"), "{t}");
        assert!(t.contains("tustin           275.9 Hz\n"), "{t}");
        assert!(t.contains("step-invariant  1.124 kHz\n"), "{t}");
        assert!(t.lines().all(|l| l.chars().count() <= WIDTH), "{t}");
        // 19 words of 5 characters fill 94 columns: the rate goes to the
        // next line whole.
        assert!(t.contains("\n1.000 kHz\n"), "{t}");
        assert!(!t.contains('`') && !t.contains("**"));
    }
}
