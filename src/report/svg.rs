//! Inline SVG figures of our own design (no external assets): the correlation heatmap.
//! Every text that comes from data or specs is escaped here, because templates insert these
//! strings unescaped (`|safe`).

use std::fmt::Write;

/// Escapes text for XML/HTML content and attribute values.
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

/// Our diverging palette: deep teal for -1, paper white for 0, rust for +1.
fn colour(r: f64) -> String {
    let r = r.clamp(-1.0, 1.0);
    let (end, t) = if r < 0.0 { ((31.0, 94.0, 102.0), -r) } else { ((168.0, 72.0, 36.0), r) };
    let paper = (250.0, 248.0, 243.0);
    let mix = |a: f64, b: f64| (a + (b - a) * t).round() as u8;
    format!("#{:02x}{:02x}{:02x}", mix(paper.0, end.0), mix(paper.1, end.1), mix(paper.2, end.2))
}

/// A correlation heatmap with items in the given order and thin rules between construct groups.
/// `groups[i]` is the construct of item i; a rule is drawn wherever it changes.
pub fn heatmap(items: &[String], groups: &[String], correlation: &[Vec<f64>]) -> String {
    let p = items.len();
    let cell = if p > 40 { 9.0 } else { 16.0 };
    let label = 8.0 + items.iter().map(|i| i.chars().count()).max().unwrap_or(1) as f64 * 6.5;
    let size = label + cell * p as f64;
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" class="heatmap" viewBox="0 0 {w:.0} {h:.0}" width="{w:.0}" height="{h:.0}" role="img" aria-label="item correlation heatmap">"#,
        w = size + 90.0,
        h = size
    );
    for (r, row) in correlation.iter().enumerate() {
        for (c, &v) in row.iter().enumerate() {
            let _ = write!(
                s,
                r#"<rect x="{:.1}" y="{:.1}" width="{cell}" height="{cell}" fill="{}"><title>{} × {}: {:.3}</title></rect>"#,
                label + c as f64 * cell,
                label + r as f64 * cell,
                colour(v),
                escape(&items[r]),
                escape(&items[c]),
                v
            );
        }
    }
    for (i, name) in items.iter().enumerate() {
        let y = label + (i as f64 + 0.72) * cell;
        let _ = write!(
            s,
            r#"<text x="{:.1}" y="{y:.1}" text-anchor="end" class="hm-label">{}</text>"#,
            label - 4.0,
            escape(name)
        );
        let x = label + (i as f64 + 0.72) * cell;
        let _ = write!(
            s,
            r#"<text transform="translate({x:.1},{:.1}) rotate(-90)" class="hm-label">{}</text>"#,
            label - 4.0,
            escape(name)
        );
    }
    for i in 1..p {
        if groups.get(i) != groups.get(i - 1) {
            let at = label + i as f64 * cell;
            let _ = write!(
                s,
                r##"<line x1="{at:.1}" y1="{label:.1}" x2="{at:.1}" y2="{size:.1}" stroke="#333" stroke-width="1"/>"##
            );
            let _ = write!(
                s,
                r##"<line x1="{label:.1}" y1="{at:.1}" x2="{size:.1}" y2="{at:.1}" stroke="#333" stroke-width="1"/>"##
            );
        }
    }
    let legend_x = size + 20.0;
    for k in 0..=10 {
        let v = 1.0 - k as f64 * 0.2;
        let _ = write!(
            s,
            r#"<rect x="{legend_x:.1}" y="{:.1}" width="14" height="{:.1}" fill="{}"/>"#,
            label + k as f64 * 12.0,
            12.0,
            colour(v)
        );
        if k % 5 == 0 {
            let _ = write!(
                s,
                r#"<text x="{:.1}" y="{:.1}" class="hm-label">{v:+.0}</text>"#,
                legend_x + 18.0,
                label + k as f64 * 12.0 + 10.0
            );
        }
    }
    s.push_str("</svg>");
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_are_escaped() {
        let items = vec!["<script>alert(1)</script>".to_string(), "b".to_string()];
        let svg = heatmap(&items, &["x".into(), "y".into()], &[vec![1.0, 0.3], vec![0.3, 1.0]]);
        assert!(!svg.contains("<script>"));
        assert!(svg.contains("&lt;script&gt;"));
    }

    #[test]
    fn palette_ends() {
        assert_eq!(colour(0.0), "#faf8f3");
        assert_eq!(colour(1.0), "#a84824");
        assert_eq!(colour(-1.0), "#1f5e66");
    }
}
