//! The review dossier as one self-contained HTML page: inline CSS with a print layout, charts
//! as inline SVG, no script and no external reference, so it opens offline and prints as is.
//!
//! It renders [`Dossier`] and nothing else: every number on the page is a field of that struct
//! (what `--json` prints), formatted here to six significant digits. Every text that comes
//! from the ledger is escaped ([`escape`]). Sections are in `sections`, charts in `charts`.

mod charts;
mod sections;

use assize_verify::dossier::Dossier;
use assize_verify::records::RunKind;

const STYLE: &str = include_str!("page.css");

/// The page, or why a chart could not be drawn.
pub fn dossier_page(d: &Dossier) -> Result<String, String> {
    let title = format!("Review dossier: {} {}", kind_word(d.run.kind), d.run.id);
    let mut page = String::with_capacity(64 * 1024);
    page.push_str("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n");
    page.push_str("<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n");
    page.push_str(&format!("<title>{}</title>\n", escape(&title)));
    page.push_str(&format!("<style>\n{STYLE}</style>\n</head>\n<body>\n"));
    page.push_str(&format!("<h1>{}</h1>\n", escape(&title)));
    page.push_str(&sections::header(d));
    page.push_str(&sections::findings(d));
    page.push_str(&sections::result(d));
    page.push_str(&sections::budget(d, charts::budget_bars(d)?));
    page.push_str(&sections::history(
        d,
        charts::control_chart(&d.control_chart)?,
        charts::replicate_scatter(&d.replicate_chart)?,
    ));
    page.push_str(&sections::audit_trail(d));
    page.push_str(&sections::sign_off(d));
    page.push_str(&format!(
        "<footer>Gathered by assize {} from {} at entry {}. This page is a view of the \
         ledger; the ledger is the record.</footer>\n</body>\n</html>\n",
        env!("CARGO_PKG_VERSION"),
        escape(&d.ledger_file),
        d.head_seq
    ));
    Ok(page)
}

/// `standardization` or `assay`.
pub fn kind_word(kind: RunKind) -> &'static str {
    match kind {
        RunKind::Standardization => "standardization",
        RunKind::Assay => "assay",
    }
}

/// Text made safe for HTML element content and quoted attribute values.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// Significant digits every number on the page is shown with.
pub const SIGNIFICANT_DIGITS: i32 = 6;

/// A number with [`SIGNIFICANT_DIGITS`] significant digits (every integer digit of a larger
/// number), in plain decimals (scientific notation only outside 10⁻⁹ … 10¹²), without
/// trailing zeros.
pub fn number(value: f64) -> String {
    if !value.is_finite() {
        return "—".into();
    }
    if value == 0.0 {
        return "0".into();
    }
    let magnitude = value.abs().log10().floor() as i32;
    if !(-9..12).contains(&magnitude) {
        return format!("{:.*e}", (SIGNIFICANT_DIGITS - 1) as usize, value);
    }
    let decimals = (SIGNIFICANT_DIGITS - 1 - magnitude).max(0) as usize;
    let text = format!("{value:.decimals$}");
    if text.contains('.') {
        text.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        text
    }
}

/// An optional number, or a dash.
pub fn maybe(value: Option<f64>) -> String {
    value.map_or("—".into(), number)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_markup_and_quotes() {
        assert_eq!(
            escape(r#"<b a="1">Tom & 'Jo'</b>"#),
            "&lt;b a=&quot;1&quot;&gt;Tom &amp; &#39;Jo&#39;&lt;/b&gt;"
        );
    }

    #[test]
    fn numbers_keep_six_significant_digits() {
        assert_eq!(number(0.0200012345), "0.0200012");
        assert_eq!(number(30.4412), "30.4412");
        assert_eq!(number(30.44), "30.44");
        assert_eq!(number(-1234567.8), "-1234568");
        assert_eq!(number(0.000001234564), "0.00000123456");
        assert_eq!(number(2.0), "2");
        assert_eq!(number(0.0), "0");
        assert_eq!(number(1.5e-12), "1.50000e-12");
        assert_eq!(number(f64::NAN), "—");
    }
}
