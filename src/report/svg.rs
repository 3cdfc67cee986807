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

/// One curve of the sensitivity analysis: the refitted coefficient of one effect (unstandardized,
/// as the refits report it) against the assumed reliability of one construct.
pub struct SensitivityCurve<'a> {
    pub construct: &'a str,
    pub xs: &'a [f64],
    pub est: &'a [Option<f64>],
    pub lo: &'a [Option<f64>],
    pub hi: &'a [Option<f64>],
    pub tipping: Option<f64>,
    /// The reliability the spec declares, marked on the x axis.
    pub declared: Option<f64>,
}

/// About four to six round tick values covering `[lo, hi]` (steps of 1, 2 or 5 × 10^k).
fn ticks(lo: f64, hi: f64) -> Vec<f64> {
    let span = (hi - lo).max(1e-9);
    let raw = span / 5.0;
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 5.0, 10.0].iter().map(|m| m * mag).find(|s| *s >= raw).unwrap_or(10.0 * mag);
    let first = (lo / step).ceil() as i64;
    let last = (hi / step).floor() as i64;
    // Rounded, so 3 × 0.1 is written and compared as 0.3.
    (first..=last).map(|k| (k as f64 * step * 1e10).round() / 1e10).collect()
}

/// The estimate (line and points), its 95% interval (band), zero, the declared reliability and
/// the tipping point, with titled axes; every text at least 11 px.
pub fn sensitivity_plot(c: &SensitivityCurve) -> String {
    let (w, h, left, right, top, bottom) = (330.0, 200.0, 58.0, 12.0, 14.0, 44.0);
    let values: Vec<f64> = c.est.iter().chain(c.lo).chain(c.hi).flatten().copied().chain([0.0]).collect();
    let (ymin, ymax) = values.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
    let pad = ((ymax - ymin) * 0.08).max(1e-6);
    let (ymin, ymax) = (ymin - pad, ymax + pad);
    let (xmin, xmax) = c.xs.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
    let xspan = (xmax - xmin).max(1e-9);
    let px = |x: f64| left + (x - xmin) / xspan * (w - left - right);
    let py = |y: f64| top + (ymax - y) / (ymax - ymin) * (h - top - bottom);
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" class="sens" viewBox="0 0 {w} {h}" width="{w}" height="{h}" role="img" aria-label="coefficient against assumed reliability">"#
    );
    let band: Vec<(f64, f64, f64)> =
        c.xs.iter().zip(c.lo.iter().zip(c.hi)).filter_map(|(&x, (l, u))| Some((x, (*l)?, (*u)?))).collect();
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
    for y in ticks(ymin, ymax) {
        let _ = write!(
            s,
            r##"<line x1="{left}" y1="{yy:.1}" x2="{x2}" y2="{yy:.1}" stroke="{colour}" stroke-width="{sw}"/><text x="{tx:.1}" y="{ty:.1}" text-anchor="end" font-size="11" class="sens-label">{y:.2}</text>"##,
            yy = py(y),
            x2 = w - right,
            colour = if y == 0.0 { "#5d6670" } else { "#e4e0d6" },
            sw = if y == 0.0 { 0.9 } else { 0.6 },
            tx = left - 4.0,
            ty = py(y) + 4.0
        );
    }
    if let Some(d) = c.declared.filter(|d| *d >= xmin && *d <= xmax) {
        let _ = write!(
            s,
            r##"<line x1="{x:.1}" y1="{top}" x2="{x:.1}" y2="{y2}" stroke="#1d232a" stroke-width="1.2"/><text x="{tx:.1}" y="{ty}" font-size="11" class="sens-label">declared</text>"##,
            x = px(d),
            y2 = h - bottom,
            tx = px(d) + 3.0,
            ty = top + 10.0
        );
    }
    if let Some(t) = c.tipping {
        let _ = write!(
            s,
            r##"<line x1="{x:.1}" y1="{top}" x2="{x:.1}" y2="{y2}" stroke="#1f5e66" stroke-width="1" stroke-dasharray="4 3"/><text x="{tx:.1}" y="{ty}" font-size="11" class="sens-label">tipping {t:.2}</text>"##,
            x = px(t),
            y2 = h - bottom,
            tx = px(t) + 3.0,
            ty = top + 24.0
        );
    }
    let pts: Vec<(f64, f64)> = c.xs.iter().zip(c.est).filter_map(|(&x, e)| Some((px(x), py((*e)?)))).collect();
    if pts.len() >= 2 {
        let d: Vec<String> = pts.iter().map(|(x, y)| format!("{x:.1},{y:.1}")).collect();
        let _ = write!(s, r##"<polyline points="{}" fill="none" stroke="#a84824" stroke-width="1.6"/>"##, d.join(" "));
    }
    for (x, y) in &pts {
        let _ = write!(s, r##"<circle cx="{x:.1}" cy="{y:.1}" r="2.6" fill="#a84824"/>"##);
    }
    for &x in c.xs {
        let _ = write!(
            s,
            r#"<text x="{:.1}" y="{:.1}" text-anchor="middle" font-size="11" class="sens-label">{x:.1}</text>"#,
            px(x),
            h - bottom + 15.0
        );
    }
    let _ = write!(
        s,
        r#"<text x="{:.1}" y="{:.1}" text-anchor="middle" font-size="11" class="sens-label">assumed reliability of {}</text>"#,
        (left + w - right) / 2.0,
        h - 6.0,
        escape(c.construct)
    );
    let _ = write!(
        s,
        r#"<text transform="translate(13 {:.1}) rotate(-90)" text-anchor="middle" font-size="11" class="sens-label">coefficient (unstandardized)</text>"#,
        (top + h - bottom) / 2.0
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
    fn sensitivity_plot_has_band_line_tipping_declared_and_titles() {
        let xs = [0.5, 0.75, 1.0];
        let svg = sensitivity_plot(&SensitivityCurve {
            construct: "fare",
            xs: &xs,
            est: &[Some(0.0), Some(0.1), Some(0.2)],
            lo: &[Some(-0.1), Some(0.0), Some(0.1)],
            hi: &[Some(0.1), Some(0.2), Some(0.3)],
            tipping: Some(0.75),
            declared: Some(0.5),
        });
        assert_eq!(svg.matches("<circle").count(), 3);
        assert!(svg.contains("<path d=\"M") && svg.contains("tipping 0.75") && svg.contains("<polyline"));
        assert!(svg.contains(">declared</text>") && svg.contains("assumed reliability of fare"));
        assert!(svg.contains("coefficient (unstandardized)"));
        assert!(svg.matches("text-anchor=\"end\"").count() >= 4, "at least four y ticks");
        assert!(!svg.contains("font-size=\"10"), "type at least 11 px");
    }

    #[test]
    fn ticks_are_round() {
        assert_eq!(ticks(-0.12, 0.31), vec![-0.1, 0.0, 0.1, 0.2, 0.3]);
        assert_eq!(ticks(0.0, 1.0), vec![0.0, 0.2, 0.4, 0.6, 0.8, 1.0]);
    }

    #[test]
    fn palette_ends() {
        assert_eq!(colour(0.0), "#faf8f3");
        assert_eq!(colour(1.0), "#a84824");
        assert_eq!(colour(-1.0), "#1f5e66");
    }
}
