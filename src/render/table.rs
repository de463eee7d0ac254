//! Tables whose headers carry units: to HTML, aligned plain text, CSV
//! (RFC 4180) and JSON. Missing values stay missing in every form: the word
//! "missing" in HTML and text, an empty field in CSV, null in JSON.

use serde_json::{json, Value};

use super::html::escape;
use super::RenderError;
use crate::mime::MimeBundle;

/// A column: its name, its units (udunits-style string, may be empty) and
/// how many decimals to show in HTML and text (CSV and JSON keep full
/// precision).
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    pub name: String,
    pub units: String,
    pub decimals: Option<usize>,
}

impl Column {
    pub fn new(name: impl Into<String>, units: impl Into<String>) -> Self {
        Column {
            name: name.into(),
            units: units.into(),
            decimals: None,
        }
    }
    pub fn decimals(mut self, decimals: usize) -> Self {
        self.decimals = Some(decimals.min(12));
        self
    }
    /// "name (units)", or the name alone without units.
    pub fn header(&self) -> String {
        if self.units.trim().is_empty() {
            self.name.clone()
        } else {
            format!("{} ({})", self.name, self.units)
        }
    }
}

#[derive(Debug, Clone, PartialEq)]
pub enum Cell {
    /// A number; NaN counts as missing.
    Number(f64),
    Text(String),
    Missing,
}

impl From<f64> for Cell {
    fn from(v: f64) -> Self {
        Cell::Number(v)
    }
}

impl From<&str> for Cell {
    fn from(v: &str) -> Self {
        Cell::Text(v.to_string())
    }
}

impl From<String> for Cell {
    fn from(v: String) -> Self {
        Cell::Text(v)
    }
}

#[derive(Debug, Clone, PartialEq, Default)]
pub struct TableSpec {
    pub title: String,
    pub columns: Vec<Column>,
    pub rows: Vec<Vec<Cell>>,
    /// A note under the table (source, method).
    pub note: String,
}

impl Cell {
    fn is_missing(&self) -> bool {
        matches!(self, Cell::Missing) || matches!(self, Cell::Number(v) if !v.is_finite())
    }

    fn display(&self, decimals: Option<usize>) -> String {
        match self {
            _ if self.is_missing() => "missing".to_string(),
            Cell::Number(v) => match decimals {
                Some(d) => format!("{v:.d$}"),
                None => default_number(*v),
            },
            Cell::Text(t) => t.clone(),
            Cell::Missing => "missing".to_string(),
        }
    }
}

/// Default display: integers as integers, otherwise three significant
/// decimals at most for small values and two for larger ones.
fn default_number(v: f64) -> String {
    if v.fract() == 0.0 && v.abs() < 1e15 {
        return format!("{v:.0}");
    }
    let a = v.abs();
    let d = if a >= 100.0 {
        1
    } else if a >= 1.0 {
        2
    } else if a >= 0.01 {
        3
    } else {
        return format!("{v:.3e}");
    };
    format!("{v:.d$}")
}

impl TableSpec {
    pub fn new(title: impl Into<String>, columns: Vec<Column>) -> Self {
        TableSpec {
            title: title.into(),
            columns,
            rows: Vec::new(),
            note: String::new(),
        }
    }

    pub fn push_row(&mut self, row: Vec<Cell>) {
        self.rows.push(row);
    }

    /// Every row must have one cell per column.
    pub fn validate(&self) -> Result<(), RenderError> {
        if self.columns.is_empty() {
            return Err(RenderError::input(
                format!("table '{}'", self.title),
                "needs at least one column",
            ));
        }
        for (i, row) in self.rows.iter().enumerate() {
            if row.len() != self.columns.len() {
                return Err(RenderError::input(
                    format!("table '{}'", self.title),
                    format!(
                        "row {} has {} cells but there are {} columns",
                        i + 1,
                        row.len(),
                        self.columns.len()
                    ),
                ));
            }
        }
        Ok(())
    }

    fn numeric_column(&self, c: usize) -> bool {
        self.rows
            .iter()
            .all(|r| matches!(r[c], Cell::Number(_) | Cell::Missing))
    }

    pub fn to_html(&self) -> String {
        let mut out = String::from("<table class=\"baroc-table\">\n");
        if !self.title.is_empty() {
            out.push_str(&format!("<caption>{}</caption>\n", escape(&self.title)));
        }
        out.push_str("<thead><tr>");
        for c in &self.columns {
            if c.units.trim().is_empty() {
                out.push_str(&format!("<th>{}</th>", escape(&c.name)));
            } else {
                out.push_str(&format!(
                    "<th>{} <span class=\"units\">({})</span></th>",
                    escape(&c.name),
                    escape(&c.units)
                ));
            }
        }
        out.push_str("</tr></thead>\n<tbody>\n");
        for row in &self.rows {
            out.push_str("<tr>");
            for (i, cell) in row.iter().enumerate() {
                let decimals = self.columns.get(i).and_then(|c| c.decimals);
                let class = if cell.is_missing() {
                    " class=\"missing\""
                } else if matches!(cell, Cell::Number(_)) {
                    " class=\"number\""
                } else {
                    ""
                };
                out.push_str(&format!(
                    "<td{class}>{}</td>",
                    escape(&cell.display(decimals))
                ));
            }
            out.push_str("</tr>\n");
        }
        out.push_str("</tbody>\n</table>\n");
        if !self.note.is_empty() {
            out.push_str(&format!(
                "<p class=\"table-note\">{}</p>\n",
                escape(&self.note)
            ));
        }
        out
    }

    /// Columns aligned with spaces: numbers right, text left.
    pub fn to_text(&self) -> String {
        let headers: Vec<String> = self.columns.iter().map(|c| c.header()).collect();
        let cells: Vec<Vec<String>> = self
            .rows
            .iter()
            .map(|r| {
                r.iter()
                    .enumerate()
                    .map(|(i, c)| c.display(self.columns.get(i).and_then(|c| c.decimals)))
                    .collect()
            })
            .collect();
        let widths: Vec<usize> = (0..headers.len())
            .map(|i| {
                cells
                    .iter()
                    .map(|r| r.get(i).map_or(0, |s| s.chars().count()))
                    .chain([headers[i].chars().count()])
                    .max()
                    .unwrap_or(0)
            })
            .collect();
        let numeric: Vec<bool> = (0..headers.len())
            .map(|i| self.rows.iter().all(|r| r.len() == headers.len()) && self.numeric_column(i))
            .collect();
        let pad = |s: &str, w: usize, right: bool| {
            let n = w.saturating_sub(s.chars().count());
            if right {
                format!("{}{}", " ".repeat(n), s)
            } else {
                format!("{}{}", s, " ".repeat(n))
            }
        };
        let mut out = String::new();
        if !self.title.is_empty() {
            out.push_str(&self.title);
            out.push('\n');
        }
        let line = |row: &[String]| -> String {
            row.iter()
                .enumerate()
                .map(|(i, s)| pad(s, widths[i], numeric[i]))
                .collect::<Vec<_>>()
                .join("  ")
                .trim_end()
                .to_string()
        };
        out.push_str(&line(&headers));
        out.push('\n');
        out.push_str(
            &widths
                .iter()
                .map(|w| "-".repeat(*w))
                .collect::<Vec<_>>()
                .join("  "),
        );
        out.push('\n');
        for r in &cells {
            out.push_str(&line(r));
            out.push('\n');
        }
        if !self.note.is_empty() {
            out.push_str(&self.note);
            out.push('\n');
        }
        out
    }

    /// CSV per RFC 4180: CRLF line ends, fields with commas, quotes or line
    /// breaks quoted, quotes doubled. Header cells are "name (units)".
    pub fn to_csv(&self) -> String {
        fn field(s: &str) -> String {
            if s.contains([',', '"', '\n', '\r']) {
                format!("\"{}\"", s.replace('"', "\"\""))
            } else {
                s.to_string()
            }
        }
        let mut out = String::new();
        out.push_str(
            &self
                .columns
                .iter()
                .map(|c| field(&c.header()))
                .collect::<Vec<_>>()
                .join(","),
        );
        out.push_str("\r\n");
        for row in &self.rows {
            let cells: Vec<String> = row
                .iter()
                .map(|c| match c {
                    _ if c.is_missing() => String::new(),
                    Cell::Number(v) => format!("{v}"),
                    Cell::Text(t) => field(t),
                    Cell::Missing => String::new(),
                })
                .collect();
            out.push_str(&cells.join(","));
            out.push_str("\r\n");
        }
        out
    }

    pub fn to_json(&self) -> Value {
        let rows: Vec<Value> = self
            .rows
            .iter()
            .map(|r| {
                Value::Array(
                    r.iter()
                        .map(|c| match c {
                            _ if c.is_missing() => Value::Null,
                            Cell::Number(v) => json!(v),
                            Cell::Text(t) => json!(t),
                            Cell::Missing => Value::Null,
                        })
                        .collect(),
                )
            })
            .collect();
        json!({
            "title": self.title,
            "columns": self.columns.iter().map(|c| json!({"name": c.name, "units": c.units})).collect::<Vec<_>>(),
            "rows": rows,
            "note": self.note,
        })
    }

    /// HTML, aligned text, CSV and JSON in one bundle.
    pub fn to_bundle(&self) -> Result<MimeBundle, RenderError> {
        self.validate()?;
        let mut bundle = MimeBundle::plain(self.to_text());
        bundle.insert_text("text/html", self.to_html());
        bundle.insert_text("text/csv", self.to_csv());
        bundle.insert_text("application/json", self.to_json().to_string());
        Ok(bundle)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> TableSpec {
        let mut t = TableSpec::new(
            "Thermal wind at points (invented)",
            vec![
                Column::new("point", ""),
                Column::new("thickness", "m").decimals(0),
                Column::new("u_T", "m s-1").decimals(1),
            ],
        );
        t.push_row(vec!["Port Lessing".into(), 5460.4.into(), 19.32.into()]);
        t.push_row(vec![
            "Cape \"Orrin\", north".into(),
            5398.0.into(),
            Cell::Number(f64::NAN),
        ]);
        t.note = "u_T from the thickness gradient.".into();
        t
    }

    #[test]
    fn html_headers_carry_units_and_text_is_escaped() {
        let html = sample().to_html();
        assert!(html.contains("<th>thickness <span class=\"units\">(m)</span></th>"));
        assert!(html.contains("Cape &quot;Orrin&quot;, north"));
        assert!(html.contains("<td class=\"missing\">missing</td>"));
        assert!(html.contains("<td class=\"number\">19.3</td>"));
        roxmltree::Document::parse(&html.replace(
            "<p class=\"table-note\">u_T from the thickness gradient.</p>\n",
            "",
        ))
        .expect("well-formed");
    }

    #[test]
    fn text_columns_line_up() {
        let text = sample().to_text();
        let lines: Vec<&str> = text.lines().collect();
        // Widest first-column cell: `Cape "Orrin", north`, 19 characters.
        assert_eq!(
            lines[1],
            format!("{:<19}  thickness (m)  u_T (m s-1)", "point")
        );
        // Numbers are right-aligned under their headers.
        assert!(lines[3].ends_with("   19.3"));
        assert!(lines[4].ends_with("missing"));
        let col = lines[1].find("thickness (m)").unwrap() + "thickness (m)".len();
        assert_eq!(&lines[3][col - 4..col], "5460");
    }

    #[test]
    fn csv_quotes_per_rfc_4180_and_leaves_missing_empty() {
        let csv = sample().to_csv();
        assert_eq!(
            csv,
            "point,thickness (m),u_T (m s-1)\r\nPort Lessing,5460.4,19.32\r\n\"Cape \"\"Orrin\"\", north\",5398,\r\n"
        );
    }

    #[test]
    fn json_keeps_full_precision_and_null_for_missing() {
        let v = sample().to_json();
        assert_eq!(v["columns"][1]["units"], "m");
        assert_eq!(v["rows"][0][2], 19.32);
        assert!(v["rows"][1][2].is_null());
    }

    #[test]
    fn ragged_rows_are_rejected_with_the_row_number() {
        let mut t = sample();
        t.push_row(vec![1.0.into()]);
        let err = t.to_bundle().unwrap_err().to_string();
        assert!(
            err.contains("row 3 has 1 cells but there are 3 columns"),
            "{err}"
        );
    }
}
