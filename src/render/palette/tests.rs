//! Palette tests: reproducibility of the design and CVD distinguishability.

use super::*;
use crate::render::colour::{delta_e_2000, Lab};
use crate::render::cvd::{simulate, Deficiency};

/// The colour as seen by normal vision and each simulated dichromacy.
fn views(colour: Rgb8) -> [Lab; 4] {
    [
        colour.to_lab(),
        simulate(colour, Deficiency::Protanopia),
        simulate(colour, Deficiency::Deuteranopia),
        simulate(colour, Deficiency::Tritanopia),
    ]
}

/// Smallest CIEDE2000 difference over the four views.
fn worst_difference(first: &[Lab; 4], second: &[Lab; 4]) -> f64 {
    (0..4)
        .map(|v| delta_e_2000(first[v], second[v]))
        .fold(f64::INFINITY, f64::min)
}

/// The farthest-point search described in the module doc.
pub(super) fn search_fold_colours() -> Vec<Rgb8> {
    let levels: Vec<u8> = (0..=15).map(|i| i * 17).collect();
    let mut candidates = Vec::new();
    for &r in &levels {
        for &g in &levels {
            for &b in &levels {
                let colour = Rgb8::new(r, g, b);
                let lab = colour.to_lab();
                let chroma = lab.a.hypot(lab.b);
                if (40.0..=90.0).contains(&lab.l) && (15.0..=65.0).contains(&chroma) {
                    candidates.push((colour, views(colour)));
                }
            }
        }
    }
    let mut chosen_views = vec![views(BACKGROUND), views(NO_VALUE)];
    let mut nearest: Vec<f64> = candidates
        .iter()
        .map(|(_, v)| {
            chosen_views
                .iter()
                .map(|c| worst_difference(v, c))
                .fold(f64::INFINITY, f64::min)
        })
        .collect();
    let mut chosen = Vec::new();
    for _ in 0..FOLD_COLOURS.len() {
        // Ties go to the first candidate in grid order, so the search is deterministic.
        let mut best = 0;
        for (i, d) in nearest.iter().enumerate() {
            if *d > nearest[best] {
                best = i;
            }
        }
        let (colour, best_views) = candidates[best];
        chosen.push(colour);
        chosen_views.push(best_views);
        for (i, (_, v)) in candidates.iter().enumerate() {
            nearest[i] = nearest[i].min(worst_difference(v, &best_views));
        }
    }
    chosen
}

/// The smallest worst-view difference over all pairs, with the pair, for messages.
fn closest_pair(colours: &[Rgb8]) -> (f64, Rgb8, Rgb8) {
    let seen: Vec<[Lab; 4]> = colours.iter().map(|c| views(*c)).collect();
    let mut closest = (f64::INFINITY, BACKGROUND, BACKGROUND);
    for i in 0..colours.len() {
        for j in 0..i {
            let d = worst_difference(&seen[i], &seen[j]);
            if d < closest.0 {
                closest = (d, colours[i], colours[j]);
            }
        }
    }
    closest
}

fn assert_distinguishable(name: &str, colours: &[Rgb8]) {
    let (d, first, second) = closest_pair(colours);
    assert!(
        d >= MIN_DELTA_E00,
        "{name}: {first} and {second} are only {d:.2} ΔE00 apart in some view"
    );
}

#[test]
fn fold_palette_is_the_search_result() {
    assert_eq!(search_fold_colours(), FOLD_COLOURS.to_vec());
}

#[test]
fn fold_colours_stay_apart_for_every_colour_vision_deficiency() {
    // Machado et al. (2009) severity 1.0, CIEDE2000 (Sharma et al. 2005).
    let mut colours = FOLD_COLOURS.to_vec();
    colours.extend([BACKGROUND, NO_VALUE]);
    assert_distinguishable("folds", &colours);
}

#[test]
fn sequential_classes_stay_apart_for_every_colour_vision_deficiency() {
    for classes in 2..=MAX_SEQUENTIAL_CLASSES {
        let mut colours = sequential(classes);
        assert_eq!(colours.len(), classes);
        colours.extend([BACKGROUND, NO_VALUE]);
        assert_distinguishable(&format!("sequential, {classes} classes"), &colours);
    }
}

#[test]
fn sequential_ramp_darkens_monotonically() {
    // More error must look darker in every view, not only different.
    for classes in 2..=MAX_SEQUENTIAL_CLASSES {
        let ramp = sequential(classes);
        for pair in ramp.windows(2) {
            let (a, b) = (views(pair[0]), views(pair[1]));
            for view in 0..4 {
                assert!(b[view].l < a[view].l - 3.0, "{} then {}", pair[0], pair[1]);
            }
        }
    }
}

#[test]
fn diverging_classes_stay_apart_and_mirror_in_lightness() {
    for side in 1..=MAX_DIVERGING_SIDE {
        let ramp = diverging(side);
        assert_eq!(ramp.len(), 2 * side + 1);
        // Equal distances from zero look equally strong: mirrored classes within 2 L*.
        for j in 0..side {
            let (negative, positive) = (ramp[j].to_lab().l, ramp[2 * side - j].to_lab().l);
            assert!((negative - positive).abs() < 2.0, "side {side}, class {j}");
        }
        let mut colours = ramp;
        colours.extend([BACKGROUND, NO_VALUE]);
        assert_distinguishable(&format!("diverging, {side} per side"), &colours);
    }
}

#[test]
fn split_styles_stay_apart_for_every_colour_vision_deficiency() {
    // Excluded units are white under the hatch, so the background stands for them.
    assert_distinguishable(
        "split",
        &[
            SPLIT_TEST,
            SPLIT_TRAINING,
            BACKGROUND,
            NO_VALUE,
            SPLIT_EXCLUDED_HATCH,
        ],
    );
}

#[test]
fn the_closest_pair_check_can_fail() {
    // Red and green that a deuteranope confuses: the check must say so.
    let (d, _, _) = closest_pair(&[Rgb8::from_hex(0xb35806), Rgb8::from_hex(0x6d8f00)]);
    assert!(d < MIN_DELTA_E00, "{d}");
}

#[test]
fn folds_beyond_twelve_repeat_with_an_overlay() {
    assert_eq!(fold_style(1), (FOLD_COLOURS[0], Overlay::None));
    assert_eq!(fold_style(12), (FOLD_COLOURS[11], Overlay::None));
    assert_eq!(fold_style(13), (FOLD_COLOURS[0], Overlay::Hatch));
    assert_eq!(fold_style(25), (FOLD_COLOURS[0], Overlay::CrossHatch));
}
