//! The causal-graph drawing: a layered layout with sources at the top.
//!
//! Steps (after Sugiyama, Tagawa & Toda 1981): nodes are put in layers by
//! their longest path from a source, so every arrow points down; arrows that
//! skip layers get invisible waypoints in each layer they cross; the order
//! within each layer comes from alternating barycenter sweeps, keeping the
//! order with the fewest crossings; horizontal positions pull each node
//! towards its neighbours while an isotonic fit keeps the boxes apart.
//! Arrows leave a box through its bottom edge and end on the next box's top
//! edge, so they never run through a box. [`layout`] exposes the geometry
//! for checking; [`graph_figure`] draws it.

use svg::node::element::Element;

use super::canvas::{
    legend, legend_height, legend_rows, num, polygon_d, rect, stroke_path, text, text_width,
    Anchor, Attr, Key, Sheet, HEADING, MEDIUM, WIDTH,
};
use super::palette::{BLUE, BLUISH_GREEN, INK, ORANGE, REDDISH_PURPLE, SKY_BLUE, VERMILLION};
use super::PlotError;

/// What a node stands for in the question asked of the graph.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Role {
    /// No special part in the question.
    #[default]
    Plain,
    /// The cause whose effect is asked for.
    Exposure,
    /// The effect.
    Outcome,
    /// A member of the adjustment set.
    Adjusted,
    /// A node the identifying formula uses (beyond adjustment).
    InFormula,
    /// A node of the hedge that shows an effect is not identifiable, or a
    /// hidden common cause joining it.
    Hedge,
}

/// One node of the picture.
#[derive(Debug, Clone, PartialEq)]
pub struct NodeMark {
    /// Label written in the box.
    pub name: String,
    /// Unobserved node; drawn with a dashed outline.
    pub hidden: bool,
    /// Part in the question.
    pub role: Role,
}

/// One arrow, by node positions in [`GraphPicture::nodes`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct EdgeMark {
    /// The cause.
    pub from: usize,
    /// The effect.
    pub to: usize,
    /// Drawn thick and coloured, e.g. as part of an open path.
    pub highlight: bool,
}

/// A causal graph to draw.
#[derive(Debug, Clone, PartialEq)]
pub struct GraphPicture {
    /// Name of the graph, used as the figure's subject.
    pub title: String,
    pub nodes: Vec<NodeMark>,
    pub edges: Vec<EdgeMark>,
}

/// A node's box, by its top-left corner, in pixels.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NodeBox {
    pub x: f64,
    pub y: f64,
    pub width: f64,
    pub height: f64,
}

impl NodeBox {
    /// Whether two boxes share any area or come closer than `gap` pixels.
    pub fn overlaps(&self, other: &NodeBox, gap: f64) -> bool {
        self.x < other.x + other.width + gap
            && other.x < self.x + self.width + gap
            && self.y < other.y + other.height + gap
            && other.y < self.y + self.height + gap
    }
}

/// The drawn course of one arrow.
#[derive(Debug, Clone, PartialEq)]
pub struct EdgeRoute {
    pub from: usize,
    pub to: usize,
    /// Starts on the bottom edge of the `from` box, passes the waypoints of
    /// skipped layers (two per layer: its top and bottom), and ends at the
    /// arrow tip on the top edge of the `to` box.
    pub points: Vec<(f64, f64)>,
    pub highlight: bool,
}

/// Geometry of a laid-out graph.
#[derive(Debug, Clone, PartialEq)]
pub struct GraphLayout {
    pub width: f64,
    pub height: f64,
    /// Layer of each node, 0 at the top.
    pub layers: Vec<usize>,
    /// Box of each node, in node order.
    pub boxes: Vec<NodeBox>,
    /// One route per arrow, in arrow order.
    pub routes: Vec<EdgeRoute>,
}

const BOX_HEIGHT: f64 = 30.0;
const LAYER_GAP: f64 = 62.0;
const NODE_GAP: f64 = 26.0;
const WAYPOINT_WIDTH: f64 = 10.0;
const MARGIN: f64 = 20.0;
const ARROW_LENGTH: f64 = 10.0;
const SWEEPS: usize = 24;

/// A slot in a layer: a node's box or the waypoint of a long arrow.
struct Slot {
    node: Option<usize>,
    layer: usize,
    width: f64,
    above: Vec<usize>,
    below: Vec<usize>,
}

/// Lay out the graph: layers, order, positions and arrow routes.
pub fn layout(picture: &GraphPicture) -> Result<GraphLayout, PlotError> {
    let layers = longest_path_layers(picture)?;
    let (slots, chains) = build_slots(picture, &layers);
    let depth = layers.iter().max().map_or(0, |m| m + 1);
    let mut rows: Vec<Vec<usize>> = vec![Vec::new(); depth];
    for (id, slot) in slots.iter().enumerate() {
        rows[slot.layer].push(id);
    }
    let rows = order_rows(&slots, rows);
    let centres = place_rows(&slots, &rows);
    Ok(assemble(picture, &layers, &slots, &rows, &centres, &chains))
}

/// Layer of each node: the length of the longest path reaching it from a
/// source. Errors on bad arrow ends and on cycles.
fn longest_path_layers(picture: &GraphPicture) -> Result<Vec<usize>, PlotError> {
    let n = picture.nodes.len();
    if n == 0 {
        return Err(PlotError::Empty {
            figure: "causal graph",
            what: format!("graph {}", picture.title),
        });
    }
    let mut indegree = vec![0usize; n];
    let mut children = vec![Vec::new(); n];
    for (i, e) in picture.edges.iter().enumerate() {
        for end in [e.from, e.to] {
            if end >= n {
                return Err(PlotError::MissingNode {
                    graph: picture.title.clone(),
                    arrow: i + 1,
                    node: end,
                    count: n,
                });
            }
        }
        if e.from == e.to {
            return Err(PlotError::SelfLoop {
                graph: picture.title.clone(),
                arrow: i + 1,
                node: picture.nodes[e.from].name.clone(),
            });
        }
        indegree[e.to] += 1;
        children[e.from].push(e.to);
    }
    let mut layer = vec![0usize; n];
    let mut ready: Vec<usize> = (0..n).filter(|v| indegree[*v] == 0).collect();
    let mut seen = 0;
    while let Some(v) = ready.pop() {
        seen += 1;
        for &c in &children[v] {
            layer[c] = layer[c].max(layer[v] + 1);
            indegree[c] -= 1;
            if indegree[c] == 0 {
                ready.push(c);
            }
        }
    }
    if seen < n {
        let stuck = (0..n).find(|v| indegree[*v] > 0).unwrap_or(0);
        return Err(PlotError::Cycle {
            graph: picture.title.clone(),
            node: picture.nodes[stuck].name.clone(),
        });
    }
    Ok(layer)
}

/// Width of a node's box: its label plus padding.
fn box_width(name: &str) -> f64 {
    (text_width(name, MEDIUM) + 24.0).max(48.0)
}

/// One slot per node (same index), then waypoint slots for long arrows.
/// Returns the slots and, per arrow, the chain of slots it passes.
fn build_slots(picture: &GraphPicture, layers: &[usize]) -> (Vec<Slot>, Vec<Vec<usize>>) {
    let mut slots: Vec<Slot> = picture
        .nodes
        .iter()
        .enumerate()
        .map(|(i, m)| Slot {
            node: Some(i),
            layer: layers[i],
            width: box_width(&m.name),
            above: vec![],
            below: vec![],
        })
        .collect();
    let mut chains = Vec::with_capacity(picture.edges.len());
    for e in &picture.edges {
        let mut chain = vec![e.from];
        for layer in layers[e.from] + 1..layers[e.to] {
            slots.push(Slot {
                node: None,
                layer,
                width: WAYPOINT_WIDTH,
                above: vec![],
                below: vec![],
            });
            chain.push(slots.len() - 1);
        }
        chain.push(e.to);
        for pair in chain.windows(2) {
            slots[pair[0]].below.push(pair[1]);
            slots[pair[1]].above.push(pair[0]);
        }
        chains.push(chain);
    }
    (slots, chains)
}

/// Order within layers by alternating barycenter sweeps, keeping the best.
fn order_rows(slots: &[Slot], mut rows: Vec<Vec<usize>>) -> Vec<Vec<usize>> {
    let mut position = vec![0usize; slots.len()];
    let index = |rows: &Vec<Vec<usize>>, position: &mut Vec<usize>| {
        for row in rows {
            for (k, s) in row.iter().enumerate() {
                position[*s] = k;
            }
        }
    };
    index(&rows, &mut position);
    let mut best = rows.clone();
    let mut best_crossings = crossings(slots, &rows, &position);
    for sweep in 0..SWEEPS {
        let downward = sweep % 2 == 0;
        let layer_order: Vec<usize> = if downward {
            (1..rows.len()).collect()
        } else {
            (0..rows.len().saturating_sub(1)).rev().collect()
        };
        for l in layer_order {
            let mut keyed: Vec<(f64, usize, usize)> = rows[l]
                .iter()
                .map(|&s| {
                    let next = if downward {
                        &slots[s].above
                    } else {
                        &slots[s].below
                    };
                    let bary = if next.is_empty() {
                        position[s] as f64
                    } else {
                        next.iter().map(|t| position[*t] as f64).sum::<f64>() / next.len() as f64
                    };
                    (bary, position[s], s)
                })
                .collect();
            keyed.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
            rows[l] = keyed.into_iter().map(|k| k.2).collect();
            for (k, s) in rows[l].iter().enumerate() {
                position[*s] = k;
            }
        }
        let c = crossings(slots, &rows, &position);
        if c < best_crossings {
            best_crossings = c;
            best = rows.clone();
        }
    }
    best
}

/// Number of pairs of arrow segments that cross between adjacent layers.
fn crossings(slots: &[Slot], rows: &[Vec<usize>], position: &[usize]) -> usize {
    let mut total = 0;
    for row in rows {
        let segments: Vec<(usize, usize)> = row
            .iter()
            .flat_map(|&s| {
                slots[s]
                    .below
                    .iter()
                    .map(move |&t| (position[s], position[t]))
            })
            .collect();
        for (i, a) in segments.iter().enumerate() {
            for b in &segments[i + 1..] {
                if (a.0 < b.0 && a.1 > b.1) || (a.0 > b.0 && a.1 < b.1) {
                    total += 1;
                }
            }
        }
    }
    total
}

/// Horizontal centre of every slot: each slot is pulled towards the mean of
/// its neighbours, then [`separate`] restores order and spacing.
fn place_rows(slots: &[Slot], rows: &[Vec<usize>]) -> Vec<f64> {
    let mut centre = vec![0.0; slots.len()];
    for row in rows {
        let mut x = 0.0;
        for (k, &s) in row.iter().enumerate() {
            if k > 0 {
                x += spacing(slots, row[k - 1], s);
            }
            centre[s] = x;
        }
    }
    let pull = |centre: &mut Vec<f64>, row: &[usize], up: bool, down: bool| {
        let desired: Vec<f64> = row
            .iter()
            .map(|&s| {
                let mut neighbours: Vec<usize> = Vec::new();
                if up {
                    neighbours.extend(&slots[s].above);
                }
                if down {
                    neighbours.extend(&slots[s].below);
                }
                if neighbours.is_empty() {
                    centre[s]
                } else {
                    neighbours.iter().map(|t| centre[*t]).sum::<f64>() / neighbours.len() as f64
                }
            })
            .collect();
        let gaps: Vec<f64> = row.windows(2).map(|w| spacing(slots, w[0], w[1])).collect();
        for (s, x) in row.iter().zip(separate(&desired, &gaps)) {
            centre[*s] = x;
        }
    };
    for _ in 0..8 {
        for row in rows.iter().skip(1) {
            pull(&mut centre, row, true, false);
        }
        for row in rows.iter().rev().skip(1) {
            pull(&mut centre, row, false, true);
        }
    }
    for row in rows {
        pull(&mut centre, row, true, true);
    }
    centre
}

/// Distance between the centres of two neighbouring slots.
fn spacing(slots: &[Slot], a: usize, b: usize) -> f64 {
    let gap = if slots[a].node.is_some() && slots[b].node.is_some() {
        NODE_GAP
    } else {
        NODE_GAP / 2.0
    };
    (slots[a].width + slots[b].width) / 2.0 + gap
}

/// Positions closest (least squares) to `desired` that keep the order and at
/// least `gaps[k]` between positions `k` and `k + 1`: an isotonic regression
/// by pool-adjacent-violators (Barlow et al. 1972) on the gap-shifted targets.
fn separate(desired: &[f64], gaps: &[f64]) -> Vec<f64> {
    let mut offset = vec![0.0; desired.len()];
    for k in 1..desired.len() {
        offset[k] = offset[k - 1] + gaps[k - 1];
    }
    // blocks of (mean, count)
    let mut blocks: Vec<(f64, usize)> = Vec::new();
    for (d, o) in desired.iter().zip(&offset) {
        blocks.push((d - o, 1));
        while blocks.len() > 1 {
            let (m2, c2) = blocks[blocks.len() - 1];
            let (m1, c1) = blocks[blocks.len() - 2];
            if m1 <= m2 {
                break;
            }
            blocks.pop();
            let last = blocks.len() - 1;
            blocks[last] = (
                (m1 * c1 as f64 + m2 * c2 as f64) / (c1 + c2) as f64,
                c1 + c2,
            );
        }
    }
    blocks
        .iter()
        .flat_map(|(m, c)| std::iter::repeat_n(*m, *c))
        .zip(&offset)
        .map(|(y, o)| y + o)
        .collect()
}

fn layer_centre(layer: usize) -> f64 {
    HEADING + 14.0 + BOX_HEIGHT / 2.0 + layer as f64 * (BOX_HEIGHT + LAYER_GAP)
}

/// Boxes and routes in figure pixels.
fn assemble(
    picture: &GraphPicture,
    layers: &[usize],
    slots: &[Slot],
    rows: &[Vec<usize>],
    centre: &[f64],
    chains: &[Vec<usize>],
) -> GraphLayout {
    let left = slots
        .iter()
        .zip(centre)
        .map(|(s, c)| c - s.width / 2.0)
        .fold(f64::INFINITY, f64::min);
    let right = slots
        .iter()
        .zip(centre)
        .map(|(s, c)| c + s.width / 2.0)
        .fold(f64::NEG_INFINITY, f64::max);
    let (left, right) = if left.is_finite() {
        (left, right)
    } else {
        (0.0, 0.0)
    };
    let needed = right - left + 2.0 * MARGIN;
    let width = needed.max(WIDTH);
    let shift = (width - (right - left)) / 2.0 - left;
    let x = |s: usize| centre[s] + shift;
    let boxes: Vec<NodeBox> = picture
        .nodes
        .iter()
        .enumerate()
        .map(|(i, _)| NodeBox {
            x: x(i) - slots[i].width / 2.0,
            y: layer_centre(layers[i]) - BOX_HEIGHT / 2.0,
            width: slots[i].width,
            height: BOX_HEIGHT,
        })
        .collect();
    let ports = Ports::new(picture, chains, &x);
    let routes = picture
        .edges
        .iter()
        .enumerate()
        .map(|(e, mark)| {
            let chain = &chains[e];
            let mut points = vec![(
                ports.exit(e, &boxes[mark.from]),
                boxes[mark.from].y + BOX_HEIGHT,
            )];
            for &w in &chain[1..chain.len() - 1] {
                let y = layer_centre(slots[w].layer);
                points.push((x(w), y - BOX_HEIGHT / 2.0));
                points.push((x(w), y + BOX_HEIGHT / 2.0));
            }
            points.push((ports.entry(e, &boxes[mark.to]), boxes[mark.to].y));
            EdgeRoute {
                from: mark.from,
                to: mark.to,
                points,
                highlight: mark.highlight,
            }
        })
        .collect();
    let depth = rows.len().max(1);
    let rows_of_legend = legend_rows(&legend_entries(picture), width - 2.0 * MARGIN);
    let height = layer_centre(depth - 1) + BOX_HEIGHT / 2.0 + 24.0 + legend_height(rows_of_legend);
    GraphLayout {
        width,
        height,
        layers: layers.to_vec(),
        boxes,
        routes,
    }
}

/// Where each arrow leaves its cause and reaches its effect: the arrows at
/// one box edge are spread evenly along it, ordered by where they go.
struct Ports {
    exit_share: Vec<f64>,
    entry_share: Vec<f64>,
}

impl Ports {
    fn new(picture: &GraphPicture, chains: &[Vec<usize>], x: &dyn Fn(usize) -> f64) -> Ports {
        let n = picture.edges.len();
        let mut exit_share = vec![0.5; n];
        let mut entry_share = vec![0.5; n];
        for node in 0..picture.nodes.len() {
            let mut out: Vec<usize> = (0..n).filter(|e| picture.edges[*e].from == node).collect();
            out.sort_by(|a, b| x(chains[*a][1]).total_cmp(&x(chains[*b][1])));
            for (k, e) in out.iter().enumerate() {
                exit_share[*e] = (k + 1) as f64 / (out.len() + 1) as f64;
            }
            let mut inc: Vec<usize> = (0..n).filter(|e| picture.edges[*e].to == node).collect();
            let before_last = |e: usize| chains[e][chains[e].len() - 2];
            inc.sort_by(|a, b| x(before_last(*a)).total_cmp(&x(before_last(*b))));
            for (k, e) in inc.iter().enumerate() {
                entry_share[*e] = (k + 1) as f64 / (inc.len() + 1) as f64;
            }
        }
        Ports {
            exit_share,
            entry_share,
        }
    }

    fn exit(&self, e: usize, b: &NodeBox) -> f64 {
        b.x + b.width * self.exit_share[e]
    }

    fn entry(&self, e: usize, b: &NodeBox) -> f64 {
        b.x + b.width * self.entry_share[e]
    }
}

fn legend_entries(picture: &GraphPicture) -> Vec<(Key, String)> {
    let has = |r: Role| picture.nodes.iter().any(|n| n.role == r);
    let mut entries = Vec::new();
    if has(Role::Exposure) {
        entries.push((Key::Outline(BLUE, 2.4, false), "exposure".to_string()));
    }
    if has(Role::Outcome) {
        entries.push((Key::Outline(VERMILLION, 2.4, false), "outcome".to_string()));
    }
    if has(Role::Adjusted) {
        entries.push((Key::Swatch(BLUISH_GREEN, 0.4), "adjusted for".to_string()));
    }
    if has(Role::InFormula) {
        entries.push((Key::Swatch(SKY_BLUE, 0.4), "in the formula".to_string()));
    }
    if has(Role::Hedge) {
        entries.push((Key::Swatch(REDDISH_PURPLE, 0.4), "hedge (blocks identification)".to_string()));
    }
    if picture.nodes.iter().any(|n| n.hidden) {
        entries.push((Key::Outline(INK, 1.2, true), "unobserved".to_string()));
    }
    if picture.edges.iter().any(|e| e.highlight) {
        entries.push((Key::Cased(ORANGE, OPEN_WIDTH), "open path".to_string()));
    }
    entries
}

/// Draw the causal graph: boxes with labels, arrows, and a legend of the
/// marks in use.
pub fn graph_figure(picture: &GraphPicture) -> Result<String, PlotError> {
    let geometry = layout(picture)?;
    let mut sheet = Sheet::new(
        geometry.width,
        geometry.height,
        "causal graph",
        &picture.title,
        &describe(picture),
    );
    draw_arrows(&mut sheet, &geometry, false);
    draw_arrows(&mut sheet, &geometry, true);
    for (mark, b) in picture.nodes.iter().zip(&geometry.boxes) {
        for part in node_box(mark, b) {
            sheet.push(part);
        }
        let baseline = b.y + b.height / 2.0 + MEDIUM * 0.36;
        sheet.push(text(
            b.x + b.width / 2.0,
            baseline,
            &mark.name,
            MEDIUM,
            Anchor::Middle,
        ));
    }
    let entries = legend_entries(picture);
    let rows = legend_rows(&entries, geometry.width - 2.0 * MARGIN);
    let top = geometry.height - legend_height(rows) - 8.0;
    legend(
        &mut sheet,
        MARGIN,
        top,
        geometry.width - 2.0 * MARGIN,
        &entries,
    );
    Ok(sheet.finish())
}

/// Width of an open-path arrow's orange band; a white line runs down its
/// middle (a cased line, Waypath's mark for an open path, readable in grey
/// print and apart from the dashed outline of an unobserved node).
pub const OPEN_WIDTH: f64 = 5.4;
const OPEN_CORE: f64 = 1.6;

/// All plain arrows as one path and one set of heads, or the highlighted ones.
fn draw_arrows(sheet: &mut Sheet, geometry: &GraphLayout, highlighted: bool) {
    let (colour, width) = if highlighted {
        (ORANGE, OPEN_WIDTH)
    } else {
        (INK, 1.3)
    };
    let mut shafts = String::new();
    let mut heads = String::new();
    for route in geometry
        .routes
        .iter()
        .filter(|r| r.highlight == highlighted)
    {
        shafts.push_str(&shaft_d(&route.points));
        let (tx, ty) = route.points[route.points.len() - 1];
        let half = if highlighted { 6.5 } else { 4.5 };
        heads.push_str(&polygon_d([
            (tx, ty),
            (tx - half, ty - ARROW_LENGTH - 1.0),
            (tx + half, ty - ARROW_LENGTH - 1.0),
        ]));
    }
    if !shafts.is_empty() {
        sheet.push(stroke_path(shafts.clone(), colour, width));
        if highlighted {
            sheet.push(stroke_path(shafts, "#FFFFFF", OPEN_CORE));
        }
        sheet.push(Element::new("path").with("d", heads).with("fill", colour));
    }
}

/// Path data of an arrow's shaft: vertical-tangent curves between layers,
/// straight runs through skipped layers, ending where the head begins.
fn shaft_d(points: &[(f64, f64)]) -> String {
    let mut d = format!("M{},{}", num(points[0].0), num(points[0].1));
    let tip = points.len() - 1;
    let mut k = 0;
    while k < tip {
        let (x0, y0) = points[k];
        let (x1, mut y1) = points[k + 1];
        if k + 1 == tip {
            y1 -= ARROW_LENGTH;
        }
        let bend = (y1 - y0) / 2.0;
        d.push_str(&format!(
            "C{},{} {},{} {},{}",
            num(x0),
            num(y0 + bend),
            num(x1),
            num(y1 - bend),
            num(x1),
            num(y1)
        ));
        if k + 1 < tip {
            // points[k + 1] and points[k + 2] are the top and bottom of a waypoint
            d.push_str(&format!("V{}", num(points[k + 2].1)));
            k += 2;
        } else {
            k += 1;
        }
    }
    d
}

/// The box of a node: white underneath, tinted and outlined by its role.
fn node_box(mark: &NodeMark, b: &NodeBox) -> Vec<Element> {
    let (tint, opacity, stroke, width) = match mark.role {
        Role::Plain => (None, 0.0, INK, 1.2),
        Role::Exposure => (Some(BLUE), 0.18, BLUE, 2.4),
        Role::Outcome => (Some(VERMILLION), 0.18, VERMILLION, 2.4),
        Role::Adjusted => (Some(BLUISH_GREEN), 0.4, INK, 1.2),
        Role::InFormula => (Some(SKY_BLUE), 0.4, INK, 1.2),
        Role::Hedge => (Some(REDDISH_PURPLE), 0.4, INK, 1.2),
    };
    let shape = |fill: &str| rect(b.x, b.y, b.width, b.height, fill).with("rx", "6");
    let mut outline = shape("#FFFFFF")
        .with("stroke", stroke)
        .with("stroke-width", num(width));
    if mark.hidden {
        outline = outline.with("stroke-dasharray", "5 3");
    }
    let mut parts = vec![outline];
    if let Some(colour) = tint {
        parts.push(shape(colour).with("fill-opacity", format!("{opacity:.2}")));
    }
    parts
}

/// The `<desc>` sentence of a graph figure.
fn describe(picture: &GraphPicture) -> String {
    let names = |r: Role| -> Vec<&str> {
        picture
            .nodes
            .iter()
            .filter(|n| n.role == r)
            .map(|n| n.name.as_str())
            .collect()
    };
    let mut s = format!(
        "Causal graph {} with {} nodes and {} arrows, drawn top to bottom from causes to effects",
        picture.title,
        picture.nodes.len(),
        picture.edges.len()
    );
    for (role, words) in [
        (Role::Exposure, "exposure"),
        (Role::Outcome, "outcome"),
        (Role::Adjusted, "adjusted for"),
        (Role::InFormula, "in the identifying formula"),
        (Role::Hedge, "hedge"),
    ] {
        let list = names(role);
        if !list.is_empty() {
            s.push_str(&format!("; {words} {}", list.join(", ")));
        }
    }
    let hidden: Vec<&str> = picture
        .nodes
        .iter()
        .filter(|n| n.hidden)
        .map(|n| n.name.as_str())
        .collect();
    if !hidden.is_empty() {
        s.push_str(&format!("; unobserved {}", hidden.join(", ")));
    }
    let open = picture.edges.iter().filter(|e| e.highlight).count();
    if open > 0 {
        s.push_str(&format!("; {open} arrows highlighted as open paths"));
    }
    s.push('.');
    s
}
