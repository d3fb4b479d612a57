//! Colour arithmetic for the palettes: sRGB encoding, OKLab, CIELAB and the
//! CIEDE2000 colour difference.
//!
//! The palettes are designed in OKLab (perceptually even steps) and checked in
//! CIELAB with CIEDE2000 (the difference formula colour science uses to say
//! whether two colours can be told apart). Everything here is plain `f64`
//! arithmetic on 8-bit sRGB colours; nothing allocates.
//!
//! Sources:
//! - sRGB transfer function and primaries: IEC 61966-2-1:1999 (D65 white).
//! - OKLab: B. Ottosson, "A perceptual color space for image processing" (2020),
//!   matrices as published there (typed from memory; the round-trip and the
//!   white-point tests below check them).
//! - CIELAB: CIE 15:2004, with the D65 white of IEC 61966-2-1.
//! - CIEDE2000: G. Sharma, W. Wu, E. N. Dalal, "The CIEDE2000 color-difference
//!   formula: implementation notes, supplementary test data, and mathematical
//!   observations", Color Research & Application 30(1), 21–30 (2005).

use std::fmt;

/// An 8-bit sRGB colour, written `#rrggbb`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct Rgb8 {
    /// Red, 0–255.
    pub r: u8,
    /// Green, 0–255.
    pub g: u8,
    /// Blue, 0–255.
    pub b: u8,
}

impl Rgb8 {
    /// A colour from its three channels.
    pub const fn new(r: u8, g: u8, b: u8) -> Rgb8 {
        Rgb8 { r, g, b }
    }

    /// A colour from `0xRRGGBB`.
    pub const fn from_hex(hex: u32) -> Rgb8 {
        Rgb8 {
            r: ((hex >> 16) & 0xff) as u8,
            g: ((hex >> 8) & 0xff) as u8,
            b: (hex & 0xff) as u8,
        }
    }

    /// Linear-light RGB in 0–1 (IEC 61966-2-1 transfer function).
    pub fn to_linear(self) -> [f64; 3] {
        [self.r, self.g, self.b].map(|c| srgb_to_linear(f64::from(c) / 255.0))
    }

    /// The nearest 8-bit colour to a linear-light RGB triple, clipped to the gamut.
    pub fn from_linear(linear: [f64; 3]) -> Rgb8 {
        let [r, g, b] = linear.map(|c| {
            let encoded = linear_to_srgb(c.clamp(0.0, 1.0));
            // In 0..=255 after the clamp, so the cast cannot wrap.
            (encoded * 255.0).round() as u8
        });
        Rgb8 { r, g, b }
    }

    /// CIELAB (D65) of this colour.
    pub fn to_lab(self) -> Lab {
        lab_from_linear(self.to_linear())
    }
}

impl fmt::Display for Rgb8 {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "#{:02x}{:02x}{:02x}", self.r, self.g, self.b)
    }
}

/// A CIELAB colour: lightness `l` (0–100) and the opponent axes `a`, `b`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Lab {
    /// Lightness L*.
    pub l: f64,
    /// Green–red axis a*.
    pub a: f64,
    /// Blue–yellow axis b*.
    pub b: f64,
}

/// An OKLab colour: lightness `l` (0–1) and the opponent axes `a`, `b`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Oklab {
    /// Lightness.
    pub l: f64,
    /// Green–red axis.
    pub a: f64,
    /// Blue–yellow axis.
    pub b: f64,
}

impl Oklab {
    /// OKLab from lightness, chroma and hue angle in degrees (the polar "OKLCh" form).
    pub fn from_lch(lightness: f64, chroma: f64, hue_degrees: f64) -> Oklab {
        let hue = hue_degrees.to_radians();
        Oklab {
            l: lightness,
            a: chroma * hue.cos(),
            b: chroma * hue.sin(),
        }
    }

    /// OKLab of linear-light sRGB (Ottosson 2020).
    pub fn from_linear([r, g, b]: [f64; 3]) -> Oklab {
        let l = 0.412_221_470_8 * r + 0.536_332_536_3 * g + 0.051_445_992_9 * b;
        let m = 0.211_903_498_2 * r + 0.680_699_545_1 * g + 0.107_396_956_6 * b;
        let s = 0.088_302_461_9 * r + 0.281_718_837_6 * g + 0.629_978_700_5 * b;
        let (l, m, s) = (l.cbrt(), m.cbrt(), s.cbrt());
        Oklab {
            l: 0.210_454_255_3 * l + 0.793_617_785_0 * m - 0.004_072_046_8 * s,
            a: 1.977_998_495_1 * l - 2.428_592_205_0 * m + 0.450_593_709_9 * s,
            b: 0.025_904_037_1 * l + 0.782_771_766_2 * m - 0.808_675_766_0 * s,
        }
    }

    /// Linear-light sRGB of this colour (may fall outside 0–1: out of gamut).
    pub fn to_linear(self) -> [f64; 3] {
        let l = self.l + 0.396_337_777_4 * self.a + 0.215_803_757_3 * self.b;
        let m = self.l - 0.105_561_345_8 * self.a - 0.063_854_172_8 * self.b;
        let s = self.l - 0.089_484_177_5 * self.a - 1.291_485_548_0 * self.b;
        let (l, m, s) = (l * l * l, m * m * m, s * s * s);
        [
            4.076_741_662_1 * l - 3.307_711_591_3 * m + 0.230_969_929_2 * s,
            -1.268_438_004_6 * l + 2.609_757_401_1 * m - 0.341_319_396_5 * s,
            -0.004_196_086_3 * l - 0.703_418_614_7 * m + 1.707_614_701_0 * s,
        ]
    }

    /// Whether this colour is inside the sRGB gamut (with a small tolerance).
    pub fn in_gamut(self) -> bool {
        self.to_linear()
            .iter()
            .all(|c| (-1e-4..=1.0 + 1e-4).contains(c))
    }
}

/// IEC 61966-2-1 decoding: encoded 0–1 to linear 0–1.
pub fn srgb_to_linear(encoded: f64) -> f64 {
    if encoded <= 0.040_45 {
        encoded / 12.92
    } else {
        ((encoded + 0.055) / 1.055).powf(2.4)
    }
}

/// IEC 61966-2-1 encoding: linear 0–1 to encoded 0–1.
pub fn linear_to_srgb(linear: f64) -> f64 {
    if linear <= 0.003_130_8 {
        linear * 12.92
    } else {
        1.055 * linear.powf(1.0 / 2.4) - 0.055
    }
}

/// CIELAB (D65) of linear-light sRGB, through CIE XYZ.
pub fn lab_from_linear([r, g, b]: [f64; 3]) -> Lab {
    // IEC 61966-2-1 primaries, D65 white (Xn, Yn, Zn) = (0.95047, 1, 1.08883).
    let x = 0.412_456_4 * r + 0.357_576_1 * g + 0.180_437_5 * b;
    let y = 0.212_672_9 * r + 0.715_152_2 * g + 0.072_175_0 * b;
    let z = 0.019_333_9 * r + 0.119_192_0 * g + 0.950_304_1 * b;
    let f = |t: f64| {
        let delta: f64 = 6.0 / 29.0;
        if t > delta * delta * delta {
            t.cbrt()
        } else {
            t / (3.0 * delta * delta) + 4.0 / 29.0
        }
    };
    let (fx, fy, fz) = (f(x / 0.950_47), f(y), f(z / 1.088_83));
    Lab {
        l: 116.0 * fy - 16.0,
        a: 500.0 * (fx - fy),
        b: 200.0 * (fy - fz),
    }
}

/// CIEDE2000 colour difference ΔE00 with kL = kC = kH = 1 (Sharma, Wu & Dalal 2005).
///
/// About 1 is a just-noticeable difference side by side; map classes need far more.
pub fn delta_e_2000(first: Lab, second: Lab) -> f64 {
    use std::f64::consts::PI;
    let c1 = first.a.hypot(first.b);
    let c2 = second.a.hypot(second.b);
    let c_mean = (c1 + c2) / 2.0;
    let c_mean7 = c_mean.powi(7);
    let g = 0.5 * (1.0 - (c_mean7 / (c_mean7 + 25f64.powi(7))).sqrt());
    let a1 = (1.0 + g) * first.a;
    let a2 = (1.0 + g) * second.a;
    let c1p = a1.hypot(first.b);
    let c2p = a2.hypot(second.b);
    let hue = |b: f64, a: f64| {
        if b == 0.0 && a == 0.0 {
            0.0
        } else {
            let h = b.atan2(a);
            if h < 0.0 {
                h + 2.0 * PI
            } else {
                h
            }
        }
    };
    let h1p = hue(first.b, a1);
    let h2p = hue(second.b, a2);
    let dl = second.l - first.l;
    let dc = c2p - c1p;
    let dh_angle = if c1p * c2p == 0.0 {
        0.0
    } else {
        let d = h2p - h1p;
        if d > PI {
            d - 2.0 * PI
        } else if d < -PI {
            d + 2.0 * PI
        } else {
            d
        }
    };
    let dh = 2.0 * (c1p * c2p).sqrt() * (dh_angle / 2.0).sin();
    let l_mean = (first.l + second.l) / 2.0;
    let cp_mean = (c1p + c2p) / 2.0;
    let hp_mean = if c1p * c2p == 0.0 {
        h1p + h2p
    } else if (h1p - h2p).abs() <= PI {
        (h1p + h2p) / 2.0
    } else if h1p + h2p < 2.0 * PI {
        (h1p + h2p + 2.0 * PI) / 2.0
    } else {
        (h1p + h2p - 2.0 * PI) / 2.0
    };
    let t = 1.0 - 0.17 * (hp_mean - 30f64.to_radians()).cos()
        + 0.24 * (2.0 * hp_mean).cos()
        + 0.32 * (3.0 * hp_mean + 6f64.to_radians()).cos()
        - 0.20 * (4.0 * hp_mean - 63f64.to_radians()).cos();
    let d_theta = 30f64.to_radians() * (-((hp_mean.to_degrees() - 275.0) / 25.0).powi(2)).exp();
    let cp_mean7 = cp_mean.powi(7);
    let rc = 2.0 * (cp_mean7 / (cp_mean7 + 25f64.powi(7))).sqrt();
    let l50 = (l_mean - 50.0).powi(2);
    let sl = 1.0 + 0.015 * l50 / (20.0 + l50).sqrt();
    let sc = 1.0 + 0.045 * cp_mean;
    let sh = 1.0 + 0.015 * cp_mean * t;
    let rt = -(2.0 * d_theta).sin() * rc;
    let (tl, tc, th) = (dl / sl, dc / sc, dh / sh);
    (tl * tl + tc * tc + th * th + rt * tc * th).sqrt()
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn ciede2000_matches_sharma_wu_dalal_table_1() {
        // Source: Sharma, Wu & Dalal (2005), Table 1, pairs 1-4, 7-9 and 13
        // (hue wrap-around and the near-neutral cases); expected values to 4 decimals.
        let pairs = [
            ((50.0, 2.6772, -79.7751), (50.0, 0.0, -82.7485), 2.0425),
            ((50.0, 3.1571, -77.2803), (50.0, 0.0, -82.7485), 2.8615),
            ((50.0, 2.8361, -74.0200), (50.0, 0.0, -82.7485), 3.4412),
            ((50.0, -1.3802, -84.2814), (50.0, 0.0, -82.7485), 1.0000),
            ((50.0, 0.0, 0.0), (50.0, -1.0, 2.0), 2.3669),
            ((50.0, -1.0, 2.0), (50.0, 0.0, 0.0), 2.3669),
            ((50.0, 2.4900, -0.0010), (50.0, -2.4900, 0.0009), 7.1792),
            ((50.0, -0.0010, 2.4900), (50.0, 0.0009, -2.4900), 4.8045),
        ];
        for ((l1, a1, b1), (l2, a2, b2), expected) in pairs {
            let got = delta_e_2000(
                Lab {
                    l: l1,
                    a: a1,
                    b: b1,
                },
                Lab {
                    l: l2,
                    a: a2,
                    b: b2,
                },
            );
            assert_relative_eq!(got, expected, epsilon = 1e-4);
        }
    }

    #[test]
    fn srgb_red_in_cielab_and_white_in_oklab() {
        // sRGB red in CIELAB D65 is (53.24, 80.09, 67.20): a textbook value,
        // from memory (common practice, no source at hand).
        let red = Rgb8::from_hex(0xff0000).to_lab();
        assert_relative_eq!(red.l, 53.24, epsilon = 0.01);
        assert_relative_eq!(red.a, 80.09, epsilon = 0.02);
        assert_relative_eq!(red.b, 67.20, epsilon = 0.02);
        // Ottosson (2020): white is L = 1, a = b = 0; red is (0.628, 0.225, 0.126)
        // (the latter from memory).
        let white = Oklab::from_linear([1.0, 1.0, 1.0]);
        assert_relative_eq!(white.l, 1.0, epsilon = 1e-4);
        assert_relative_eq!(white.a, 0.0, epsilon = 1e-4);
        assert_relative_eq!(white.b, 0.0, epsilon = 1e-4);
        let red = Oklab::from_linear([1.0, 0.0, 0.0]);
        assert_relative_eq!(red.l, 0.628, epsilon = 1e-3);
        assert_relative_eq!(red.a, 0.225, epsilon = 1e-3);
        assert_relative_eq!(red.b, 0.126, epsilon = 1e-3);
    }

    #[test]
    fn oklab_and_srgb_round_trip() {
        for hex in [0x000000, 0x123456, 0xabcdef, 0xff8800, 0x00ff00, 0xffffff] {
            let colour = Rgb8::from_hex(hex);
            let back = Rgb8::from_linear(Oklab::from_linear(colour.to_linear()).to_linear());
            assert_eq!(back, colour);
        }
        assert_eq!(Rgb8::from_hex(0x0a0b0c).to_string(), "#0a0b0c");
    }
}
