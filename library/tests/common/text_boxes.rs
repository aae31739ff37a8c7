//! Where a figure's text lands when a real font lays it out: usvg (the
//! parser of resvg) shapes every `<text>` with DejaVu Sans, the face Debian
//! ships as `fonts-dejavu-core`, and reports its bounding box on the page.

#![allow(dead_code)] // each test file uses part of the helpers

use std::sync::Arc;

use resvg::usvg;

/// Parsing options with DejaVu Sans as the sans-serif face; panics with what
/// to install when the font is missing, so the check cannot pass vacuously.
pub fn dejavu() -> usvg::Options<'static> {
    let mut opt = usvg::Options::default();
    let db = Arc::make_mut(&mut opt.fontdb);
    db.load_fonts_dir("/usr/share/fonts/truetype/dejavu");
    db.set_sans_serif_family("DejaVu Sans");
    assert!(
        !opt.fontdb.is_empty(),
        "install fonts-dejavu-core: this check measures text with DejaVu Sans"
    );
    opt
}

/// Every text of the figure with its laid-out bounding box.
pub fn text_boxes(svg: &str, opt: &usvg::Options) -> (usvg::Size, Vec<(String, usvg::Rect)>) {
    let tree = usvg::Tree::from_str(svg, opt).expect("usvg parses the figure");
    let mut out = Vec::new();
    collect(tree.root(), &mut out);
    (tree.size(), out)
}

fn collect(group: &usvg::Group, out: &mut Vec<(String, usvg::Rect)>) {
    for node in group.children() {
        match node {
            usvg::Node::Group(g) => collect(g, out),
            usvg::Node::Text(t) => {
                let content: String = t.chunks().iter().map(|c| c.text()).collect();
                out.push((content, t.abs_bounding_box()));
            }
            _ => {}
        }
    }
}

/// The texts whose box leaves the canvas, with their boxes, for a message.
pub fn texts_outside_canvas(svg: &str, opt: &usvg::Options) -> Vec<String> {
    let (size, boxes) = text_boxes(svg, opt);
    assert!(!boxes.is_empty(), "the figure has no text to measure");
    boxes
        .into_iter()
        .filter(|(_, r)| {
            r.left() < 0.0 || r.top() < 0.0 || r.right() > size.width() || r.bottom() > size.height()
        })
        .map(|(t, r)| format!("{t:?} at {r:?} on a {}×{} canvas", size.width(), size.height()))
        .collect()
}

/// The pairs of texts whose boxes overlap (by more than `slack` pixels in
/// both directions, which lets glyph boxes that merely touch pass).
pub fn overlapping_texts(svg: &str, opt: &usvg::Options, slack: f32) -> Vec<String> {
    let (_, boxes) = text_boxes(svg, opt);
    let mut out = Vec::new();
    for (i, (a, ra)) in boxes.iter().enumerate() {
        for (b, rb) in &boxes[i + 1..] {
            let dx = ra.right().min(rb.right()) - ra.left().max(rb.left());
            let dy = ra.bottom().min(rb.bottom()) - ra.top().max(rb.top());
            if dx > slack && dy > slack {
                out.push(format!("{a:?} at {ra:?} overlaps {b:?} at {rb:?}"));
            }
        }
    }
    out
}
