//! The colour-blind-safe palette every figure draws from.
//!
//! Okabe & Ito (2008), "Color Universal Design": eight colours that stay
//! distinguishable under the common colour-vision deficiencies. The hex codes
//! are recalled from memory (recalled). Tints are the same colours drawn with
//! a fill opacity, so no colour outside the palette appears.

/// Black, for text and reference lines.
pub const BLACK: &str = "#000000";
/// Orange.
pub const ORANGE: &str = "#E69F00";
/// Sky blue.
pub const SKY_BLUE: &str = "#56B4E9";
/// Bluish green.
pub const BLUISH_GREEN: &str = "#009E73";
/// Yellow; pale on white, so it comes last in the group order.
pub const YELLOW: &str = "#F0E442";
/// Blue.
pub const BLUE: &str = "#0072B2";
/// Vermillion.
pub const VERMILLION: &str = "#D55E00";
/// Reddish purple.
pub const REDDISH_PURPLE: &str = "#CC79A7";

/// Dark grey for axes, tick labels and plain outlines (a shade of black).
pub const INK: &str = "#333333";
/// Light grey for context such as data points behind fitted lines.
pub const MUTED: &str = "#8C8C8C";

/// The order in which groups, chains and parameters take colours: Waypath's
/// own: a green and a purple first (opposite hues that two groups of a
/// category usually take), then the dark blue and the orange, then the
/// lighter colours; yellow, pale on white, comes last. Chains in the mixing
/// figure take line styles as well, so no reading rests on hue alone.
const SERIES: [&str; 7] = [
    BLUISH_GREEN,
    REDDISH_PURPLE,
    BLUE,
    ORANGE,
    SKY_BLUE,
    VERMILLION,
    YELLOW,
];

/// Colour of the `i`-th series; cycles after seven.
pub fn series(i: usize) -> &'static str {
    SERIES[i % SERIES.len()]
}
