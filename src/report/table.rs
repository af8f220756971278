//! One table model for every table the reports show — `summary.md`, `report.md` and
//! `report.html` — rendered to Markdown or HTML with the cell text escaped once, here, so a
//! stage named `a|b*<c>` or with a backtick is one cell in every document.

use std::fmt::Write;

/// A column: its title and whether it holds numbers (right-aligned).
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    /// Title shown in the header row.
    pub title: String,
    /// Whether the column holds numbers.
    pub numeric: bool,
    /// Whether its cells stay on one line in HTML (short words a browser would otherwise
    /// break at a hyphen: `forward-active`).
    pub unbroken: bool,
}

/// How a cell is set apart.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Mark {
    /// Plain text.
    #[default]
    Plain,
    /// A passing verdict.
    Pass,
    /// A failing verdict or a point to look at (bold in Markdown, red in HTML).
    Fail,
    /// A quantity's symbol whose first underscore starts a subscript (`A_v`, `V_OS`): set as
    /// a subscript in HTML, written as typed in Markdown.
    Symbol,
}

/// One cell: plain text (never markup) and how it is set apart.
#[derive(Debug, Clone, PartialEq)]
pub struct Cell {
    /// The text as read, unescaped.
    pub text: String,
    /// How it is set apart.
    pub mark: Mark,
}

impl Cell {
    /// A passing verdict.
    pub fn pass(text: impl Into<String>) -> Cell {
        Cell {
            text: text.into(),
            mark: Mark::Pass,
        }
    }

    /// A failing verdict.
    pub fn fail(text: impl Into<String>) -> Cell {
        Cell {
            text: text.into(),
            mark: Mark::Fail,
        }
    }

    /// A quantity's symbol (see [`Mark::Symbol`]).
    pub fn symbol(text: impl Into<String>) -> Cell {
        Cell {
            text: text.into(),
            mark: Mark::Symbol,
        }
    }

    /// `pass_text` marked as passing when `pass`, otherwise `fail_text` marked as failing.
    pub fn verdict(pass: bool, pass_text: &str, fail_text: &str) -> Cell {
        if pass {
            Cell::pass(pass_text)
        } else {
            Cell::fail(fail_text)
        }
    }
}

impl From<String> for Cell {
    fn from(text: String) -> Cell {
        Cell {
            text,
            mark: Mark::Plain,
        }
    }
}

impl From<&str> for Cell {
    fn from(text: &str) -> Cell {
        Cell::from(text.to_owned())
    }
}

/// A table with a header row.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Table {
    /// The columns.
    pub columns: Vec<Column>,
    /// Body rows, one cell per column.
    pub rows: Vec<Vec<Cell>>,
}

impl Table {
    /// An empty table with `(title, numeric)` columns.
    pub fn new<'a>(columns: impl IntoIterator<Item = (&'a str, bool)>) -> Table {
        Table {
            columns: columns
                .into_iter()
                .map(|(title, numeric)| Column {
                    title: title.to_owned(),
                    numeric,
                    unbroken: false,
                })
                .collect(),
            rows: Vec::new(),
        }
    }

    /// Keeps the cells of the column titled `title` on one line in HTML.
    pub fn unbroken(mut self, title: &str) -> Table {
        for column in self.columns.iter_mut().filter(|c| c.title == title) {
            column.unbroken = true;
        }
        self
    }

    /// Appends a row.
    pub fn push(&mut self, row: Vec<Cell>) {
        self.rows.push(row);
    }

    /// Whether the table has no rows.
    pub fn is_empty(&self) -> bool {
        self.rows.is_empty()
    }

    /// The table as a GitHub-flavoured Markdown table.
    pub fn to_markdown(&self) -> String {
        let mut out = String::new();
        let header: Vec<String> = self
            .columns
            .iter()
            .map(|c| markdown_text(&c.title))
            .collect();
        let _ = writeln!(out, "| {} |", header.join(" | "));
        let rule: Vec<&str> = self
            .columns
            .iter()
            .map(|c| if c.numeric { "---:" } else { "---" })
            .collect();
        let _ = writeln!(out, "|{}|", rule.join("|"));
        for row in &self.rows {
            let cells: Vec<String> = row
                .iter()
                .map(|cell| match cell.mark {
                    Mark::Fail if !cell.text.is_empty() => {
                        format!("**{}**", markdown_text(&cell.text))
                    }
                    _ => markdown_text(&cell.text),
                })
                .collect();
            let _ = writeln!(out, "| {} |", cells.join(" | "));
        }
        out
    }

    /// The table as an HTML `<table>`.
    pub fn to_html(&self) -> String {
        let mut out = String::from("<table>\n<thead><tr>");
        for column in &self.columns {
            let _ = write!(
                out,
                "<th{}>{}</th>",
                if column.numeric { " class=\"num\"" } else { "" },
                html_words(&column.title)
            );
        }
        out.push_str("</tr></thead>\n<tbody>\n");
        for row in &self.rows {
            out.push_str("<tr>");
            for (cell, column) in row.iter().zip(&self.columns) {
                let mut classes: Vec<&str> = match (cell.mark, column.numeric) {
                    (Mark::Fail, _) => vec!["fail"],
                    (Mark::Pass, _) => vec!["pass"],
                    (Mark::Plain | Mark::Symbol, true) => vec!["num"],
                    (Mark::Plain | Mark::Symbol, false) => vec![],
                };
                if column.unbroken {
                    classes.push("unbroken");
                }
                let class = if classes.is_empty() {
                    String::new()
                } else {
                    format!(" class=\"{}\"", classes.join(" "))
                };
                let text = match (cell.mark, cell.text.split_once('_')) {
                    (Mark::Symbol, Some((base, subscript)))
                        if !base.is_empty() && !subscript.is_empty() =>
                    {
                        format!("{}<sub>{}</sub>", html_words(base), html_words(subscript))
                    }
                    _ => html_words(&cell.text),
                };
                let _ = write!(out, "<td{class}>{text}</td>");
            }
            out.push_str("</tr>\n");
        }
        out.push_str("</tbody>\n</table>\n");
        out
    }
}

/// Text that Markdown shows as written: the characters that would start emphasis, code,
/// links, HTML or a table cell are escaped. An underscore inside a word (`R_E`) cannot start
/// emphasis in GitHub-flavoured Markdown and is left as it is.
pub fn markdown_text(text: &str) -> String {
    let chars: Vec<char> = text.chars().collect();
    let mut out = String::with_capacity(text.len());
    for (i, &c) in chars.iter().enumerate() {
        let inside_word = |j: Option<usize>| {
            j.and_then(|j| chars.get(j))
                .is_some_and(|n| n.is_alphanumeric())
        };
        match c {
            '_' if inside_word(i.checked_sub(1)) && inside_word(Some(i + 1)) => out.push(c),
            '\\' | '`' | '*' | '_' | '[' | ']' | '|' | '#' => {
                out.push('\\');
                out.push(c);
            }
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '&' => out.push_str("&amp;"),
            '\n' | '\r' => out.push(' '),
            _ => out.push(c),
        }
    }
    out
}

/// Splits prose at backtick pairs into (text, is_code) runs: the library words names and plan
/// keys in backticks (`stage \`a\``). An odd number of backticks (a name holding one) leaves the
/// text as one plain run.
fn code_runs(text: &str) -> Vec<(&str, bool)> {
    if text.matches('`').count() % 2 != 0 {
        return vec![(text, false)];
    }
    text.split('`')
        .enumerate()
        .filter(|(_, run)| !run.is_empty())
        .map(|(i, run)| (run, i % 2 == 1))
        .collect()
}

/// Prose for Markdown: names in backticks become code spans where that is safe, everything
/// else is escaped as by [`markdown_text`].
pub fn markdown_inline(text: &str) -> String {
    code_runs(text)
        .into_iter()
        .map(|(run, code)| {
            let plain = |c: char| c.is_alphanumeric() || " -_.:=/()°%+".contains(c);
            if code && run.chars().all(plain) {
                format!("`{run}`")
            } else {
                markdown_text(run)
            }
        })
        .collect()
}

/// Prose for HTML: names in backticks become `<code>` elements, never literal backticks.
pub fn html_inline(text: &str) -> String {
    code_runs(text)
        .into_iter()
        .map(|(run, code)| {
            if code {
                format!("<code>{}</code>", html_text(run))
            } else {
                html_words(run)
            }
        })
        .collect()
}

/// Units a number keeps on its line (with or without an SI prefix).
const UNITS: [&str; 17] = [
    "V", "Hz", "dB", "dBc", "dBV", "dBm", "Ω", "A", "°C", "%", "s", "F", "S", "V/√Hz", "A/√Hz",
    "%-points", "W",
];

/// Whether `token` is a unit, bare or with one SI prefix (`mV`, `kΩ`, `nV/√Hz`, `°C`).
fn is_unit(token: &str) -> bool {
    if UNITS.contains(&token) {
        return true;
    }
    let mut chars = token.chars();
    matches!(
        chars.next(),
        Some('f' | 'p' | 'n' | 'µ' | 'u' | 'm' | 'k' | 'M' | 'G' | 'T')
    ) && UNITS.contains(&chars.as_str())
}

/// HTML text in which a number never parts from its unit nor a comparison sign from its
/// number: the space in `27 °C`, `1.2 mV`, `≤ −60 dBc` is a no-break space, so a narrow
/// table column wraps between quantities, never inside one.
pub fn html_words(text: &str) -> String {
    let chars: Vec<char> = text.chars().collect();
    let mut out = String::with_capacity(text.len() + 16);
    for (i, &c) in chars.iter().enumerate() {
        if c == ' ' && i > 0 {
            let before = chars[i - 1];
            let rest: String = chars[i + 1..].iter().collect();
            let token: String = rest
                .chars()
                .take_while(|c| !c.is_whitespace() && !",.;:()·…".contains(*c))
                .collect();
            let number_then_unit = before.is_ascii_digit() && is_unit(&token);
            let sign_then_number = "≤≥<>±≈~".contains(before)
                && rest
                    .chars()
                    .next()
                    .is_some_and(|n| n.is_ascii_digit() || n == '\u{2212}' || n == '-');
            if number_then_unit || sign_then_number {
                out.push_str("&nbsp;");
                continue;
            }
        }
        // A hyphen standing for a minus sign (`-60.00 dBc` in a verdict line) is set as one.
        let starts_word = i == 0 || chars[i - 1].is_whitespace() || "(/≤≥".contains(chars[i - 1]);
        if c == '-' && starts_word && chars.get(i + 1).is_some_and(char::is_ascii_digit) {
            out.push('\u{2212}');
            continue;
        }
        // A noise density's unit is one word: no break after its slash (`nV/√Hz`).
        if c == '/' && chars.get(i + 1) == Some(&'√') {
            out.push_str("/\u{2060}");
            continue;
        }
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            _ => out.push(c),
        }
    }
    out
}

/// Text that HTML shows as written.
pub fn html_text(text: &str) -> String {
    text.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

#[cfg(test)]
mod tests {
    use super::*;

    const AWKWARD: &str = "a|b*c<d>`e`_f";

    fn table() -> Table {
        let mut table = Table::new([("stage", false), ("gain (dB)", true), ("verdict", false)]);
        table.push(vec![AWKWARD.into(), "12.5".into(), Cell::fail("FAIL")]);
        table
    }

    /// GitHub-flavoured Markdown splits a row at every unescaped `|`; an escaped one stays in
    /// its cell (the GFM table extension's rule, common practice).
    #[test]
    fn an_awkward_name_is_one_markdown_cell() {
        let markdown = table().to_markdown();
        let row = markdown.lines().nth(2).unwrap();
        let mut cells = 0;
        let mut escaped = false;
        for c in row.chars() {
            match (c, escaped) {
                ('\\', false) => escaped = true,
                ('|', false) => cells += 1,
                _ => escaped = false,
            }
        }
        assert_eq!(cells - 1, 3, "{row}");
        assert!(row.contains(r"a\|b\*c&lt;d&gt;\`e\`\_f"), "{row}");
        assert!(row.ends_with("| **FAIL** |"), "{row}");
        assert!(markdown.lines().nth(1).unwrap() == "|---|---:|---|");
    }

    /// Names the library writes in backticks read as code in both documents; the HTML never
    /// shows a literal backtick for them.
    #[test]
    fn backticked_names_become_code_not_backticks() {
        let warning = "stage `bare-pair` at 27 °C: set `supply` to the design's bias";
        let html = html_inline(warning);
        assert!(!html.contains('`'), "{html}");
        assert!(html.contains("<code>bare-pair</code>") && html.contains("<code>supply</code>"));
        assert_eq!(markdown_inline(warning), warning);
        // An odd backtick (a name holding one) is plain, escaped text.
        assert_eq!(markdown_inline("a`b"), "a\\`b");
    }

    /// A quantity is one unbreakable run in HTML (common practice in typesetting: a number
    /// and its unit, or a sign and its number, never part at a line end).
    #[test]
    fn numbers_keep_their_units_in_html() {
        let html = html_words("−40 °C, fast / 27 °C, 1.2 mV and ≤ −60 dBc at 3 of 4 points");
        assert!(html.contains("−40&nbsp;°C"), "{html}");
        assert!(html.contains("27&nbsp;°C"), "{html}");
        assert!(html.contains("1.2&nbsp;mV"), "{html}");
        assert!(html.contains("≤&nbsp;−60&nbsp;dBc"), "{html}");
        // Words that are not units keep their ordinary spaces.
        assert!(html.contains("3 of 4 points"), "{html}");
        assert!(html.contains("fast / 27"), "{html}");
        assert_eq!(html_words("a<b & \"c\""), "a&lt;b &amp; &quot;c&quot;");
        // A minus is a minus sign, a hyphen in a name stays a hyphen.
        assert_eq!(
            html_words("-32.92 dBc, bare-pair 2-40"),
            "−32.92&nbsp;dBc, bare-pair 2-40"
        );
    }

    /// A symbol's subscript is set as one in HTML (common practice in datasheets: A_v, V_OS
    /// and g_m are written with their subscripts lowered), escaped like any text; Markdown
    /// keeps the underscore, which inside a word starts no emphasis there.
    #[test]
    fn symbols_take_their_subscripts_in_html() {
        let mut symbols = Table::new([("symbol", false)]);
        for text in ["A_v", "V_OS", "P1dB", "x_<y>", "_v", "v_"] {
            symbols.push(vec![Cell::symbol(text)]);
        }
        let html = symbols.to_html();
        assert!(html.contains("<td>A<sub>v</sub></td>"), "{html}");
        assert!(html.contains("<td>V<sub>OS</sub></td>"), "{html}");
        assert!(html.contains("<td>P1dB</td>"), "{html}");
        assert!(html.contains("<td>x<sub>&lt;y&gt;</sub></td>"), "{html}");
        // Nothing to lower, or nothing to lower it from: written as typed.
        assert!(
            html.contains("<td>_v</td>") && html.contains("<td>v_</td>"),
            "{html}"
        );
        let markdown = symbols.to_markdown();
        assert!(markdown.contains("| A_v |"), "{markdown}");
    }

    #[test]
    fn an_awkward_name_is_one_html_cell() {
        let html = table().to_html();
        assert!(html.contains("<td>a|b*c&lt;d&gt;`e`_f</td>"), "{html}");
        assert!(html.contains("<td class=\"num\">12.5</td>"));
        assert!(html.contains("<td class=\"fail\">FAIL</td>"));
        assert_eq!(html.matches("<td").count(), 3);
    }
}
