//! The map colours: a qualitative fold palette, a sequential ramp for absolute
//! errors, a diverging ramp for residuals, and the three styles of a fold's split.
//!
//! All colours are geofold's own design, made in OKLab (Ottosson 2020, see
//! [`colour`](super::colour)) so that equal steps look equal:
//!
//! - **Folds** ([`FOLD_COLOURS`]): twelve colours chosen by a farthest-point search
//!   over the sRGB cube (channel steps of 17), where the distance between two
//!   colours is the *smallest* CIEDE2000 difference seen by normal vision and by
//!   simulated protanopia, deuteranopia and tritanopia (Machado, Oliveira &
//!   Fernandes 2009). The search starts from white (the page) and
//!   [`NO_VALUE`] and keeps CIELAB lightness within 40–90 and chroma within 15–65
//!   (no greys, which read as "no data", and no glaring neon); each colour added is the one farthest from all chosen so
//!   far, so the first K colours are the best K for K folds. The test
//!   `fold_palette_is_the_search_result` re-runs the search. Beyond twelve folds
//!   the colours repeat with a rule: fold `k` takes colour `(k - 1) % 12`, folds
//!   13–24 add a diagonal hatch and folds 25 and up a cross-hatch
//!   ([`fold_style`]); the legend and the fold numbers on the regions carry the rest.
//! - **Absolute error** ([`sequential`]): light to dark, sand through rust to plum:
//!   OKLCh lightness 0.93 → 0.38 linearly, hue 95° → −30°, chroma rising from
//!   0.05 to a peak near 0.18, reduced where it would leave the sRGB gamut. More
//!   error is darker, which stays true for every colour-vision deficiency.
//! - **Residual** ([`diverging`]): a light neutral grey centre class, blue (hue
//!   255° → 265°) for negative residuals (observed below predicted: the model
//!   predicted too high) and orange-brown (hue 62° → 45°) for positive ones, with
//!   lightness falling 0.89 → 0.45 on both sides so that equal distances from zero
//!   look equally strong. Blue against orange survives all three dichromacies.
//! - **Split** ([`SPLIT_TEST`], [`SPLIT_TRAINING`], [`SPLIT_EXCLUDED_HATCH`]): test
//!   units solid dark crimson, training units pale blue-grey, excluded units white
//!   with a grey diagonal hatch: they differ in lightness and texture, not only hue.
//!
//! The lightest classes stop short of white so that they stay apart from the page.
//! The tests in `palette/tests.rs` check every pair of classes in every palette,
//! with the background and [`NO_VALUE`], under normal vision and the three
//! simulated dichromacies, against one minimum CIEDE2000 difference
//! ([`MIN_DELTA_E00`]).

/// The smallest CIEDE2000 difference any two classes of one palette may have,
/// under normal vision and each simulated dichromacy: several times the ΔE00 ≈ 1
/// of a just-noticeable difference, so that classes can be told apart on a map.
/// geofold's own threshold (common practice, no source).
pub const MIN_DELTA_E00: f64 = 7.5;

use super::colour::{Oklab, Rgb8};

/// Fold colours, in the order the farthest-point search chose them.
pub const FOLD_COLOURS: [Rgb8; 12] = [
    Rgb8::from_hex(0x885500),
    Rgb8::from_hex(0x4455bb),
    Rgb8::from_hex(0xffaa55),
    Rgb8::from_hex(0x00aaff),
    Rgb8::from_hex(0xdd4466),
    Rgb8::from_hex(0xaaccaa),
    Rgb8::from_hex(0x9977aa),
    Rgb8::from_hex(0xddbbdd),
    Rgb8::from_hex(0xaa8800),
    Rgb8::from_hex(0x008866),
    Rgb8::from_hex(0x775577),
    Rgb8::from_hex(0x99ee99),
];

/// Units with no value for the layer drawn (no fold, no error, no residual).
pub const NO_VALUE: Rgb8 = Rgb8::from_hex(0x9a9a9a);

/// The page and map background.
pub const BACKGROUND: Rgb8 = Rgb8::from_hex(0xffffff);

/// Dark ink for text, outlines, the scale bar and the north arrow.
pub const INK: Rgb8 = Rgb8::from_hex(0x222222);

/// Test units of the fold shown in a split map: OKLCh(0.48, 0.15, 10°).
pub const SPLIT_TEST: Rgb8 = Rgb8::from_hex(0x9f2d4a);

/// Training units of the fold shown: OKLCh(0.88, 0.035, 240°).
pub const SPLIT_TRAINING: Rgb8 = Rgb8::from_hex(0xc4dbed);

/// Hatch lines over the white fill of excluded units.
pub const SPLIT_EXCLUDED_HATCH: Rgb8 = Rgb8::from_hex(0x5f5f5f);

/// How many folds have a colour of their own.
pub const FOLD_COLOUR_COUNT: u32 = FOLD_COLOURS.len() as u32;

/// The overlay a fold beyond the twelfth gets on top of its repeated colour.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Overlay {
    /// Folds 1–12: plain colour.
    None,
    /// Folds 13–24: diagonal hatch.
    Hatch,
    /// Folds 25 and up: cross-hatch.
    CrossHatch,
}

/// Colour and overlay of fold `fold` (numbered from 1; fold 0 is treated as 1).
pub fn fold_style(fold: u32) -> (Rgb8, Overlay) {
    let index = fold.saturating_sub(1);
    let colour = FOLD_COLOURS[(index % FOLD_COLOUR_COUNT) as usize];
    let overlay = match index / FOLD_COLOUR_COUNT {
        0 => Overlay::None,
        1 => Overlay::Hatch,
        _ => Overlay::CrossHatch,
    };
    (colour, overlay)
}

/// Most classes the sequential ramp is sampled for.
pub const MAX_SEQUENTIAL_CLASSES: usize = 7;

/// Most classes on each side of the diverging ramp's centre.
pub const MAX_DIVERGING_SIDE: usize = 4;

/// `classes` colours (1–7) from light (least error) to dark (most error).
pub fn sequential(classes: usize) -> Vec<Rgb8> {
    let classes = classes.clamp(1, MAX_SEQUENTIAL_CLASSES);
    (0..classes)
        .map(|i| {
            let t = if classes == 1 {
                0.5
            } else {
                i as f64 / (classes - 1) as f64
            };
            let lightness = 0.93 - 0.55 * t;
            let hue = 95.0 - 125.0 * t;
            let chroma = 0.05 + 0.10 * t + 0.06 * (std::f64::consts::PI * t).sin();
            in_gamut(lightness, chroma, hue)
        })
        .collect()
}

/// `2 * side + 1` colours (side 1–4): the negative side from darkest to lightest,
/// the neutral centre, then the positive side from lightest to darkest.
pub fn diverging(side: usize) -> Vec<Rgb8> {
    let side = side.clamp(1, MAX_DIVERGING_SIDE);
    let arm = |hue_near: f64, hue_far: f64| -> Vec<Rgb8> {
        (1..=side)
            .map(|j| {
                let t = j as f64 / side as f64;
                let lightness = 0.89 - 0.44 * t;
                let chroma = 0.025 + 0.12 * t;
                in_gamut(lightness, chroma, hue_near + (hue_far - hue_near) * t)
            })
            .collect()
    };
    let mut colours: Vec<Rgb8> = arm(255.0, 265.0).into_iter().rev().collect();
    colours.push(in_gamut(0.89, 0.004, 90.0));
    colours.extend(arm(62.0, 45.0));
    colours
}

/// The colour at the given OKLCh, with chroma reduced in small steps until it is
/// inside the sRGB gamut (hue and lightness kept: they carry the meaning).
fn in_gamut(lightness: f64, chroma: f64, hue_degrees: f64) -> Rgb8 {
    let mut chroma = chroma;
    loop {
        let colour = Oklab::from_lch(lightness, chroma, hue_degrees);
        if colour.in_gamut() || chroma <= 0.0 {
            return Rgb8::from_linear(colour.to_linear());
        }
        chroma -= 0.002;
    }
}

#[cfg(test)]
mod tests;
