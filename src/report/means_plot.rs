//! The latent-mean plot of the invariance section: each construct's mean difference from the
//! reference group with its 95% interval, one row per construct and group, on a common axis
//! in the reference group's SDs. Central function: `latent_means_plot`. Inline SVG of our own
//! design; every name is escaped (`svg::escape`), since templates insert the figure unescaped.

use std::fmt::Write;

use super::svg::escape;

/// One row of the plot.
pub struct MeanRow<'a> {
    pub construct: &'a str,
    pub group: &'a str,
    pub diff: f64,
    pub ci: (f64, f64),
}

/// Round axis ticks covering [lo, hi] (steps of 1, 2 or 5 times a power of ten).
fn ticks(lo: f64, hi: f64) -> Vec<f64> {
    let raw = ((hi - lo) / 5.0).max(1e-9);
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 5.0, 10.0].iter().map(|m| m * mag).find(|s| *s >= raw).unwrap_or(10.0 * mag);
    let (first, last) = ((lo / step).ceil() as i64, (hi / step).floor() as i64);
    (first..=last).map(|k| (k as f64 * step * 1e10).round() / 1e10).collect()
}

/// The caption under the axis.
const AXIS_CAPTION: &str = "difference from the reference group (its SDs), 95% interval";

/// Points and interval whiskers against a zero line, labelled `construct (group)` on the left;
/// `None` when there is nothing finite to draw. Every text at least 11 px.
pub fn latent_means_plot(rows: &[MeanRow<'_>]) -> Option<String> {
    let rows: Vec<&MeanRow<'_>> =
        rows.iter().filter(|r| r.diff.is_finite() && r.ci.0.is_finite() && r.ci.1.is_finite()).collect();
    if rows.is_empty() {
        return None;
    }
    let label = |r: &MeanRow<'_>| format!("{} ({})", r.construct, r.group);
    let left = 12.0 + rows.iter().map(|r| label(r).chars().count()).max().unwrap_or(1) as f64 * 6.6;
    let (plot_w, row_h, top, bottom, right) = (260.0, 22.0, 10.0, 40.0, 14.0);
    // The axis caption starts at the left edge; the figure is at least as wide as it
    // (0.62 em per character, as the diagram's text boxes).
    let caption_w = 0.62 * 11.0 * AXIS_CAPTION.chars().count() as f64 + 8.0;
    let w = (left + plot_w + right).max(caption_w);
    let h = top + row_h * rows.len() as f64 + bottom;
    let lo = rows.iter().map(|r| r.ci.0).fold(0.0_f64, f64::min);
    let hi = rows.iter().map(|r| r.ci.1).fold(0.0_f64, f64::max);
    let pad = ((hi - lo) * 0.08).max(0.05);
    let (lo, hi) = (lo - pad, hi + pad);
    let px = |x: f64| left + (x - lo) / (hi - lo) * plot_w;
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" class="means" viewBox="0 0 {w:.0} {h:.0}" width="{w:.0}" height="{h:.0}" role="img" aria-label="construct mean differences from the reference group with 95% intervals">"#
    );
    let y_end = top + row_h * rows.len() as f64;
    for t in ticks(lo, hi) {
        let _ = write!(
            s,
            r##"<line x1="{x:.1}" y1="{top}" x2="{x:.1}" y2="{y_end:.1}" stroke="{c}" stroke-width="{sw}"/><text x="{x:.1}" y="{ty:.1}" text-anchor="middle" font-size="11" class="means-label">{t}</text>"##,
            x = px(t),
            c = if t == 0.0 { "#5d6670" } else { "#e4e0d6" },
            sw = if t == 0.0 { 1.0 } else { 0.6 },
            ty = y_end + 15.0
        );
    }
    for (k, r) in rows.iter().enumerate() {
        let y = top + row_h * (k as f64 + 0.5);
        let _ = write!(
            s,
            r##"<text x="{lx:.1}" y="{ty:.1}" text-anchor="end" font-size="11" class="means-label">{name}</text><line x1="{a:.1}" y1="{y:.1}" x2="{b:.1}" y2="{y:.1}" stroke="#1f5e66" stroke-width="1.6"/><line x1="{a:.1}" y1="{y1:.1}" x2="{a:.1}" y2="{y2:.1}" stroke="#1f5e66" stroke-width="1.2"/><line x1="{b:.1}" y1="{y1:.1}" x2="{b:.1}" y2="{y2:.1}" stroke="#1f5e66" stroke-width="1.2"/><circle cx="{cx:.1}" cy="{y:.1}" r="3.4" fill="#a84824"><title>{name}: {d:.2} [{l:.2}, {u:.2}]</title></circle>"##,
            lx = left - 6.0,
            ty = y + 4.0,
            name = escape(&label(r)),
            a = px(r.ci.0),
            b = px(r.ci.1),
            y1 = y - 4.0,
            y2 = y + 4.0,
            cx = px(r.diff),
            d = r.diff,
            l = r.ci.0,
            u = r.ci.1
        );
    }
    let _ = write!(
        s,
        r#"<text x="4" y="{:.1}" text-anchor="start" font-size="11" class="means-label">{AXIS_CAPTION}</text>"#,
        h - 6.0
    );
    s.push_str("</svg>");
    Some(s)
}

/// The plot of results.json's `invariance.latent_means`, if there are any.
pub fn from_results(invariance: &serde_json::Value) -> Option<String> {
    let means = invariance["latent_means"].as_array()?;
    let rows: Vec<MeanRow<'_>> = means
        .iter()
        .filter_map(|m| {
            Some(MeanRow {
                construct: m["construct"].as_str()?,
                group: m["group"].as_str()?,
                diff: m["diff"].as_f64()?,
                ci: (m["ci"][0].as_f64()?, m["ci"][1].as_f64()?),
            })
        })
        .collect();
    latent_means_plot(&rows)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rows_whiskers_zero_line_and_escaped_names() {
        let rows = [
            MeanRow { construct: "trust", group: "autumn", diff: -0.3, ci: (-0.45, -0.15) },
            MeanRow { construct: "<b>", group: "autumn", diff: 0.1, ci: (-0.05, 0.25) },
            MeanRow { construct: "nan", group: "x", diff: f64::NAN, ci: (0.0, 1.0) },
        ];
        let svg = latent_means_plot(&rows).unwrap();
        assert_eq!(svg.matches("<circle").count(), 2, "the non-finite row is left out");
        assert!(svg.contains("trust (autumn): -0.30 [-0.45, -0.15]"));
        assert!(svg.contains("&lt;b&gt;") && !svg.contains("<b>"));
        assert!(svg.contains(r##"stroke="#5d6670""##), "a zero line");
        assert!(!svg.contains("font-size=\"10"));
        assert!(latent_means_plot(&rows[2..]).is_none());
    }

    #[test]
    fn ticks_are_round() {
        assert_eq!(ticks(-0.52, 0.31), vec![-0.4, -0.2, 0.0, 0.2]);
    }
}
