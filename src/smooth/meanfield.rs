//! Mean-field inference for the Potts energy (Krähenbühl & Koltun 2011, "Efficient inference in
//! fully connected CRFs with Gaussian edge potentials", NIPS): a factorised distribution
//! `Q_p(c)` is improved by the update
//!
//! `Q_p(c) ∝ exp(−U_p(c) + Σ_{q~p} w_pq · Q_q(c))`
//!
//! (the Potts penalty `w_pq · (1 − Q_q(c))` up to a constant per pixel), which is the exact
//! minimiser of the variational free energy
//! `F(Q) = Σ_p Σ_c Q_p(c) U_p(c) + Σ_{p~q} w_pq (1 − Σ_c Q_p(c) Q_q(c)) + Σ_p Σ_c Q_p(c) ln Q_p(c)`
//! over `Q_p` with the other pixels held fixed. Starting from `Q = softmax(−U)` (the clamped,
//! renormalised forest probabilities), the result is a smoothed probability map: what the
//! confidence maps and anything else built on probabilities can use.
//!
//! Schedule: updating every pixel at once from the previous `Q` (the paper's parallel update)
//! does not guarantee that `F` decreases; with strong weights it oscillates between
//! checkerboards. Here each iteration updates the four colour classes `(x mod 2, y mod 2)` in
//! turn. No two pixels of a class are 8-neighbours, so updating a class in parallel is exactly
//! a sequence of coordinate updates, and `F` never increases (tested against a sequential twin).
//! The rows of one class are updated in parallel with rayon.
//!
//! The optional Gaussian spatial kernel (KK2011's "smoothness kernel", weight `g`, scale `σ`,
//! applied by separable filtering with [`crate::features::gaussian::gaussian`]) adds
//! `g · Σ_{q≠p} k_σ(p − q) Q_q(c)` to the message. Its message is computed once per iteration
//! from the `Q` at the start of the iteration (the paper's parallel update for that term), so
//! with it on the monotone decrease is no longer guaranteed.

use rayon::prelude::*;

use super::energy::{PottsEnergy, FORWARD};
use crate::features::gaussian::gaussian;
use crate::plane::Plane;

/// Settings of the optional Gaussian spatial kernel.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SpatialKernel {
    pub sigma: f32,
    pub weight: f32,
}

/// Runs `iterations` mean-field iterations; returns `Q`, pixel-major like the unary.
pub fn mean_field(
    energy: &PottsEnergy,
    iterations: usize,
    spatial: Option<SpatialKernel>,
) -> Vec<f32> {
    let n = energy.n_labels;
    let w = energy.width;
    let mut q = initial_q(energy);
    let mut spatial_message = Vec::new();
    let mut out = Vec::new();
    for _ in 0..iterations {
        if let Some(k) = spatial {
            spatial_message = spatial_messages(energy, &q, k);
        }
        for colour in 0..4 {
            let (px, py) = (colour & 1, colour >> 1);
            let rows = (energy.height + 1 - py) / 2;
            // Pixels x ≡ px of a row, packed, so the exponentials run over one contiguous
            // buffer (a vectorised loop) rather than pixel by pixel.
            let cols = (w + 1 - px) / 2;
            if rows == 0 || cols == 0 {
                continue;
            }
            out.resize(rows * cols * n, 0.0);
            {
                let q = &q;
                let sm = &spatial_message;
                out.par_chunks_mut(cols * n)
                    .enumerate()
                    .for_each(|(k, row)| {
                        let y = 2 * k + py;
                        for (j, s) in row.chunks_exact_mut(n).enumerate() {
                            log_update(energy, q, sm, px + 2 * j, y, s);
                        }
                        for v in row.iter_mut() {
                            *v = fast_exp(*v);
                        }
                        for s in row.chunks_exact_mut(n) {
                            let inv = 1.0 / s.iter().sum::<f32>();
                            s.iter_mut().for_each(|v| *v *= inv);
                        }
                    });
            }
            q.par_chunks_mut(w * n)
                .enumerate()
                .filter(|(y, _)| y % 2 == py)
                .for_each(|(y, row)| {
                    let src = &out[(y / 2) * cols * n..(y / 2 + 1) * cols * n];
                    for (j, s) in src.chunks_exact(n).enumerate() {
                        let x = px + 2 * j;
                        row[x * n..(x + 1) * n].copy_from_slice(s);
                    }
                });
        }
    }
    q
}

/// `softmax(−U)` per pixel.
pub fn initial_q(energy: &PottsEnergy) -> Vec<f32> {
    let mut q: Vec<f32> = energy.unary.iter().map(|&u| -u).collect();
    q.par_chunks_mut(energy.n_labels).for_each(softmax_in_place);
    q
}

/// The new `ln Q_p` up to a constant, from the current `Q` of the neighbours, into `s`,
/// shifted so that its largest entry is 0.
#[inline]
fn log_update(e: &PottsEnergy, q: &[f32], spatial: &[f32], x: usize, y: usize, s: &mut [f32]) {
    let (n, w, h) = (e.n_labels, e.width as isize, e.height as isize);
    let p = y * e.width + x;
    for (c, sc) in s.iter_mut().enumerate() {
        *sc = -e.unary[p * n + c];
    }
    if !spatial.is_empty() {
        for (sc, m) in s.iter_mut().zip(&spatial[p * n..(p + 1) * n]) {
            *sc += m;
        }
    }
    let (xi, yi) = (x as isize, y as isize);
    for (d, &(dx, dy)) in FORWARD.iter().enumerate() {
        let wt = e.weights[p * 4 + d];
        if wt != 0.0 {
            let r = ((yi + dy) * w + xi + dx) as usize;
            add_scaled(s, &q[r * n..(r + 1) * n], wt);
        }
        let (bx, by) = (xi - dx, yi - dy);
        if bx >= 0 && bx < w && by >= 0 && by < h {
            let r = (by * w + bx) as usize;
            let wt = e.weights[r * 4 + d];
            if wt != 0.0 {
                add_scaled(s, &q[r * n..(r + 1) * n], wt);
            }
        }
    }
    let m = s.iter().copied().fold(f32::NEG_INFINITY, f32::max);
    s.iter_mut().for_each(|v| *v -= m);
}

/// `eˣ` for `x ≤ 0` to a relative error below `10⁻⁶ + 10⁻⁷·|x|` (mostly the f32 rounding of
/// `x·log₂e`; 0 below −87): `2^(x·log₂e)` split into a
/// rounded integer part, put into the exponent bits, and a fraction in [−½, ½] whose `2^f`
/// is a degree-6 Taylor polynomial (error ≤ (½ ln 2)⁷ / 7! ≈ 1.2·10⁻⁷). Unlike `f32::exp`
/// (a libm call) it inlines and vectorises: the exponentials were a third of mean-field's time.
#[inline]
fn fast_exp(x: f32) -> f32 {
    // 1.5 · 2²³: adding it rounds to an integer held in the low mantissa bits.
    const MAGIC: f32 = 12_582_912.0;
    let t = x.max(-87.0) * std::f32::consts::LOG2_E;
    let shifted = t + MAGIC;
    let i = shifted.to_bits() as i32 - MAGIC.to_bits() as i32;
    let f = t - (shifted - MAGIC);
    const C: [f32; 6] = [
        std::f32::consts::LN_2,
        0.240_226_5,
        0.055_504_11,
        0.009_618_129,
        0.001_333_355_8,
        0.000_154_035_3,
    ];
    let p = 1.0 + f * (C[0] + f * (C[1] + f * (C[2] + f * (C[3] + f * (C[4] + f * C[5])))));
    p * f32::from_bits(((i + 127) << 23) as u32)
}

#[inline]
fn add_scaled(s: &mut [f32], q: &[f32], wt: f32) {
    for (a, b) in s.iter_mut().zip(q) {
        *a += wt * b;
    }
}

/// `s ← exp(s − max s) / Σ exp(s − max s)`.
#[inline]
fn softmax_in_place(s: &mut [f32]) {
    let m = s.iter().copied().fold(f32::NEG_INFINITY, f32::max);
    let mut sum = 0.0;
    for v in s.iter_mut() {
        *v = (*v - m).exp();
        sum += *v;
    }
    let inv = 1.0 / sum;
    for v in s.iter_mut() {
        *v *= inv;
    }
}

/// `g · (k_σ * Q_c − k_σ(0) · Q_c)` per class (the self term removed), pixel-major.
fn spatial_messages(e: &PottsEnergy, q: &[f32], k: SpatialKernel) -> Vec<f32> {
    let (n, np) = (e.n_labels, e.n_pixels());
    let centre = gaussian_centre(k.sigma);
    let mut m = vec![0.0f32; np * n];
    for c in 0..n {
        let plane = Plane::from_vec(
            e.width,
            e.height,
            q.iter().skip(c).step_by(n).copied().collect(),
        );
        let blurred = gaussian(&plane, k.sigma);
        for p in 0..np {
            m[p * n + c] = k.weight * (blurred.data[p] - centre * plane.data[p]);
        }
    }
    m
}

/// The centre tap of the normalised 2-D Gaussian kernel that [`gaussian`] applies.
fn gaussian_centre(sigma: f32) -> f32 {
    // An impulse in a plane wide enough that no reflection folds the kernel back onto it.
    let r = (4.0 * sigma + 0.5).floor() as usize;
    let size = 2 * r + 1;
    let mut impulse = Plane::filled(size, size, 0.0);
    impulse.data[r * size + r] = 1.0;
    gaussian(&impulse, sigma).data[r * size + r]
}

/// The free energy `F(Q)` of the module documentation (local Potts kernel only), in f64.
pub fn free_energy(e: &PottsEnergy, q: &[f32]) -> f64 {
    let (n, w) = (e.n_labels, e.width);
    let mut f = 0.0f64;
    for p in 0..e.n_pixels() {
        for c in 0..n {
            let v = q[p * n + c] as f64;
            f += v * e.unary[p * n + c] as f64;
            if v > 0.0 {
                f += v * v.ln();
            }
        }
        let (x, y) = (p % w, p / w);
        for (d, &(dx, dy)) in FORWARD.iter().enumerate() {
            let wt = e.weights[p * 4 + d];
            if wt != 0.0 {
                let r = ((y as isize + dy) as usize) * w + (x as isize + dx) as usize;
                let agree: f64 = (0..n)
                    .map(|c| q[p * n + c] as f64 * q[r * n + c] as f64)
                    .sum();
                f += wt as f64 * (1.0 - agree);
            }
        }
    }
    f
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::smooth::energy::Connectivity;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// Weight of the (undirected) pair p, q in `e`, looked up the obvious way.
    fn pair_weight(e: &PottsEnergy, p: (usize, usize), q: (usize, usize)) -> f32 {
        for (d, &(dx, dy)) in FORWARD.iter().enumerate() {
            for (a, b) in [(p, q), (q, p)] {
                if a.0 as isize + dx == b.0 as isize && a.1 as isize + dy == b.1 as isize {
                    return e.weights[(a.1 * e.width + a.0) * 4 + d];
                }
            }
        }
        0.0
    }

    /// The slow twin: one pixel at a time, in place, in the same colour order; each update is
    /// the textbook coordinate step `Q_p(c) ∝ exp(−U_p(c) + Σ_q w_pq Q_q(c))` over the 8
    /// neighbours found by bounds checks, normalised in f64.
    fn slow_mean_field(e: &PottsEnergy, iterations: usize) -> Vec<f32> {
        let n = e.n_labels;
        let mut q: Vec<f64> = Vec::new();
        for u in e.unary.chunks(n) {
            let z: f64 = u.iter().map(|&v| (-(v as f64)).exp()).sum();
            q.extend(u.iter().map(|&v| (-(v as f64)).exp() / z));
        }
        for _ in 0..iterations {
            for colour in 0..4 {
                for y in 0..e.height {
                    for x in 0..e.width {
                        if (x & 1) != (colour & 1) || (y & 1) != (colour >> 1) {
                            continue;
                        }
                        let p = y * e.width + x;
                        let mut s: Vec<f64> =
                            (0..n).map(|c| -(e.unary[p * n + c] as f64)).collect();
                        for dy in -1isize..=1 {
                            for dx in -1isize..=1 {
                                let (nx, ny) = (x as isize + dx, y as isize + dy);
                                if (dx, dy) == (0, 0)
                                    || nx < 0
                                    || ny < 0
                                    || nx >= e.width as isize
                                    || ny >= e.height as isize
                                {
                                    continue;
                                }
                                let (nx, ny) = (nx as usize, ny as usize);
                                let wt = pair_weight(e, (x, y), (nx, ny)) as f64;
                                let r = ny * e.width + nx;
                                for c in 0..n {
                                    s[c] += wt * q[r * n + c];
                                }
                            }
                        }
                        let z: f64 = s.iter().map(|v| v.exp()).sum();
                        for c in 0..n {
                            q[p * n + c] = s[c].exp() / z;
                        }
                    }
                }
            }
        }
        q.iter().map(|&v| v as f32).collect()
    }

    fn random_energy(seed: u64, w: usize, h: usize, n: usize, strength: f32) -> PottsEnergy {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let unary = (0..w * h * n).map(|_| rng.gen_range(0.0..3.0)).collect();
        let weights = (0..w * h * 4)
            .map(|_| rng.gen_range(0.0..strength))
            .collect();
        PottsEnergy::new(w, h, n, Connectivity::Eight, unary, weights)
    }

    #[test]
    fn matches_the_sequential_twin() {
        for (seed, (w, h)) in [(7, 9), (8, 8), (1, 5), (13, 1)].into_iter().enumerate() {
            let e = random_energy(seed as u64, w, h, 4, 1.5);
            let fast = mean_field(&e, 5, None);
            let slow = slow_mean_field(&e, 5);
            for (a, b) in fast.iter().zip(&slow) {
                assert!((a - b).abs() < 1e-5, "{w}x{h}: {a} vs {b}");
            }
        }
    }

    #[test]
    fn free_energy_never_increases() {
        for seed in 0..4 {
            // Strong weights: the regime where a fully parallel update oscillates.
            let e = random_energy(100 + seed, 12, 10, 3, 4.0);
            let mut previous = free_energy(&e, &initial_q(&e));
            for it in 1..=8 {
                let f = free_energy(&e, &mean_field(&e, it, None));
                assert!(
                    f <= previous + 1e-6 * previous.abs().max(1.0),
                    "iteration {it}: {f} > {previous}"
                );
                previous = f;
            }
        }
    }

    #[test]
    fn probabilities_sum_to_one_and_zero_weight_keeps_the_input() {
        let mut e = random_energy(3, 6, 5, 3, 1.0);
        let q = mean_field(
            &e,
            3,
            Some(SpatialKernel {
                sigma: 2.0,
                weight: 0.5,
            }),
        );
        for p in q.chunks(3) {
            assert!((p.iter().sum::<f32>() - 1.0).abs() < 1e-5);
        }
        e.weights.iter_mut().for_each(|w| *w = 0.0);
        for (a, b) in mean_field(&e, 3, None).iter().zip(initial_q(&e)) {
            assert!((a - b).abs() < 1e-6);
        }
    }

    #[test]
    fn fast_exp_is_close_to_exp() {
        let mut x = 0.0f32;
        while x > -90.0 {
            let (a, b) = (fast_exp(x) as f64, (x as f64).exp());
            assert!(
                (a - b).abs() <= (1e-6 + 1e-7 * x.abs() as f64) * b + 1e-37,
                "{x}: {a} vs {b}"
            );
            x -= 0.0137;
        }
        assert_eq!(fast_exp(0.0), 1.0);
    }

    #[test]
    fn gaussian_centre_is_the_product_of_1d_centres() {
        // scipy's 1-D kernel at σ = 1 has centre 1 / Σ_{|x|≤4} exp(−x²/2) = 0.39894…
        let c1: f64 = 1.0
            / (-4i32..=4)
                .map(|x| (-(x * x) as f64 / 2.0).exp())
                .sum::<f64>();
        assert!((gaussian_centre(1.0) as f64 - c1 * c1).abs() < 1e-6);
    }
}
