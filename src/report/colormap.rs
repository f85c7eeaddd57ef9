//! A perceptually ordered, colour-blind-safe scale for heat maps and uncertainty pictures.
//!
//! Piecewise-linear in sRGB through nine samples of matplotlib's *viridis* (van der Walt &
//! Smith, 2015), taken at 0, 1/8, …, 1 of its 256-entry table: dark blue-violet → teal → yellow,
//! monotone in lightness, so it reads the same in grey and to the common colour-vision
//! deficiencies. The samples are the published table's values at those positions, from
//! memory, rounded to bytes; the test checks the ends against the well-known #440154 and
//! #fde725 and that lightness rises monotonically.

/// viridis at t = 0, 0.125, …, 1.
const VIRIDIS: [[u8; 3]; 9] = [
    [68, 1, 84],    // #440154
    [71, 45, 123],  // #472d7b
    [59, 82, 139],  // #3b528b
    [44, 114, 142], // #2c728e
    [33, 145, 140], // #21918c
    [39, 173, 129], // #27ad81
    [94, 201, 98],  // #5ec962
    [170, 220, 50], // #aadc32
    [253, 231, 37], // #fde725
];

/// The scale's colour at `t` in [0, 1] (clamped; NaN counts as 0).
pub fn viridis(t: f32) -> [u8; 3] {
    let t = if t.is_nan() { 0.0 } else { t.clamp(0.0, 1.0) };
    let x = t * (VIRIDIS.len() - 1) as f32;
    let i = (x.floor() as usize).min(VIRIDIS.len() - 2);
    let f = x - i as f32;
    let (a, b) = (VIRIDIS[i], VIRIDIS[i + 1]);
    std::array::from_fn(|k| (a[k] as f32 + (b[k] as f32 - a[k] as f32) * f).round() as u8)
}

/// `#rrggbb` of [`viridis`]`(t)`.
pub fn viridis_hex(t: f32) -> String {
    let [r, g, b] = viridis(t);
    format!("#{r:02x}{g:02x}{b:02x}")
}

/// Relative luminance (WCAG 2.x definition) of an sRGB colour, in [0, 1].
pub fn luminance(c: [u8; 3]) -> f32 {
    let lin = |v: u8| {
        let v = v as f32 / 255.0;
        if v <= 0.04045 {
            v / 12.92
        } else {
            ((v + 0.055) / 1.055).powf(2.4)
        }
    };
    0.2126 * lin(c[0]) + 0.7152 * lin(c[1]) + 0.0722 * lin(c[2])
}

/// Black or white, whichever reads better on `background` (higher WCAG contrast ratio).
pub fn text_on(background: [u8; 3]) -> &'static str {
    let l = luminance(background);
    // Contrast with black (l + 0.05) / 0.05 vs with white 1.05 / (l + 0.05).
    if (l + 0.05) / 0.05 >= 1.05 / (l + 0.05) {
        "#000"
    } else {
        "#fff"
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ends_and_monotone_lightness() {
        assert_eq!(viridis_hex(0.0), "#440154");
        assert_eq!(viridis_hex(1.0), "#fde725");
        assert_eq!(viridis(-3.0), viridis(0.0));
        assert_eq!(viridis(f32::NAN), viridis(0.0));
        let mut last = -1.0;
        for i in 0..=100 {
            let l = luminance(viridis(i as f32 / 100.0));
            assert!(l > last, "lightness must rise at t = {}", i as f32 / 100.0);
            last = l;
        }
        assert_eq!(text_on(viridis(0.0)), "#fff");
        assert_eq!(text_on(viridis(1.0)), "#000");
    }
}
