//! Simulated colour-vision deficiency, for the palette tests.
//!
//! Uses the physiologically based model of G. M. Machado, M. M. Oliveira and
//! L. A. F. Fernandes, "A physiologically-based model for simulation of color
//! vision deficiency", IEEE Transactions on Visualization and Computer Graphics
//! 15(6), 1291–1298 (2009), at severity 1.0 (dichromacy). The three matrices are
//! the published severity-1.0 matrices (typed from memory, then compared with the
//! table as the colour-science project ships it); they act on linear-light RGB.
//! Only the tests use this: it is how the palettes prove they stay apart.

use super::colour::{lab_from_linear, Lab, Rgb8};

/// The three dichromacies the palettes are checked against.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Deficiency {
    /// No L cones (red-blind).
    Protanopia,
    /// No M cones (green-blind).
    Deuteranopia,
    /// No S cones (blue-blind).
    Tritanopia,
}

impl Deficiency {
    /// All three, in a fixed order.
    pub const ALL: [Deficiency; 3] = [
        Deficiency::Protanopia,
        Deficiency::Deuteranopia,
        Deficiency::Tritanopia,
    ];

    fn matrix(self) -> [[f64; 3]; 3] {
        match self {
            Deficiency::Protanopia => [
                [0.152_286, 1.052_583, -0.204_868],
                [0.114_503, 0.786_281, 0.099_216],
                [-0.003_882, -0.048_116, 1.051_998],
            ],
            Deficiency::Deuteranopia => [
                [0.367_322, 0.860_646, -0.227_968],
                [0.280_085, 0.672_501, 0.047_413],
                [-0.011_820, 0.042_940, 0.968_881],
            ],
            Deficiency::Tritanopia => [
                [1.255_528, -0.076_749, -0.178_779],
                [-0.078_411, 0.930_809, 0.147_602],
                [0.004_733, 0.691_367, 0.303_900],
            ],
        }
    }
}

/// How a colour looks with the given deficiency, as CIELAB.
pub fn simulate(colour: Rgb8, deficiency: Deficiency) -> Lab {
    let linear = colour.to_linear();
    let m = deficiency.matrix();
    let out = [0, 1, 2].map(|row| {
        (m[row][0] * linear[0] + m[row][1] * linear[1] + m[row][2] * linear[2]).clamp(0.0, 1.0)
    });
    lab_from_linear(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::colour::delta_e_2000;

    #[test]
    fn greys_are_unchanged_and_red_green_collapse() {
        // Each matrix row sums to 1 (Machado et al. 2009 normalise so), so greys stay grey.
        for deficiency in Deficiency::ALL {
            let grey = Rgb8::from_hex(0x808080);
            assert!(delta_e_2000(simulate(grey, deficiency), grey.to_lab()) < 0.5);
        }
        // Red and green, far apart to normal vision, come close for a protanope and a
        // deuteranope, far less so for a tritanope (what red-green deficiency means).
        let (red, green) = (Rgb8::from_hex(0xcc3311), Rgb8::from_hex(0x44aa00));
        let normal = delta_e_2000(red.to_lab(), green.to_lab());
        let protan = delta_e_2000(
            simulate(red, Deficiency::Protanopia),
            simulate(green, Deficiency::Protanopia),
        );
        let deutan = delta_e_2000(
            simulate(red, Deficiency::Deuteranopia),
            simulate(green, Deficiency::Deuteranopia),
        );
        let tritan = delta_e_2000(
            simulate(red, Deficiency::Tritanopia),
            simulate(green, Deficiency::Tritanopia),
        );
        assert!(normal > 50.0, "normal {normal}");
        assert!(protan < normal / 2.0, "protan {protan} normal {normal}");
        assert!(deutan < normal / 2.0, "deutan {deutan} normal {normal}");
        assert!(
            tritan > 1.5 * protan.max(deutan),
            "tritan {tritan} protan {protan} deutan {deutan}"
        );
    }
}
