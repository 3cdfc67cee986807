//! The path diagram of the structure among constructs, as inline SVG of our own design:
//! constructs as ellipses in tier columns (left to right), their kept items as small boxes to
//! the left of each, directed edges as arrows labelled with standardized coefficients,
//! undirected edges (the data cannot orient them) as plain lines. Central function: `diagram`.

use std::fmt::Write;

use super::svg::escape;
use construe_stats::search::EdgeKind;

pub struct Node {
    pub name: String,
    /// Column (tier) index; constructs in no tier go to a last column.
    pub column: usize,
    pub items: Vec<String>,
}

pub struct Link {
    pub from: usize,
    pub to: usize,
    pub kind: EdgeKind,
    pub label: Option<String>,
}

const COLUMN_WIDTH: f64 = 270.0;
const ITEM_H: f64 = 15.0;
const RX: f64 = 62.0;
const RY: f64 = 24.0;

/// Where each node's ellipse centre lies.
fn layout(nodes: &[Node]) -> (Vec<(f64, f64)>, f64, f64) {
    let columns = nodes.iter().map(|n| n.column).max().map_or(0, |c| c + 1);
    let mut y_next = vec![30.0; columns];
    let mut centres = Vec::with_capacity(nodes.len());
    for n in nodes {
        let block = (n.items.len() as f64 * ITEM_H).max(2.0 * RY) + 34.0;
        let y = y_next[n.column] + block / 2.0;
        y_next[n.column] += block;
        centres.push((40.0 + n.column as f64 * COLUMN_WIDTH + 90.0 + RX, y));
    }
    let height = y_next.iter().copied().fold(0.0, f64::max) + 20.0;
    (centres, columns as f64 * COLUMN_WIDTH + 60.0, height)
}

/// The point where the segment from the centre of an ellipse towards `(tx, ty)` leaves it.
fn boundary((cx, cy): (f64, f64), (tx, ty): (f64, f64)) -> (f64, f64) {
    let (dx, dy) = (tx - cx, ty - cy);
    let t = 1.0 / ((dx / RX).powi(2) + (dy / RY).powi(2)).sqrt().max(1e-9);
    (cx + dx * t, cy + dy * t)
}

pub fn diagram(nodes: &[Node], links: &[Link], dropped: &[String]) -> String {
    let (centres, width, height) = layout(nodes);
    // Edges that skip a column, or join two nodes of one column, bow upwards (or leftwards)
    // so they do not run through the constructs in between.
    let top_margin =
        links.iter().filter(|l| bows(nodes, l)).map(|l| bow_offset(nodes, l) / 2.0 + 12.0).fold(0.0, f64::max);
    let centres: Vec<(f64, f64)> = centres.into_iter().map(|(x, y)| (x, y + top_margin)).collect();
    let height = height + top_margin + if dropped.is_empty() { 0.0 } else { 30.0 };
    let mut s = String::new();
    let _ = write!(
        s,
        r##"<svg xmlns="http://www.w3.org/2000/svg" class="diagram" viewBox="0 0 {width:.0} {height:.0}" width="{width:.0}" height="{height:.0}" role="img" aria-label="path diagram"><defs><marker id="arrowhead" viewBox="0 0 10 10" refX="9" refY="5" markerWidth="7" markerHeight="7" orient="auto-start-reverse"><path d="M0,0 L10,5 L0,10 z" fill="#1d232a"/></marker></defs>"##
    );
    let mut labels = String::new();
    for l in links {
        let (a, b) = (centres[l.from], centres[l.to]);
        let marker = if l.kind.is_directed() { r#" marker-end="url(#arrowhead)""# } else { "" };
        let colour = if l.kind.is_directed() { "#1d232a" } else { "#a84824" };
        let (mx, my) = if bows(nodes, l) {
            let control = ((a.0 + b.0) / 2.0, a.1.min(b.1) - bow_offset(nodes, l));
            let (x1, y1) = boundary(a, control);
            let (x2, y2) = boundary(b, control);
            let _ = write!(
                s,
                r#"<path d="M{x1:.1},{y1:.1} Q{:.1},{:.1} {x2:.1},{y2:.1}" fill="none" stroke="{colour}" stroke-width="1.6"{marker}/>"#,
                control.0, control.1
            );
            ((x1 + 2.0 * control.0 + x2) / 4.0, (y1 + 2.0 * control.1 + y2) / 4.0 - 4.0)
        } else {
            let (x1, y1) = boundary(a, b);
            let (x2, y2) = boundary(b, a);
            let _ = write!(
                s,
                r#"<line x1="{x1:.1}" y1="{y1:.1}" x2="{x2:.1}" y2="{y2:.1}" stroke="{colour}" stroke-width="1.6"{marker}/>"#
            );
            // Near the source: the gap before the target's item boxes is narrow.
            let len = ((x2 - x1).powi(2) + (y2 - y1).powi(2)).sqrt().max(1.0);
            let t = (26.0 / len).min(0.5);
            (x1 + (x2 - x1) * t, y1 + (y2 - y1) * t - 5.0)
        };
        if let Some(label) = &l.label {
            let _ = write!(
                labels,
                r##"<text x="{mx:.1}" y="{my:.1}" text-anchor="middle" class="dg-coef" paint-order="stroke" stroke="#fbfaf6" stroke-width="3">{}</text>"##,
                escape(label)
            );
        }
    }
    for (i, n) in nodes.iter().enumerate() {
        let (cx, cy) = centres[i];
        let top = cy - n.items.len() as f64 * ITEM_H / 2.0;
        for (k, item) in n.items.iter().enumerate() {
            let y = top + k as f64 * ITEM_H;
            let x = cx - RX - 96.0;
            let _ = write!(
                s,
                r##"<line x1="{lx:.1}" y1="{ly:.1}" x2="{ex:.1}" y2="{cy:.1}" stroke="#b9b4a8" stroke-width="0.7"/><rect x="{x:.1}" y="{y:.1}" width="58" height="{h:.1}" fill="#fff" stroke="#8a8f96" stroke-width="0.8"/><text x="{tx:.1}" y="{ty:.1}" class="dg-item">{}</text>"##,
                escape(item),
                h = ITEM_H - 3.0,
                tx = x + 4.0,
                ty = y + ITEM_H - 6.0,
                lx = x + 58.0,
                ly = y + (ITEM_H - 3.0) / 2.0,
                ex = cx - RX,
            );
        }
        let _ = write!(
            s,
            r##"<ellipse cx="{cx:.1}" cy="{cy:.1}" rx="{RX}" ry="{RY}" fill="#f3efe4" stroke="#1d232a" stroke-width="1.4"/><text x="{cx:.1}" y="{ty:.1}" text-anchor="middle" class="dg-latent">{}</text>"##,
            escape(&n.name),
            ty = cy + 4.0
        );
    }
    s.push_str(&labels);
    if !dropped.is_empty() {
        let list: Vec<String> = dropped.iter().map(|d| escape(d)).collect();
        let _ = write!(
            s,
            r#"<text x="20" y="{:.1}" class="dg-item">dropped items: {}</text>"#,
            height - 14.0,
            list.join(", ")
        );
    }
    s.push_str("</svg>");
    s
}

/// How far above the higher end a bowed link's control point lies (its apex is half that).
fn bow_offset(nodes: &[Node], l: &Link) -> f64 {
    let span = nodes[l.from].column.abs_diff(nodes[l.to].column) as f64;
    2.0 * RY + 40.0 + 30.0 * span
}

/// Whether a link must curve around the constructs between its ends.
fn bows(nodes: &[Node], l: &Link) -> bool {
    nodes[l.from].column.abs_diff(nodes[l.to].column) != 1
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn draws_every_node_and_edge_and_escapes() {
        let nodes = vec![
            Node { name: "a<b".into(), column: 0, items: vec!["x1".into(), "x2".into()] },
            Node { name: "c".into(), column: 1, items: vec!["y1".into()] },
        ];
        let links = vec![
            Link { from: 0, to: 1, kind: EdgeKind::Directed, label: Some("0.42".into()) },
            Link { from: 1, to: 0, kind: EdgeKind::Undirected, label: None },
        ];
        let svg = diagram(&nodes, &links, &["z<1>".into()]);
        assert_eq!(svg.matches("<ellipse").count(), 2);
        assert_eq!(svg.matches("<rect").count(), 3);
        assert_eq!(svg.matches("marker-end").count(), 1);
        assert!(svg.contains("a&lt;b") && svg.contains("z&lt;1&gt;") && !svg.contains("a<b"));
    }

    #[test]
    fn boundary_point_lies_on_the_ellipse() {
        let (x, y) = boundary((0.0, 0.0), (100.0, 50.0));
        assert!(((x / RX).powi(2) + (y / RY).powi(2) - 1.0).abs() < 1e-12);
    }
}
