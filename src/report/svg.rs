//! Inline SVG figures of our own design (no external assets): the correlation heatmap.
//! Every text that comes from data or specs is escaped here, because templates insert these
//! strings unescaped (`|safe`).

use std::fmt::Write;

/// Escapes text for XML/HTML content and attribute values; invisible and direction-changing
/// characters are written out as `<U+XXXX>` (`report::visible`) first.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in super::visible(text).chars() {
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

/// One effect's estimate along a reliability grid: the estimate as a line with dots, its 95%
/// interval as a band, the zero line, and the tipping point marked by a dashed rule.
pub fn sensitivity_plot(
    xs: &[f64],
    est: &[Option<f64>],
    lo: &[Option<f64>],
    hi: &[Option<f64>],
    tipping: Option<f64>,
) -> String {
    let (w, h, left, right, top, bottom) = (300.0, 170.0, 44.0, 10.0, 10.0, 30.0);
    let values: Vec<f64> = est.iter().chain(lo).chain(hi).flatten().copied().chain([0.0]).collect();
    let (ymin, ymax) = values.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
    let pad = ((ymax - ymin) * 0.08).max(1e-6);
    let (ymin, ymax) = (ymin - pad, ymax + pad);
    let (xmin, xmax) = xs.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
    let xspan = (xmax - xmin).max(1e-9);
    let px = |x: f64| left + (x - xmin) / xspan * (w - left - right);
    let py = |y: f64| top + (ymax - y) / (ymax - ymin) * (h - top - bottom);
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" class="sens" viewBox="0 0 {w} {h}" width="{w}" height="{h}" role="img" aria-label="estimate against reliability">"#
    );
    let band: Vec<(f64, f64, f64)> =
        xs.iter().zip(lo.iter().zip(hi)).filter_map(|(&x, (l, u))| Some((x, (*l)?, (*u)?))).collect();
    if band.len() >= 2 {
        let mut d = String::new();
        for (i, (x, _, u)) in band.iter().enumerate() {
            let _ = write!(d, "{}{:.1},{:.1} ", if i == 0 { "M" } else { "L" }, px(*x), py(*u));
        }
        for (x, l, _) in band.iter().rev() {
            let _ = write!(d, "L{:.1},{:.1} ", px(*x), py(*l));
        }
        let _ = write!(s, r##"<path d="{d}Z" fill="#e9d9cd" stroke="none"/>"##);
    }
    let _ = write!(
        s,
        r##"<line x1="{left}" y1="{z:.1}" x2="{x2}" y2="{z:.1}" stroke="#5d6670" stroke-width="0.8"/>"##,
        z = py(0.0),
        x2 = w - right
    );
    if let Some(t) = tipping {
        let _ = write!(
            s,
            r##"<line x1="{x:.1}" y1="{top}" x2="{x:.1}" y2="{y2}" stroke="#1f5e66" stroke-width="1" stroke-dasharray="4 3"/><text x="{tx:.1}" y="{ty}" class="hm-label">tipping {t:.2}</text>"##,
            x = px(t),
            y2 = h - bottom,
            tx = px(t) + 3.0,
            ty = top + 10.0
        );
    }
    let pts: Vec<(f64, f64)> = xs.iter().zip(est).filter_map(|(&x, e)| Some((px(x), py((*e)?)))).collect();
    if pts.len() >= 2 {
        let d: Vec<String> = pts.iter().map(|(x, y)| format!("{x:.1},{y:.1}")).collect();
        let _ = write!(s, r##"<polyline points="{}" fill="none" stroke="#a84824" stroke-width="1.6"/>"##, d.join(" "));
    }
    for (x, y) in &pts {
        let _ = write!(s, r##"<circle cx="{x:.1}" cy="{y:.1}" r="2.6" fill="#a84824"/>"##);
    }
    for &x in xs {
        let _ = write!(
            s,
            r#"<text x="{:.1}" y="{:.1}" text-anchor="middle" class="hm-label">{x:.1}</text>"#,
            px(x),
            h - bottom + 14.0
        );
    }
    for y in [ymin + pad, 0.0, ymax - pad] {
        let _ = write!(
            s,
            r#"<text x="{:.1}" y="{:.1}" text-anchor="end" class="hm-label">{y:.2}</text>"#,
            left - 4.0,
            py(y) + 3.0
        );
    }
    let _ = write!(
        s,
        r#"<text x="{:.1}" y="{:.1}" text-anchor="middle" class="hm-label">assumed reliability</text>"#,
        (left + w - right) / 2.0,
        h - 2.0
    );
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
        assert_eq!(escape("ab\u{202E}cd"), "ab&lt;U+202E&gt;cd");
    }

    #[test]
    fn sensitivity_plot_has_band_line_and_tipping() {
        let xs = [0.5, 0.75, 1.0];
        let svg = sensitivity_plot(
            &xs,
            &[Some(0.0), Some(0.1), Some(0.2)],
            &[Some(-0.1), Some(0.0), Some(0.1)],
            &[Some(0.1), Some(0.2), Some(0.3)],
            Some(0.75),
        );
        assert_eq!(svg.matches("<circle").count(), 3);
        assert!(svg.contains("<path d=\"M") && svg.contains("tipping 0.75") && svg.contains("<polyline"));
    }

    #[test]
    fn palette_ends() {
        assert_eq!(colour(0.0), "#faf8f3");
        assert_eq!(colour(1.0), "#a84824");
        assert_eq!(colour(-1.0), "#1f5e66");
    }
}
