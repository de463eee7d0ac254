//! Case-study reports: one self-contained HTML file (figures inlined as
//! base64 images, no external resources), written atomically: to a
//! temporary file in the destination directory, then renamed over the
//! destination, so a reader never sees half a report.

use std::path::Path;

use base64::Engine;

use super::html::escape;
use super::table::TableSpec;
use super::RenderError;
use crate::mime::MimeBundle;

/// Printed in every report.
pub const CAUTION: &str = "Baroc is an analysis tool, not a warning service. For forecasts and warnings, defer to your national meteorological service and local practice.";

/// One piece of a report, in reading order.
#[derive(Debug, Clone)]
pub enum ReportBlock {
    Heading(String),
    Paragraph(String),
    /// A rendered figure; the PNG is inlined (the SVG when there is no PNG),
    /// with the bundle's plain text as the image's alternative text.
    Figure {
        bundle: MimeBundle,
        caption: String,
    },
    Table(TableSpec),
    /// Preformatted text, e.g. the recipe that produced the report.
    Recipe(String),
    /// Where the results came from: input files, versions, times, settings.
    Provenance(Vec<(String, String)>),
}

#[derive(Debug, Clone, Default)]
pub struct Report {
    pub title: String,
    pub blocks: Vec<ReportBlock>,
}

impl Report {
    pub fn new(title: impl Into<String>) -> Self {
        Report {
            title: title.into(),
            blocks: Vec::new(),
        }
    }
    pub fn heading(mut self, text: impl Into<String>) -> Self {
        self.blocks.push(ReportBlock::Heading(text.into()));
        self
    }
    pub fn paragraph(mut self, text: impl Into<String>) -> Self {
        self.blocks.push(ReportBlock::Paragraph(text.into()));
        self
    }
    pub fn figure(mut self, bundle: MimeBundle, caption: impl Into<String>) -> Self {
        self.blocks.push(ReportBlock::Figure {
            bundle,
            caption: caption.into(),
        });
        self
    }
    pub fn table(mut self, table: TableSpec) -> Self {
        self.blocks.push(ReportBlock::Table(table));
        self
    }
    pub fn recipe(mut self, text: impl Into<String>) -> Self {
        self.blocks.push(ReportBlock::Recipe(text.into()));
        self
    }
    pub fn provenance(mut self, items: Vec<(String, String)>) -> Self {
        self.blocks.push(ReportBlock::Provenance(items));
        self
    }

    /// The whole report as one HTML document.
    pub fn to_html(&self) -> Result<String, RenderError> {
        let mut body = String::new();
        for block in &self.blocks {
            match block {
                ReportBlock::Heading(t) => body.push_str(&format!("<h2>{}</h2>\n", escape(t))),
                ReportBlock::Paragraph(t) => body.push_str(&format!("<p>{}</p>\n", escape(t))),
                ReportBlock::Figure { bundle, caption } => {
                    let alt = escape(bundle.plain_text());
                    let img = if let Some(png) = bundle.binary("image/png") {
                        format!(
                            "<img src=\"data:image/png;base64,{}\" alt=\"{alt}\">",
                            base64::engine::general_purpose::STANDARD.encode(png)
                        )
                    } else if let Some(svg) = bundle.text("image/svg+xml") {
                        format!(
                            "<img src=\"data:image/svg+xml;base64,{}\" alt=\"{alt}\">",
                            base64::engine::general_purpose::STANDARD.encode(svg.as_bytes())
                        )
                    } else {
                        format!("<pre>{}</pre>", escape(bundle.plain_text()))
                    };
                    body.push_str(&format!(
                        "<figure>{img}<figcaption>{}</figcaption></figure>\n",
                        escape(caption)
                    ));
                }
                ReportBlock::Table(t) => {
                    t.validate()?;
                    body.push_str(&t.to_html());
                }
                ReportBlock::Recipe(t) => {
                    body.push_str(&format!("<pre class=\"recipe\">{}</pre>\n", escape(t)))
                }
                ReportBlock::Provenance(items) => {
                    body.push_str(
                        "<table class=\"provenance\">\n<caption>Provenance</caption>\n<tbody>\n",
                    );
                    for (k, v) in items {
                        body.push_str(&format!(
                            "<tr><th>{}</th><td>{}</td></tr>\n",
                            escape(k),
                            escape(v)
                        ));
                    }
                    body.push_str("</tbody>\n</table>\n");
                }
            }
        }
        Ok(format!(
            "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<title>{title}</title>\n<style>\n{STYLE}</style>\n</head>\n<body>\n<h1>{title}</h1>\n<p class=\"caution\">{caution}</p>\n{body}<footer><p class=\"caution\">{caution}</p></footer>\n</body>\n</html>\n",
            title = escape(&self.title),
            caution = escape(CAUTION),
        ))
    }

    /// Write the report to `path` atomically.
    pub fn write(&self, path: &Path) -> Result<(), RenderError> {
        let html = self.to_html()?;
        write_atomically(path, html.as_bytes())
    }
}

const STYLE: &str = "body { font-family: sans-serif; max-width: 60em; margin: 2em auto; padding: 0 1em; color: #141414; line-height: 1.45; }
h1 { font-size: 1.6em; } h2 { font-size: 1.25em; margin-top: 1.6em; border-bottom: 1px solid #ccc; }
.caution { border-left: 4px solid #b35900; background: #fff6ec; padding: 0.5em 0.8em; }
figure { margin: 1em 0; } figure img { max-width: 100%; height: auto; border: 1px solid #ddd; }
figcaption { font-size: 0.92em; color: #444; }
table { border-collapse: collapse; margin: 1em 0; font-size: 0.95em; }
th, td { border: 1px solid #ccc; padding: 0.25em 0.6em; } th { background: #f2f2f2; text-align: left; }
td.number, td.missing { text-align: right; font-variant-numeric: tabular-nums; } td.missing { color: #888; }
.units { font-weight: normal; color: #555; }
caption { font-weight: bold; text-align: left; padding: 0.3em 0; }
pre.recipe { background: #f6f6f6; border: 1px solid #ddd; padding: 0.8em; overflow-x: auto; }
.table-note { font-size: 0.9em; color: #444; }
";

/// Write bytes to `path` atomically (see `crate::atomic`).
pub(crate) fn write_atomically(path: &Path, bytes: &[u8]) -> Result<(), RenderError> {
    crate::atomic::write(path, bytes).map_err(|source| RenderError::Io { path: path.display().to_string(), source })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::table::{Column, TableSpec};

    fn sample() -> Report {
        let mut png = MimeBundle::plain("Map <test> of thickness");
        png.insert_binary("image/png", vec![0x89, b'P', b'N', b'G']);
        let mut table = TableSpec::new("Points", vec![Column::new("speed", "m s-1")]);
        table.push_row(vec![12.5.into()]);
        Report::new("Case study: the Veltmar front & its jet (invented)")
            .heading("Thermal wind")
            .paragraph("The wind veers with height: warm advection <in the layer>.")
            .figure(png, "Thickness every 60 m")
            .table(table)
            .recipe("step 1: thickness of the 1000 to 500 hPa layer\n")
            .provenance(vec![
                ("input".into(), "synthetic/veltmar.nc".into()),
                ("version".into(), "0.1.0".into()),
            ])
    }

    #[test]
    fn report_is_self_contained_escaped_and_carries_the_caution() {
        let html = sample().to_html().unwrap();
        assert!(html.contains(CAUTION));
        assert!(html.contains("the Veltmar front &amp; its jet"));
        assert!(html.contains("warm advection &lt;in the layer&gt;."));
        assert!(html.contains("src=\"data:image/png;base64,iVBORw==\""));
        assert!(html.contains("alt=\"Map &lt;test&gt; of thickness\""));
        assert!(html.contains("<th>input</th><td>synthetic/veltmar.nc</td>"));
        assert!(html.contains(
            "<pre class=\"recipe\">step 1: thickness of the 1000 to 500 hPa layer\n</pre>"
        ));
        // Nothing is loaded from elsewhere.
        assert!(
            !html.contains("http://") && !html.contains("https://") && !html.contains("<script")
        );
    }

    #[test]
    fn report_is_written_atomically_and_replaces_an_old_one() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("case.html");
        std::fs::write(&path, "old").unwrap();
        sample().write(&path).unwrap();
        let written = std::fs::read_to_string(&path).unwrap();
        assert!(written.starts_with("<!DOCTYPE html>") && written.contains(CAUTION));
        // Only the report remains: the temporary file was renamed, not left behind.
        let names: Vec<_> = std::fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(names.len(), 1);
        let err = sample()
            .write(&dir.path().join("no-such-dir").join("x.html"))
            .unwrap_err()
            .to_string();
        assert!(err.contains("no-such-dir"), "{err}");
    }

    #[test]
    fn example_report_with_a_rendered_map_and_table() {
        use crate::render::map::{render_map, ContourLayer, MapSpec, VectorLayer};
        use crate::render::test_support::{check_dir, regional};
        use crate::render::FigureSize;
        let s = regional();
        let map = render_map(
            &MapSpec::new("Thickness and thermal wind (invented)", &s.lats, &s.lons)
                .contour_lines(
                    ContourLayer::new(s.thickness.view(), "1000-500 hPa thickness", "m")
                        .every(60.0),
                )
                .vectors(VectorLayer::barbs(s.u.view(), s.v.view(), "thermal wind")),
            &FigureSize::new(800, 520),
        )
        .unwrap();
        let mut table = TableSpec::new(
            "Thermal wind at two invented points",
            vec![
                Column::new("point", ""),
                Column::new("u_T", "m s-1").decimals(1),
            ],
        );
        table.push_row(vec!["Port Lessing".into(), 19.3.into()]);
        table.push_row(vec!["Hallow Bank".into(), f64::NAN.into()]);
        let report = Report::new("Veltmar front case study (invented)")
            .paragraph("A synthetic case for checking the report layout.")
            .figure(map, "Thickness every 60 m with thermal-wind barbs.")
            .table(table)
            .recipe("(recipe text as written by its author)\nthickness of the 1000 to 500 hPa layer\nmap of it with lines every 60 m\n")
            .provenance(vec![("data".into(), "synthetic fields, no observations".into())]);
        let path = check_dir().join("report.html");
        report.write(&path).unwrap();
        let html = std::fs::read_to_string(&path).unwrap();
        assert!(html.contains("data:image/png;base64,") && html.contains(CAUTION));
        assert!(
            html.matches(CAUTION).count() == 2,
            "at the top and at the foot"
        );
    }
}
