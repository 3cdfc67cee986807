//! The path diagram of the structure among constructs, as inline SVG of our own design, laid
//! out by a layered (Sugiyama-style) algorithm (Sugiyama, Tagawa & Toda 1981): layers from the
//! tiers and the directed edges (longest path), long edges split by dummy slots, crossings
//! reduced by barycentre sweeps, then rows stacked top to bottom. Each construct is an ellipse
//! with its kept items in a column of boxes beside it, arrows construct → item (reflective
//! indicators). Structural edges leave an ellipse at the bottom and enter the next at the top,
//! never crossing a block; line width shows the bootstrap share, dashes a fragile edge; a
//! legend explains every mark. Labels are placed greedily where they touch no other text,
//! box or edge. Central function: `diagram`; `layout_problems` checks any emitted diagram's
//! geometry (used by the tests).

use std::fmt::Write;

use super::svg::escape;
use construe_stats::search::EdgeKind;

pub struct Node {
    pub name: String,
    /// Tier index; constructs in no tier are placed by their edges alone.
    pub column: usize,
    pub items: Vec<String>,
}

pub struct Link {
    pub from: usize,
    pub to: usize,
    pub kind: EdgeKind,
    /// Standardized coefficient, when the structural model fitted the edge.
    pub coefficient: Option<f64>,
    /// Share of bootstrap replicates with the edge as drawn, when resampling ran.
    pub support: Option<f64>,
    /// The edge's marks are contested by conflicting triples (drawn dotted, in `CONFLICT`).
    pub conflict: bool,
}

/// Below this bootstrap share an edge is drawn dashed (fragile); the findings use the same.
const FRAGILE: f64 = crate::app::findings::FRAGILE;

const RX: f64 = 60.0;
const RY: f64 = 22.0;
/// Every text is at least this size (SVG units = CSS px at scale 1).
pub const MIN_FONT: f64 = 11.0;
const ITEM_FONT: f64 = 11.0;
const NAME_FONT: f64 = 12.0;
const LABEL_FONT: f64 = 11.0;
const ITEM_H: f64 = 17.0;
const ITEM_GAP: f64 = 3.0;
/// Space between an ellipse and its item boxes (the reflective arrows).
const ITEM_OFFSET: f64 = 34.0;
const BLOCK_GAP: f64 = 34.0;
const DUMMY_W: f64 = 26.0;
/// Vertical space between two rows, where edges bend and labels sit.
const BAND: f64 = 74.0;
const MARGIN: f64 = 16.0;
const INK: &str = "#1d232a";
const ACCENT: &str = "#a84824";
/// Colour of an edge whose marks conflicting triples contest.
const CONFLICT: &str = "#6b3fa0";

/// Width of a text of `chars` characters at `size`: a conservative 0.62 em per character (wider
/// than the digits and lower-case letters of the fonts the stylesheet names).
pub fn text_width(chars: usize, size: f64) -> f64 {
    chars as f64 * size * 0.62
}

/// An axis-aligned box.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Rect {
    pub x0: f64,
    pub y0: f64,
    pub x1: f64,
    pub y1: f64,
}

impl Rect {
    fn overlaps(&self, o: &Rect) -> bool {
        self.x0 < o.x1 && o.x0 < self.x1 && self.y0 < o.y1 && o.y0 < self.y1
    }

    fn grow(&self, by: f64) -> Rect {
        Rect { x0: self.x0 - by, y0: self.y0 - by, x1: self.x1 + by, y1: self.y1 + by }
    }

    /// Whether the segment from `a` to `b` passes through the box (Liang–Barsky clipping).
    fn hit_by(&self, a: (f64, f64), b: (f64, f64)) -> bool {
        let (dx, dy) = (b.0 - a.0, b.1 - a.1);
        let (mut t0, mut t1) = (0.0f64, 1.0f64);
        for (p, q) in [(-dx, a.0 - self.x0), (dx, self.x1 - a.0), (-dy, a.1 - self.y0), (dy, self.y1 - a.1)] {
            if p == 0.0 {
                if q < 0.0 {
                    return false;
                }
            } else {
                let r = q / p;
                if p < 0.0 {
                    t0 = t0.max(r);
                } else {
                    t1 = t1.min(r);
                }
            }
        }
        t0 < t1
    }
}

/// A text box from its anchor point, as drawn with `dominant-baseline` left at the alphabetic
/// baseline: it spans 0.8 em above and 0.25 em below the baseline.
fn text_box(x: f64, y: f64, chars: usize, size: f64, anchor: &str) -> Rect {
    let w = text_width(chars, size);
    let x0 = match anchor {
        "middle" => x - w / 2.0,
        "end" => x - w,
        _ => x,
    };
    Rect { x0, y0: y - 0.8 * size, x1: x0 + w, y1: y + 0.25 * size }
}

/// One slot of a layer: a construct or a dummy on a long edge.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Slot {
    Node(usize),
    /// The `k`-th dummy of link `l`.
    Dummy(usize),
}

/// Layers: a construct's tier is a floor, and a directed edge's head lies below its tail
/// (longest path). Constructs in no tier start after the tiers only if an edge says so.
fn layers(nodes: &[Node], links: &[Link]) -> Vec<usize> {
    let tiered = nodes.iter().any(|n| n.column > 0);
    let mut layer: Vec<usize> = nodes.iter().map(|n| if tiered { n.column } else { 0 }).collect();
    // At most `nodes.len()` passes: the directed edges of a search result are acyclic; the cap
    // keeps a cyclic input from looping.
    for _ in 0..nodes.len() {
        let mut changed = false;
        // an FCI edge `from o-> to` says `to` does not cause `from`: laid out as directed
        for l in links.iter().filter(|l| l.kind.is_directed() || l.kind == EdgeKind::PartiallyDirected) {
            if layer[l.to] <= layer[l.from] {
                layer[l.to] = layer[l.from] + 1;
                changed = true;
            }
        }
        if !changed {
            break;
        }
    }
    // Close gaps: empty layers between used ones are dropped.
    let mut used: Vec<usize> = layer.clone();
    used.sort_unstable();
    used.dedup();
    layer.iter().map(|l| used.iter().position(|u| u == l).unwrap_or(0)).collect()
}

/// A link's ends ordered top to bottom.
fn ends(layer: &[usize], l: &Link) -> (usize, usize) {
    if layer[l.from] <= layer[l.to] { (l.from, l.to) } else { (l.to, l.from) }
}

struct Block {
    /// Width and height of a construct's block (ellipse plus items).
    w: f64,
    h: f64,
    item_w: f64,
}

fn block(n: &Node) -> Block {
    let longest = n.items.iter().map(|i| i.chars().count()).max().unwrap_or(0);
    let item_w = text_width(longest, ITEM_FONT) + 10.0;
    let name_w = text_width(n.name.chars().count(), NAME_FONT);
    let rx = RX.max(name_w / 2.0 + 10.0);
    let items_h = n.items.len() as f64 * (ITEM_H + ITEM_GAP) - ITEM_GAP;
    let w = if n.items.is_empty() { 2.0 * rx } else { 2.0 * rx + ITEM_OFFSET + item_w };
    Block { w, h: items_h.max(2.0 * RY), item_w }
}

/// The horizontal radius of a construct's ellipse (wide enough for its name).
fn rx_of(n: &Node) -> f64 {
    RX.max(text_width(n.name.chars().count(), NAME_FONT) / 2.0 + 10.0)
}

/// Orders each layer's slots by the barycentre of their neighbours in the layer above, then
/// below, a few sweeps (Sugiyama et al. 1981, barycentre heuristic).
fn order(rows: &mut [Vec<Slot>], adjacency: &[(Slot, Slot)]) {
    let position = |rows: &[Vec<Slot>], s: Slot| -> Option<f64> {
        rows.iter().find_map(|r| r.iter().position(|x| *x == s).map(|p| p as f64))
    };
    for sweep in 0..6 {
        let down = sweep % 2 == 0;
        let range: Vec<usize> =
            if down { (1..rows.len()).collect() } else { (0..rows.len().saturating_sub(1)).rev().collect() };
        for r in range {
            let neighbour_row = if down { r - 1 } else { r + 1 };
            let keyed: Vec<(f64, Slot)> = rows[r]
                .iter()
                .enumerate()
                .map(|(i, s)| {
                    let near: Vec<f64> = adjacency
                        .iter()
                        .filter_map(|(a, b)| {
                            let other = if a == s {
                                b
                            } else if b == s {
                                a
                            } else {
                                return None;
                            };
                            rows[neighbour_row].contains(other).then(|| position(rows, *other)).flatten()
                        })
                        .collect();
                    let key = if near.is_empty() { i as f64 } else { near.iter().sum::<f64>() / near.len() as f64 };
                    (key, *s)
                })
                .collect();
            let mut keyed = keyed;
            // Stable: ties keep their order, so the layout is deterministic.
            keyed.sort_by(|a, b| a.0.total_cmp(&b.0));
            rows[r] = keyed.into_iter().map(|(_, s)| s).collect();
        }
    }
}

/// A routed edge: its path as points (a polyline whose bends are smoothed when drawn).
struct Route {
    link: usize,
    points: Vec<(f64, f64)>,
}

pub fn diagram(nodes: &[Node], links: &[Link], dropped: &[String]) -> String {
    let layer = layers(nodes, links);
    let n_layers = layer.iter().max().map_or(0, |m| m + 1);
    // Rows of slots, dummies for every layer a link skips.
    let mut rows: Vec<Vec<Slot>> = vec![Vec::new(); n_layers];
    for (i, _) in nodes.iter().enumerate() {
        rows[layer[i]].push(Slot::Node(i));
    }
    let mut adjacency: Vec<(Slot, Slot)> = Vec::new();
    let mut dummies: Vec<Vec<(usize, Slot)>> = vec![Vec::new(); links.len()];
    for (k, l) in links.iter().enumerate() {
        let (top, bottom) = ends(&layer, l);
        let mut prev = Slot::Node(top);
        for (r, row) in rows.iter_mut().enumerate().take(layer[bottom]).skip(layer[top] + 1) {
            let d = Slot::Dummy(k * 1000 + r);
            row.push(d);
            dummies[k].push((r, d));
            adjacency.push((prev, d));
            prev = d;
        }
        adjacency.push((prev, Slot::Node(bottom)));
    }
    order(&mut rows, &adjacency);

    // Coordinates: rows top to bottom, slots left to right, each row centred.
    let blocks: Vec<Block> = nodes.iter().map(block).collect();
    let slot_w = |s: &Slot| match s {
        Slot::Node(i) => blocks[*i].w,
        Slot::Dummy(_) => DUMMY_W,
    };
    let row_w: Vec<f64> =
        rows.iter().map(|r| r.iter().map(slot_w).sum::<f64>() + BLOCK_GAP * r.len().saturating_sub(1) as f64).collect();
    let row_h: Vec<f64> = rows
        .iter()
        .map(|r| {
            r.iter()
                .map(|s| match s {
                    Slot::Node(i) => blocks[*i].h,
                    Slot::Dummy(_) => 0.0,
                })
                .fold(2.0 * RY, f64::max)
        })
        .collect();
    let content_w = row_w.iter().copied().fold(0.0, f64::max);
    let mut slot_x: std::collections::HashMap<SlotKey, f64> = std::collections::HashMap::new();
    let mut row_y = Vec::with_capacity(n_layers);
    let mut y = MARGIN + 4.0;
    for (r, row) in rows.iter().enumerate() {
        row_y.push(y);
        let mut x = MARGIN + (content_w - row_w[r]) / 2.0;
        for s in row {
            slot_x.insert(key(s), x);
            x += slot_w(s) + BLOCK_GAP;
        }
        y += row_h[r] + BAND;
    }
    let diagram_bottom = y - BAND;
    // Ellipse centres: the ellipse sits at the left of its block, centred in the row.
    let centre = |i: usize| -> (f64, f64) {
        let x = slot_x[&key(&Slot::Node(i))];
        (x + rx_of(&nodes[i]), row_y[layer[i]] + row_h[layer[i]] / 2.0)
    };
    let dummy_x = |s: &Slot| slot_x[&key(s)] + DUMMY_W / 2.0;

    // Ports: each link leaves its upper end at the bottom of the ellipse and enters its lower
    // end at the top, spread along the ellipse in the order of the other end's x.
    let mut bottom_ports: Vec<Vec<(f64, usize)>> = vec![Vec::new(); nodes.len()];
    let mut top_ports: Vec<Vec<(f64, usize)>> = vec![Vec::new(); nodes.len()];
    let first_hop_x = |k: usize, from_top: bool| -> f64 {
        let l = &links[k];
        let (top, bottom) = ends(&layer, l);
        if from_top {
            dummies[k].first().map_or_else(|| centre(bottom).0, |(_, d)| dummy_x(d))
        } else {
            dummies[k].last().map_or_else(|| centre(top).0, |(_, d)| dummy_x(d))
        }
    };
    for (k, l) in links.iter().enumerate() {
        let (top, bottom) = ends(&layer, l);
        if layer[top] == layer[bottom] {
            // Same row: both ends leave at the bottom and meet in the band below.
            bottom_ports[top].push((centre(bottom).0, k));
            bottom_ports[bottom].push((centre(top).0, k));
        } else {
            bottom_ports[top].push((first_hop_x(k, true), k));
            top_ports[bottom].push((first_hop_x(k, false), k));
        }
    }
    let port = |i: usize, k: usize, bottom: bool| -> (f64, f64) {
        let list = if bottom { &bottom_ports[i] } else { &top_ports[i] };
        let mut sorted: Vec<(f64, usize)> = list.clone();
        sorted.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        let m = sorted.len();
        let at = sorted.iter().position(|(_, kk)| *kk == k).unwrap_or(0);
        let rx = rx_of(&nodes[i]);
        let span = 2.0 * rx - 40.0;
        let dx = (at as f64 + 1.0) / (m as f64 + 1.0) * span - span / 2.0;
        let (cx, cy) = centre(i);
        let dy = RY * (1.0 - (dx / rx).powi(2)).max(0.0).sqrt();
        (cx + dx, if bottom { cy + dy } else { cy - dy })
    };

    // Routes: straight down inside a row, bends in the bands.
    let mut routes: Vec<Route> = Vec::new();
    for (k, l) in links.iter().enumerate() {
        let (top, bottom) = ends(&layer, l);
        let mut pts = Vec::new();
        if layer[top] == layer[bottom] {
            let a = port(top, k, true);
            let b = port(bottom, k, true);
            let band_y = row_y[layer[top]] + row_h[layer[top]] + 18.0 + 8.0 * (k % 4) as f64;
            pts.extend([a, (a.0, band_y), (b.0, band_y), b]);
        } else {
            let a = port(top, k, true);
            pts.push(a);
            let mut x = a.0;
            let mut r = layer[top];
            for (dr, d) in &dummies[k] {
                let dx = dummy_x(d);
                let below = row_y[r] + row_h[r];
                pts.extend([(x, below), (dx, row_y[*dr])]);
                x = dx;
                r = *dr;
            }
            let b = port(bottom, k, false);
            pts.extend([(x, row_y[r] + row_h[r]), (b.0, row_y[layer[bottom]]), b]);
        }
        // Draw from the link's own tail, so the arrowhead sits at its head.
        if l.from != top {
            pts.reverse();
        }
        routes.push(Route { link: k, points: pts });
    }

    // Obstacles for label placement: item boxes, ellipses (as boxes), names.
    let mut texts: Vec<Rect> = Vec::new();
    let mut boxes: Vec<Rect> = Vec::new();
    let mut body = String::new();
    for (i, n) in nodes.iter().enumerate() {
        let (cx, cy) = centre(i);
        let rx = rx_of(n);
        let b = &blocks[i];
        let items_h = n.items.len() as f64 * (ITEM_H + ITEM_GAP) - ITEM_GAP;
        let top = cy - items_h / 2.0;
        let bx = cx + rx + ITEM_OFFSET;
        for (k, item) in n.items.iter().enumerate() {
            let y = top + k as f64 * (ITEM_H + ITEM_GAP);
            let my = y + ITEM_H / 2.0;
            let ey = cy + (my - cy).clamp(-RY * 0.6, RY * 0.6);
            let ex = cx + rx * (1.0 - ((ey - cy) / RY).powi(2)).max(0.0).sqrt();
            let _ = write!(
                body,
                r##"<line x1="{ex:.1}" y1="{ey:.1}" x2="{:.1}" y2="{my:.1}" stroke="#8a8f96" stroke-width="0.9" marker-end="url(#dg-small)"/><rect x="{bx:.1}" y="{y:.1}" width="{:.1}" height="{ITEM_H:.1}" fill="#fff" stroke="#8a8f96" stroke-width="0.8"/><text x="{:.1}" y="{:.1}" font-size="{ITEM_FONT}" class="dg-item">{}</text>"##,
                bx - 1.5,
                b.item_w,
                bx + 5.0,
                y + ITEM_H - 4.5,
                escape(item)
            );
            boxes.push(Rect { x0: bx, y0: y, x1: bx + b.item_w, y1: y + ITEM_H });
            texts.push(text_box(bx + 5.0, y + ITEM_H - 4.5, item.chars().count(), ITEM_FONT, "start"));
        }
        let _ = write!(
            body,
            r##"<ellipse cx="{cx:.1}" cy="{cy:.1}" rx="{rx:.1}" ry="{RY}" fill="#f3efe4" stroke="{INK}" stroke-width="1.4"/><text x="{cx:.1}" y="{:.1}" text-anchor="middle" font-size="{NAME_FONT}" class="dg-latent">{}</text>"##,
            cy + 4.0,
            escape(&n.name)
        );
        boxes.push(Rect { x0: cx - rx, y0: cy - RY, x1: cx + rx, y1: cy + RY });
        texts.push(text_box(cx, cy + 4.0, n.name.chars().count(), NAME_FONT, "middle"));
    }

    // Edges.
    let mut edges_svg = String::new();
    let mut segments: Vec<Segment> = Vec::new();
    for r in &routes {
        let l = &links[r.link];
        let colour = match (l.conflict, l.kind.is_directed() || l.kind == EdgeKind::PartiallyDirected) {
            (true, _) => CONFLICT,
            (false, true) => INK,
            (false, false) => ACCENT,
        };
        let width = l.support.map_or(1.6, |s| 0.9 + 2.6 * s.clamp(0.0, 1.0));
        let dash = if l.conflict {
            r#" stroke-dasharray="2 3""#
        } else if l.support.is_some_and(|s| s < FRAGILE) {
            r#" stroke-dasharray="6 4""#
        } else {
            ""
        };
        // FCI's marks (`search: fci`): arrowheads, circles, or nothing at each end
        let marker = match l.kind {
            EdgeKind::Directed => r#" marker-end="url(#dg-head)""#,
            EdgeKind::Undirected => "",
            EdgeKind::Bidirected => r#" marker-start="url(#dg-head-start)" marker-end="url(#dg-head)""#,
            EdgeKind::PartiallyDirected => r#" marker-start="url(#dg-circle-start)" marker-end="url(#dg-head)""#,
            EdgeKind::Nondirected => r#" marker-start="url(#dg-circle-start)" marker-end="url(#dg-circle-end)""#,
        };
        let _ = write!(
            edges_svg,
            r#"<path d="{}" fill="none" stroke="{colour}" stroke-width="{width:.2}"{dash}{marker}/>"#,
            path_d(&r.points)
        );
        for w in r.points.windows(2) {
            segments.push((w[0], w[1]));
        }
    }

    // Labels: greedy, first candidate clear of every text, box, edge and earlier label.
    let mut labels_svg = String::new();
    let mut unplaced: Vec<String> = Vec::new();
    for r in &routes {
        let l = &links[r.link];
        let Some(text) = label_text(l) else { continue };
        let chars = text.chars().count();
        let mut placed = None;
        // Longest segments first: they run through the bands, away from the ellipses.
        let mut legs: Vec<Segment> = r.points.windows(2).map(|w| (w[0], w[1])).collect();
        legs.sort_by(|p, q| {
            let len = |(a, b): &Segment| (b.0 - a.0).hypot(b.1 - a.1);
            len(q).total_cmp(&len(p))
        });
        'search: for (a, b) in legs {
            for t in [0.5, 0.35, 0.65, 0.2, 0.8] {
                let (px, py) = (a.0 + (b.0 - a.0) * t, a.1 + (b.1 - a.1) * t);
                for (dx, dy, anchor) in
                    [(6.0, 4.0, "start"), (-6.0, 4.0, "end"), (0.0, -6.0, "middle"), (0.0, 16.0, "middle")]
                {
                    let bx = text_box(px + dx, py + dy, chars, LABEL_FONT, anchor);
                    let padded = bx.grow(1.5);
                    let clear = !texts.iter().any(|o| o.overlaps(&padded))
                        && !boxes.iter().any(|o| o.overlaps(&padded))
                        && !segments.iter().any(|(p, q)| padded.hit_by(*p, *q))
                        && padded.x0 >= 0.0
                        && padded.y0 >= 0.0;
                    if clear {
                        placed = Some((px + dx, py + dy, anchor, bx));
                        break 'search;
                    }
                }
            }
        }
        match placed {
            Some((x, y, anchor, bx)) => {
                let _ = write!(
                    labels_svg,
                    r#"<text x="{x:.1}" y="{y:.1}" text-anchor="{anchor}" font-size="{LABEL_FONT}" class="dg-coef">{}</text>"#,
                    escape(&text)
                );
                texts.push(bx);
            }
            None => unplaced.push(format!("{} → {}: {text}", nodes[l.from].name, nodes[l.to].name)),
        }
    }

    // Legend, below the diagram.
    let label_bottom = texts.iter().map(|t| t.y1).fold(diagram_bottom, f64::max);
    let mut lg = Legend { svg: String::new(), y: label_bottom + 30.0, width: 0.0 };
    let (x0, x1) = (MARGIN, MARGIN + 40.0);
    if links.iter().any(|l| l.kind.is_directed()) {
        let y = lg.y;
        let s = format!(
            r#"<line x1="{x0}" y1="{y:.1}" x2="{x1}" y2="{y:.1}" stroke="{INK}" stroke-width="1.6" marker-end="url(#dg-head)"/>"#
        );
        lg.line(&s, "directed edge: the data orient it (cause above, effect below)");
    }
    if links.iter().any(|l| l.kind == EdgeKind::Undirected) {
        let y = lg.y;
        let s = format!(r#"<line x1="{x0}" y1="{y:.1}" x2="{x1}" y2="{y:.1}" stroke="{ACCENT}" stroke-width="1.6"/>"#);
        lg.line(&s, "undirected edge: the data cannot orient it");
    }
    for (kind, markers, words) in [
        (
            EdgeKind::Bidirected,
            r#" marker-start="url(#dg-head-start)" marker-end="url(#dg-head)""#,
            "arrowheads at both ends: a hidden common cause, neither causes the other",
        ),
        (
            EdgeKind::PartiallyDirected,
            r#" marker-start="url(#dg-circle-start)" marker-end="url(#dg-head)""#,
            "circle to arrowhead: a cause of the lower, or a hidden common cause, or both",
        ),
        (
            EdgeKind::Nondirected,
            r#" marker-start="url(#dg-circle-start)" marker-end="url(#dg-circle-end)""#,
            "circles at both ends: linked; direction and hidden causes left open",
        ),
    ] {
        if links.iter().any(|l| l.kind == kind) {
            let y = lg.y;
            let colour = if kind == EdgeKind::PartiallyDirected { INK } else { ACCENT };
            let s = format!(
                r#"<line x1="{x0}" y1="{y:.1}" x2="{x1}" y2="{y:.1}" stroke="{colour}" stroke-width="1.6"{markers}/>"#
            );
            lg.line(&s, words);
        }
    }
    if links.iter().any(|l| l.conflict) {
        let y = lg.y;
        let s = format!(
            r#"<line x1="{x0}" y1="{y:.1}" x2="{x1}" y2="{y:.1}" stroke="{CONFLICT}" stroke-width="1.6" stroke-dasharray="2 3"/>"#
        );
        lg.line(&s, "dotted: conflicting tests contest this edge's marks (see the conflicting triples)");
    }
    if links.iter().any(|l| l.support.is_some()) {
        let s = format!(
            r#"<line x1="{x0}" y1="{:.1}" x2="{x1}" y2="{:.1}" stroke="{INK}" stroke-width="3.5"/><line x1="{x0}" y1="{:.1}" x2="{x1}" y2="{:.1}" stroke="{INK}" stroke-width="1.2" stroke-dasharray="6 4"/>"#,
            lg.y - 3.0,
            lg.y - 3.0,
            lg.y + 4.0,
            lg.y + 4.0
        );
        lg.line(
            &s,
            &format!(
                "line width: share of bootstrap replicates with the edge as drawn; dashed below {:.0}%",
                FRAGILE * 100.0
            ),
        );
    }
    if links.iter().any(|l| l.coefficient.is_some() || l.support.is_some()) {
        let s = format!(r#"<text x="{x0}" y="{:.1}" font-size="{LABEL_FONT}" class="dg-coef">+0.4</text>"#, lg.y + 4.0);
        let words = match (links.iter().any(|l| l.coefficient.is_some()), links.iter().any(|l| l.support.is_some())) {
            (true, true) => "label: standardized coefficient · share of bootstrap replicates with the edge as drawn",
            (true, false) => "label: standardized coefficient",
            _ => "label: share of bootstrap replicates with the edge as drawn",
        };
        lg.line(&s, words);
    }
    if nodes.iter().any(|n| !n.items.is_empty()) {
        let y = lg.y;
        let s = format!(
            r##"<ellipse cx="{:.1}" cy="{y:.1}" rx="9" ry="6" fill="#f3efe4" stroke="{INK}" stroke-width="1"/><line x1="{:.1}" y1="{y:.1}" x2="{:.1}" y2="{y:.1}" stroke="#8a8f96" stroke-width="0.9" marker-end="url(#dg-small)"/><rect x="{:.1}" y="{:.1}" width="10" height="10" fill="#fff" stroke="#8a8f96" stroke-width="0.8"/>"##,
            x0 + 9.0,
            x0 + 18.0,
            x0 + 29.0,
            x0 + 30.0,
            lg.y - 5.0
        );
        lg.line(&s, "construct (ellipse) → its kept items (boxes): reflective indicators");
    }
    if !dropped.is_empty() {
        let list: Vec<String> = dropped.to_vec();
        lg.line("", &format!("dropped by purification: {}", list.join(", ")));
    }
    for u in &unplaced {
        lg.line("", u);
    }
    let label_right = texts.iter().map(|t| t.x1).fold(0.0, f64::max);
    let width = (content_w + 2.0 * MARGIN).max(lg.width + MARGIN).max(label_right + MARGIN);
    let height = lg.y + 6.0;
    let legend = lg.svg;
    let mut s = String::new();
    let _ = write!(
        s,
        r##"<svg xmlns="http://www.w3.org/2000/svg" class="diagram" viewBox="0 0 {width:.0} {height:.0}" width="{width:.0}" height="{height:.0}" role="img" aria-label="path diagram"><defs><marker id="dg-head" viewBox="0 0 10 10" refX="9" refY="5" markerUnits="userSpaceOnUse" markerWidth="10" markerHeight="10" orient="auto"><path d="M0,0 L10,5 L0,10 z" fill="{INK}"/></marker><marker id="dg-small" viewBox="0 0 10 10" refX="9" refY="5" markerUnits="userSpaceOnUse" markerWidth="6" markerHeight="6" orient="auto"><path d="M0,0 L10,5 L0,10 z" fill="#8a8f96"/></marker><marker id="dg-head-start" viewBox="0 0 10 10" refX="9" refY="5" markerUnits="userSpaceOnUse" markerWidth="10" markerHeight="10" orient="auto-start-reverse"><path d="M0,0 L10,5 L0,10 z" fill="{INK}"/></marker><marker id="dg-circle-start" viewBox="0 0 10 10" refX="0.5" refY="5" markerUnits="userSpaceOnUse" markerWidth="9" markerHeight="9" orient="auto"><circle cx="5" cy="5" r="4" fill="#fff" stroke="{INK}" stroke-width="1.4"/></marker><marker id="dg-circle-end" viewBox="0 0 10 10" refX="9.5" refY="5" markerUnits="userSpaceOnUse" markerWidth="9" markerHeight="9" orient="auto"><circle cx="5" cy="5" r="4" fill="#fff" stroke="{INK}" stroke-width="1.4"/></marker></defs>"##
    );
    s.push_str(&edges_svg);
    s.push_str(&body);
    s.push_str(&labels_svg);
    s.push_str(&legend);
    s.push_str("</svg>");
    s
}

/// The legend under the diagram: one sample and one line of words per mark in use.
struct Legend {
    svg: String,
    y: f64,
    width: f64,
}

impl Legend {
    fn line(&mut self, sample: &str, words: &str) {
        let _ = write!(
            self.svg,
            r#"{sample}<text x="{:.1}" y="{:.1}" font-size="{LABEL_FONT}" class="dg-legend">{}</text>"#,
            MARGIN + 52.0,
            self.y + 4.0,
            escape(words)
        );
        self.width = self.width.max(MARGIN + 52.0 + text_width(words.chars().count(), LABEL_FONT));
        self.y += 19.0;
    }
}

/// `+0.45 · 100%`, `+0.45`, or `100%`.
fn label_text(l: &Link) -> Option<String> {
    match (l.coefficient, l.support) {
        (Some(c), Some(p)) => Some(format!("{c:+.2} · {:.0}%", p * 100.0)),
        (Some(c), None) => Some(format!("{c:+.2}")),
        (None, Some(p)) => Some(format!("{:.0}%", p * 100.0)),
        (None, None) => None,
    }
}

/// A straight piece of an edge, end to end.
type Segment = ((f64, f64), (f64, f64));

/// A hashable stand-in for a slot.
type SlotKey = (u8, usize);

fn key(s: &Slot) -> SlotKey {
    match s {
        Slot::Node(i) => (0, *i),
        Slot::Dummy(d) => (1, *d),
    }
}

/// Straight segments (the bends of a route lie in the bands, where nothing else is drawn).
fn path_d(points: &[(f64, f64)]) -> String {
    let mut d = String::new();
    for (i, (x, y)) in points.iter().enumerate() {
        let _ = write!(d, "{}{x:.1},{y:.1}", if i == 0 { "M" } else { " L" });
    }
    d
}

/// Problems with an emitted diagram's geometry: a text under `MIN_FONT`, two texts whose
/// boxes overlap, a text crossed by an edge (a `path` or `line` of the diagram), or a text over
/// a box it does not belong to. Text boxes are estimated with `text_width`. Empty when the
/// diagram is readable.
pub fn layout_problems(svg: &str) -> Vec<String> {
    let mut problems = Vec::new();
    let attr = |tag: &str, name: &str| -> Option<f64> {
        let at = tag.find(&format!(" {name}=\""))? + name.len() + 3;
        tag[at..].split('"').next()?.parse().ok()
    };
    let sattr = |tag: &str, name: &str| -> Option<String> {
        let at = tag.find(&format!(" {name}=\""))? + name.len() + 3;
        tag[at..].split('"').next().map(str::to_string)
    };
    let mut texts: Vec<(String, Rect)> = Vec::new();
    let mut segments: Vec<Segment> = Vec::new();
    let mut rects: Vec<Rect> = Vec::new();
    let mut rest = svg;
    while let Some(start) = rest.find('<') {
        rest = &rest[start..];
        let end = rest.find('>').map_or(rest.len(), |e| e + 1);
        let tag = &rest[..end];
        if tag.starts_with("<text") {
            let content_end = rest[end..].find("</text>").map_or(0, |e| e);
            let content = &rest[end..end + content_end];
            let chars = unescape(content).chars().count();
            let size = attr(tag, "font-size").unwrap_or(0.0);
            if size < MIN_FONT {
                problems.push(format!("text `{content}` has font size {size}, under {MIN_FONT}"));
            }
            let (x, y) = (attr(tag, "x").unwrap_or(0.0), attr(tag, "y").unwrap_or(0.0));
            let anchor = sattr(tag, "text-anchor").unwrap_or_else(|| "start".into());
            texts.push((content.to_string(), text_box(x, y, chars, size, &anchor)));
        } else if tag.starts_with("<line") && !tag.contains("#8a8f96") {
            // Item arrows (grey) end at their box by design; structural lines are checked.
            if let (Some(x1), Some(y1), Some(x2), Some(y2)) =
                (attr(tag, "x1"), attr(tag, "y1"), attr(tag, "x2"), attr(tag, "y2"))
            {
                segments.push(((x1, y1), (x2, y2)));
            }
        } else if tag.starts_with("<path") && !tag.starts_with("<path d=\"M0,0") {
            if let Some(d) = sattr(tag, "d") {
                let pts: Vec<(f64, f64)> = d
                    .split(['M', 'L'])
                    .filter_map(|p| {
                        let (x, y) = p.trim().split_once(',')?;
                        Some((x.trim().parse().ok()?, y.trim().parse().ok()?))
                    })
                    .collect();
                segments.extend(pts.windows(2).map(|w| (w[0], w[1])));
            }
        } else if tag.starts_with("<rect")
            && let (Some(x), Some(y), Some(w), Some(h)) =
                (attr(tag, "x"), attr(tag, "y"), attr(tag, "width"), attr(tag, "height"))
        {
            rects.push(Rect { x0: x, y0: y, x1: x + w, y1: y + h });
        }
        rest = &rest[end..];
    }
    for (i, (a, ra)) in texts.iter().enumerate() {
        for (b, rb) in texts.iter().skip(i + 1) {
            if ra.overlaps(rb) {
                problems.push(format!("texts `{a}` and `{b}` overlap"));
            }
        }
        if segments.iter().any(|(p, q)| ra.hit_by(*p, *q)) {
            problems.push(format!("an edge crosses text `{a}`"));
        }
        // A text may sit inside its own box only.
        for r in &rects {
            if ra.overlaps(r) && !(ra.x0 >= r.x0 && ra.x1 <= r.x1 + 0.5 && ra.y0 >= r.y0 - 0.5 && ra.y1 <= r.y1 + 0.5) {
                problems.push(format!("text `{a}` overlaps a box"));
            }
        }
    }
    problems
}

fn unescape(s: &str) -> String {
    s.replace("&lt;", "<").replace("&gt;", ">").replace("&amp;", "&").replace("&quot;", "\"").replace("&#39;", "'")
}

#[cfg(test)]
mod tests {
    use super::*;

    fn node(name: &str, column: usize, items: &[&str]) -> Node {
        Node { name: name.into(), column, items: items.iter().map(|s| s.to_string()).collect() }
    }

    fn link(from: usize, to: usize, directed: bool, c: Option<f64>, s: Option<f64>) -> Link {
        Link {
            from,
            to,
            kind: if directed { EdgeKind::Directed } else { EdgeKind::Undirected },
            coefficient: c,
            support: s,
            conflict: false,
        }
    }

    /// The transit demo's recovered structure (tiers and kept items as in pipelines/transit).
    fn demo() -> (Vec<Node>, Vec<Link>) {
        let nodes = vec![
            node("crowding", 1, &["cr1", "cr2", "cr3", "cr4"]),
            node("punctuality", 1, &["pu1", "pu2", "pu3", "pu4", "pu5"]),
            node("trust", 2, &["tr1", "tr2", "tr3", "tr4", "tr5"]),
            node("fare_burden", 0, &["fare_share"]),
            node("intent", 3, &["in1", "in2", "in3", "in4"]),
        ];
        let links = vec![
            link(0, 2, true, Some(-0.44), Some(1.0)),
            link(1, 2, true, Some(0.34), Some(1.0)),
            link(2, 4, true, Some(0.47), Some(1.0)),
            link(3, 0, true, Some(0.45), Some(1.0)),
            link(3, 4, true, Some(-0.39), Some(0.55)),
        ];
        (nodes, links)
    }

    #[test]
    fn draws_every_node_and_edge_and_escapes() {
        let nodes = vec![node("a<b", 0, &["x1", "x2"]), node("c", 1, &["y1"])];
        let links = vec![link(0, 1, true, Some(0.42), None), link(1, 0, false, None, None)];
        let svg = diagram(&nodes, &links, &["z<1>".into()]);
        assert_eq!(svg.matches("<ellipse").count(), 3, "two constructs and the legend's");
        assert_eq!(svg.matches("class=\"dg-item\"").count(), 3);
        assert!(svg.contains("a&lt;b") && svg.contains("z&lt;1&gt;") && !svg.contains("a<b"));
    }

    // A contested edge is drawn dotted in the conflict colour, and the legend says what that means.
    #[test]
    fn conflicting_edges_are_drawn_as_such() {
        let nodes = vec![node("a", 0, &["x1"]), node("b", 1, &["y1"]), node("c", 2, &["z1"])];
        let mut contested = link(1, 2, false, None, None);
        contested.conflict = true;
        let svg = diagram(&nodes, &[link(0, 1, true, None, None), contested], &[]);
        assert_eq!(
            svg.matches(&format!(r#"stroke="{CONFLICT}" stroke-width="1.60" stroke-dasharray="2 3""#)).count(),
            1
        );
        assert!(svg.contains("dotted: conflicting tests contest"));
        assert!(layout_problems(&svg).is_empty());
        let plain = diagram(&nodes, &[link(0, 1, true, None, None), link(1, 2, false, None, None)], &[]);
        assert!(!plain.contains(CONFLICT) && !plain.contains("dotted"));
    }

    #[test]
    fn demo_diagram_is_readable() {
        let (nodes, links) = demo();
        let svg = diagram(&nodes, &links, &["cr5".into(), "tr6".into()]);
        let problems = layout_problems(&svg);
        assert!(problems.is_empty(), "{problems:#?}\n{svg}");
        // The check sees this diagram's texts: a second copy of a label is an overlap.
        let at = svg.find(r#"class="dg-coef">"#).unwrap();
        let open = svg[..at].rfind("<text").unwrap();
        let close = at + svg[at..].find("</text>").unwrap() + 7;
        let injected = svg.replacen("</svg>", &format!("{}</svg>", &svg[open..close]), 1);
        assert!(!layout_problems(&injected).is_empty());
        // Reflective: every item has an arrow from its construct.
        assert_eq!(svg.matches("url(#dg-small)").count(), 19 + 1);
        assert!(svg.contains("dropped by purification: cr5, tr6"));
        assert!(svg.contains("stroke-dasharray"), "the 55% edge is fragile");
        // Causes above effects: fare_burden's ellipse lies above intent's.
        let cy = |name: &str| -> f64 {
            let at = svg.find(&format!(">{name}</text>")).unwrap();
            let e = svg[..at].rfind("<ellipse").unwrap();
            svg[e..].split("cy=\"").nth(1).unwrap().split('"').next().unwrap().parse().unwrap()
        };
        assert!(cy("fare_burden") < cy("crowding") && cy("crowding") < cy("trust") && cy("trust") < cy("intent"));
    }

    #[test]
    fn ten_construct_diagram_is_readable() {
        let names = ["alpha", "beta", "gamma", "delta", "epsilon", "zeta", "eta", "theta", "iota", "kappa_long_name"];
        let nodes: Vec<Node> = names
            .iter()
            .enumerate()
            .map(|(i, n)| {
                let items: Vec<String> = (1..=3 + i % 4).map(|k| format!("{}{k}", &n[..2])).collect();
                Node { name: n.to_string(), column: i / 3, items }
            })
            .collect();
        let mut links = Vec::new();
        for i in 0..10 {
            for j in i + 1..10 {
                if (i * 7 + j * 3) % 4 == 0 {
                    links.push(link(i, j, (i + j) % 5 != 0, Some(0.1 * (j - i) as f64), Some(0.3 + 0.07 * i as f64)));
                }
            }
        }
        assert!(links.len() >= 10, "{}", links.len());
        let svg = diagram(&nodes, &links, &[]);
        let problems = layout_problems(&svg);
        assert!(problems.is_empty(), "{problems:#?}");
    }

    #[test]
    fn the_checker_finds_overlaps_and_small_type() {
        let bad = r#"<svg><text x="10" y="20" font-size="9">abc</text><text x="12" y="21" font-size="11">abd</text><path d="M0,18 L100,18"/></svg>"#;
        let p = layout_problems(bad);
        assert!(p.iter().any(|s| s.contains("font size 9")), "{p:?}");
        assert!(p.iter().any(|s| s.contains("overlap")), "{p:?}");
        assert!(p.iter().any(|s| s.contains("an edge crosses text `abc`")), "{p:?}");
    }
}

#[cfg(test)]
mod pag_tests {
    use super::*;

    // FCI's edges (`search: fci`) are drawn with their end marks: two arrowheads for a hidden
    // common cause, a circle and an arrowhead for `o->`, two circles for `o-o`, each kind
    // explained in the legend, and the layout stays readable.
    #[test]
    fn pag_edges_are_drawn_with_their_marks_and_explained() {
        let node = |name: &str, column: usize, items: &[&str]| Node {
            name: name.into(),
            column,
            items: items.iter().map(|s| s.to_string()).collect(),
        };
        let nodes = vec![
            node("fare_burden", 0, &["fare_share"]),
            node("crowding", 1, &["cr1", "cr2", "cr3"]),
            node("punctuality", 1, &["pu1", "pu2", "pu3"]),
            node("trust", 2, &["tr1", "tr2", "tr3"]),
        ];
        let link = |from, to, kind| Link { from, to, kind, coefficient: None, support: None, conflict: false };
        let links = vec![
            link(0, 1, EdgeKind::PartiallyDirected),
            link(1, 2, EdgeKind::Bidirected),
            link(2, 3, EdgeKind::Nondirected),
            link(1, 3, EdgeKind::Directed),
        ];
        let svg = diagram(&nodes, &links, &[]);
        assert_eq!(svg.matches(r#"marker-start="url(#dg-head-start)""#).count(), 2, "edge and legend");
        assert_eq!(svg.matches(r#"marker-start="url(#dg-circle-start)""#).count(), 4);
        assert_eq!(svg.matches(r#"marker-end="url(#dg-circle-end)""#).count(), 2);
        for words in ["a hidden common cause, neither causes the other", "circle to arrowhead", "circles at both ends"]
        {
            assert!(svg.contains(words), "legend lacks {words}");
        }
        let problems = layout_problems(&svg);
        assert!(problems.is_empty(), "{problems:#?}");
    }
}
