//! Seeded lattice hashing, 2-D value noise and fractal (fBm) sums of it.
//!
//! The demo scene needs textures at chosen spatial scales (gravel speckle at ~1 px, clods
//! at ~3 px, soil mottling at ~50 px). Value noise is the simplest band-limited noise whose
//! scale is set by one number, and because every value is a pure function of
//! `(seed, x, y)` the rendering is deterministic whatever the rayon thread count.

/// A 64-bit hash of a lattice point, the SplitMix64 finaliser (Steele, Lea & Flood 2014,
/// "Fast splittable pseudorandom number generators") applied to the seed mixed with both
/// coordinates by odd multipliers, so that neighbouring lattice points decorrelate.
#[inline]
pub fn lattice_hash(seed: u64, x: i32, y: i32) -> u64 {
    let mut h = seed
        ^ (x as u32 as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15)
        ^ (y as u32 as u64)
            .wrapping_mul(0xC2B2_AE3D_27D4_EB4F)
            .rotate_left(31);
    h = (h ^ (h >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    h = (h ^ (h >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    h ^ (h >> 31)
}

/// The lattice hash mapped to `[0, 1)`: the top 24 bits divided by 2^24 (exact in f32).
#[inline]
pub fn lattice_unit(seed: u64, x: i32, y: i32) -> f32 {
    (lattice_hash(seed, x, y) >> 40) as f32 * (1.0 / 16_777_216.0)
}

/// The cubic fade `3t² − 2t³` (smoothstep), which makes value noise C¹ across lattice cells.
#[inline]
fn fade(t: f32) -> f32 {
    t * t * (3.0 - 2.0 * t)
}

/// Value noise in `[0, 1)`: the four lattice values around `(x, y)` (lattice spacing 1)
/// blended bilinearly with the smoothstep fade of the fractional offsets. Equals
/// [`lattice_unit`] exactly at integer points. Works for any finite coordinates.
#[inline]
pub fn value_noise(seed: u64, x: f32, y: f32) -> f32 {
    let (fx, fy) = (x.floor(), y.floor());
    let (ix, iy) = (fx as i32, fy as i32);
    let (tx, ty) = (fade(x - fx), fade(y - fy));
    let v00 = lattice_unit(seed, ix, iy);
    let v10 = lattice_unit(seed, ix.wrapping_add(1), iy);
    let v01 = lattice_unit(seed, ix, iy.wrapping_add(1));
    let v11 = lattice_unit(seed, ix.wrapping_add(1), iy.wrapping_add(1));
    let top = v00 + (v10 - v00) * tx;
    let bottom = v01 + (v11 - v01) * tx;
    top + (bottom - top) * ty
}

/// Fractal Brownian motion in `[0, 1)`: `Σ_k 0.5^k · value_noise(seed_k, 2^k·x/scale,
/// 2^k·y/scale)` for `k < octaves`, divided by `Σ_k 0.5^k`. `scale` is the feature size of
/// the coarsest octave in pixels; each octave uses its own derived seed so that octaves do
/// not share lattice values at the origin. `octaves == 0` gives 0.5.
#[inline]
pub fn fbm(seed: u64, x: f32, y: f32, scale: f32, octaves: u32) -> f32 {
    let (mut sum, mut norm, mut amp, mut freq) = (0.0f32, 0.0f32, 1.0f32, 1.0 / scale);
    for k in 0..octaves {
        let s = seed.wrapping_add(u64::from(k).wrapping_mul(0xA076_1D64_78BD_642F));
        sum += amp * value_noise(s, x * freq, y * freq);
        norm += amp;
        amp *= 0.5;
        freq *= 2.0;
    }
    if norm > 0.0 {
        sum / norm
    } else {
        0.5
    }
}

/// An approximately standard-normal value per pixel: the Irwin–Hall sum of four
/// independent `[0,1)` hashes, centred and scaled to unit variance (variance of the sum of
/// n uniforms is n/12, so the factor is √3). Used for sensor noise; the tails are bounded
/// (|z| ≤ 2√3), which is fine for 8-bit output.
#[inline]
pub fn pixel_gaussian(seed: u64, x: i32, y: i32) -> f32 {
    let h1 = lattice_hash(seed, x, y);
    let h2 = lattice_hash(seed ^ 0x5851_F42D_4C95_7F2D, x, y);
    let u = |h: u64, shift: u32| ((h >> shift) & 0xFF_FFFF) as f32 * (1.0 / 16_777_216.0);
    let s = u(h1, 40) + u(h1, 8) + u(h2, 40) + u(h2, 8);
    (s - 2.0) * 3f32.sqrt()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Slow reference for fBm: the definition written out with f64 and explicit powers.
    fn fbm_reference(seed: u64, x: f32, y: f32, scale: f32, octaves: u32) -> f64 {
        let mut sum = 0.0f64;
        let mut norm = 0.0f64;
        for k in 0..octaves {
            let s = seed.wrapping_add(u64::from(k).wrapping_mul(0xA076_1D64_78BD_642F));
            let f = 2f32.powi(k as i32) / scale;
            let a = 0.5f64.powi(k as i32);
            sum += a * f64::from(value_noise(s, x * f, y * f));
            norm += a;
        }
        sum / norm
    }

    #[test]
    fn value_noise_interpolates_lattice_values() {
        // Definition check: at integer points the noise is the lattice value; at a cell
        // centre smoothstep(0.5) = 0.5, so the value is the mean of the four corners.
        // Tolerance 1e-6: f32 rounding of a few additions of values < 1.
        for &(ix, iy) in &[(0, 0), (3, -7), (-100, 42), (12345, 678)] {
            let v = value_noise(9, ix as f32, iy as f32);
            assert!((v - lattice_unit(9, ix, iy)).abs() < 1e-6);
            let mean = (lattice_unit(9, ix, iy)
                + lattice_unit(9, ix + 1, iy)
                + lattice_unit(9, ix, iy + 1)
                + lattice_unit(9, ix + 1, iy + 1))
                / 4.0;
            let c = value_noise(9, ix as f32 + 0.5, iy as f32 + 0.5);
            assert!((c - mean).abs() < 1e-6, "{c} vs {mean}");
        }
    }

    #[test]
    fn value_noise_is_continuous_and_in_range() {
        // Continuity across cell borders: a step of 1e-3 can change a C¹ function with
        // slope ≤ 1.5 (max of the smoothstep derivative) per axis by at most ~3e-3.
        let mut prev = value_noise(1, -3.0, 0.25);
        let mut x = -3.0f32;
        while x < 3.0 {
            x += 1e-3;
            let v = value_noise(1, x, 0.25);
            assert!((0.0..1.0).contains(&v));
            assert!((v - prev).abs() < 4e-3, "jump at x={x}");
            prev = v;
        }
    }

    #[test]
    fn fbm_matches_slow_reference() {
        // Fast f32 loop vs the f64 definition; 1e-5 covers f32 accumulation of ≤ 6 terms.
        for i in 0..200 {
            let (x, y) = (i as f32 * 3.7 - 300.0, i as f32 * -1.3 + 17.0);
            for oct in 1..6 {
                let fast = fbm(77, x, y, 13.0, oct);
                let slow = fbm_reference(77, x, y, 13.0, oct);
                assert!((f64::from(fast) - slow).abs() < 1e-5);
            }
        }
        assert_eq!(fbm(1, 0.0, 0.0, 5.0, 0), 0.5);
    }

    #[test]
    fn pixel_gaussian_has_unit_moments() {
        // Irwin–Hall(4) rescaled: mean 0, variance 1 by construction. With n = 65536
        // samples the standard error of the mean is 1/256 ≈ 0.004 and of the variance
        // ≈ sqrt(2/n)·… ≈ 0.006, so ±0.03 is a ~5σ bound.
        let n = 256 * 256;
        let (mut s, mut s2) = (0.0f64, 0.0f64);
        for y in 0..256 {
            for x in 0..256 {
                let z = f64::from(pixel_gaussian(5, x, y));
                s += z;
                s2 += z * z;
            }
        }
        let mean = s / n as f64;
        let var = s2 / n as f64 - mean * mean;
        assert!(mean.abs() < 0.03, "mean {mean}");
        assert!((var - 1.0).abs() < 0.03, "var {var}");
    }
}
