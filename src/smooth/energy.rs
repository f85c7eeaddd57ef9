//! The energy both solvers minimise, on a pixel grid:
//!
//! `E(l) = Σ_p U_p(l_p) + Σ_{p~q} w_pq · [l_p ≠ l_q]`
//!
//! * unary `U_p(c) = −ln(max(P_p(c), floor))`, the forest's probability clamped at a floor so a
//!   class the forest ruled out can still win where the neighbours insist;
//! * contrast-sensitive Potts pairwise term on the 8-neighbourhood (or 4-neighbourhood),
//!   `w_pq = w · exp(−β‖I_p − I_q‖²) / dist(p, q)` on Lab colour, with
//!   `β = 1 / (2 · mean ‖I_p − I_q‖²)` over the image's neighbour pairs (Boykov & Jolly 2001,
//!   "Interactive graph cuts", ICCV; Rother, Kolmogorov & Blake 2004, "GrabCut", SIGGRAPH).
//!   Cutting between two similar pixels costs `w / dist`, cutting along a colour edge almost
//!   nothing, so label changes move onto image edges.
//!
//! Each neighbour pair is stored once, as a "forward" edge from `p` to `p + FORWARD[d]`; a
//! missing neighbour (outside the grid, or a diagonal under 4-connectivity) has weight 0.

use rayon::prelude::*;

use crate::plane::Plane;
use crate::segmenter::Probabilities;

/// Forward neighbour offsets `(dx, dy)`: east, south, south-east, south-west. With these four
/// every 8-neighbour pair is visited exactly once; the first two alone give 4-connectivity.
pub const FORWARD: [(isize, isize); 4] = [(1, 0), (0, 1), (1, 1), (-1, 1)];

/// Which neighbour pairs carry a pairwise term.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Connectivity {
    Four,
    Eight,
}

impl Connectivity {
    /// How many of [`FORWARD`]'s directions are used.
    pub fn forward_count(self) -> usize {
        match self {
            Connectivity::Four => 2,
            Connectivity::Eight => 4,
        }
    }
}

/// A multi-label Potts energy on a `width × height` grid.
#[derive(Clone, Debug, PartialEq)]
pub struct PottsEnergy {
    pub width: usize,
    pub height: usize,
    pub n_labels: usize,
    pub connectivity: Connectivity,
    /// `unary[p * n_labels + c]`: cost of giving pixel `p` label `c`.
    pub unary: Vec<f32>,
    /// `weights[p * 4 + d]`: Potts weight of the edge from `p` to `p + FORWARD[d]`
    /// (0 where that neighbour does not exist).
    pub weights: Vec<f32>,
}

impl PottsEnergy {
    /// Wraps explicit costs (the reference tests use integer-valued ones). Panics on a length
    /// mismatch, a programming error.
    pub fn new(
        width: usize,
        height: usize,
        n_labels: usize,
        connectivity: Connectivity,
        unary: Vec<f32>,
        mut weights: Vec<f32>,
    ) -> Self {
        assert_eq!(unary.len(), width * height * n_labels, "unary length");
        assert_eq!(weights.len(), width * height * 4, "weights length");
        // Keep the invariant "no weight on a missing edge" whatever the caller passed.
        for y in 0..height {
            for x in 0..width {
                for (d, &(dx, dy)) in FORWARD.iter().enumerate() {
                    if !edge_exists(width, height, connectivity, x, y, d, dx, dy) {
                        weights[(y * width + x) * 4 + d] = 0.0;
                    }
                }
            }
        }
        PottsEnergy {
            width,
            height,
            n_labels,
            connectivity,
            unary,
            weights,
        }
    }

    /// The energy of the forest's probabilities on an image: unary `−ln max(p, floor)`,
    /// 8-connected contrast-sensitive Potts weights of strength `strength` with contrast
    /// parameter `beta` (see the module documentation).
    pub fn from_probabilities(
        probs: &Probabilities,
        colour: &[Plane],
        strength: f32,
        floor: f32,
        beta: f32,
    ) -> Self {
        let unary = probs.data.par_iter().map(|&p| -p.max(floor).ln()).collect();
        let weights = contrast_weights(colour, strength, beta);
        PottsEnergy {
            width: probs.width,
            height: probs.height,
            n_labels: probs.n_classes,
            connectivity: Connectivity::Eight,
            unary,
            weights,
        }
    }

    pub fn n_pixels(&self) -> usize {
        self.width * self.height
    }

    /// `E(labels)`, summed in f64 so that comparing two labellings' energies is reliable.
    pub fn energy(&self, labels: &[u8]) -> f64 {
        assert_eq!(labels.len(), self.n_pixels(), "labels length");
        let (w, h, n) = (self.width, self.height, self.n_labels);
        let mut total = 0.0f64;
        for y in 0..h {
            for x in 0..w {
                let p = y * w + x;
                let lp = labels[p];
                total += self.unary[p * n + lp as usize] as f64;
                for (d, &(dx, dy)) in FORWARD.iter().enumerate() {
                    let wt = self.weights[p * 4 + d];
                    if wt != 0.0 {
                        let q = ((y as isize + dy) as usize) * w + (x as isize + dx) as usize;
                        if labels[q] != lp {
                            total += wt as f64;
                        }
                    }
                }
            }
        }
        total
    }

    /// Per pixel, the sum of the weights of all its edges (forward and backward): the most
    /// the pairwise terms can change when that one pixel changes label.
    pub fn incident_weight_sums(&self) -> Vec<f32> {
        let (w, h) = (self.width, self.height);
        let mut sums = vec![0.0f32; w * h];
        for y in 0..h {
            for x in 0..w {
                let p = y * w + x;
                for (d, &(dx, dy)) in FORWARD.iter().enumerate() {
                    let wt = self.weights[p * 4 + d];
                    if wt != 0.0 {
                        let q = ((y as isize + dy) as usize) * w + (x as isize + dx) as usize;
                        sums[p] += wt;
                        sums[q] += wt;
                    }
                }
            }
        }
        sums
    }

    /// The labels minimising the unary term alone (ties to the lower label).
    pub fn unary_argmin(&self) -> Vec<u8> {
        self.unary
            .chunks_exact(self.n_labels)
            .map(|u| {
                let mut best = 0;
                for (c, &v) in u.iter().enumerate() {
                    if v < u[best] {
                        best = c;
                    }
                }
                best as u8
            })
            .collect()
    }
}

#[allow(clippy::too_many_arguments)]
fn edge_exists(
    width: usize,
    height: usize,
    connectivity: Connectivity,
    x: usize,
    y: usize,
    d: usize,
    dx: isize,
    dy: isize,
) -> bool {
    let (nx, ny) = (x as isize + dx, y as isize + dy);
    d < connectivity.forward_count()
        && nx >= 0
        && ny >= 0
        && (nx as usize) < width
        && (ny as usize) < height
}

/// Squared colour distance between pixels `p` and `q` over all planes.
#[inline]
fn colour_distance2(colour: &[Plane], p: usize, q: usize) -> f32 {
    colour
        .iter()
        .map(|c| {
            let d = c.data[p] - c.data[q];
            d * d
        })
        .sum()
}

/// `β = 1 / (2 · mean ‖I_p − I_q‖²)` over all 8-neighbour pairs of the planes (Rother et al.
/// 2004, eq. 5). A flat image (mean 0) gives β = 0: every pair then costs the full weight.
/// Tiles of a large image should be given the whole image's β so the energy does not change
/// at tile borders; this function is what computes it once.
///
/// ```
/// use grove::{smooth::contrast_beta, Plane};
/// // A vertical step of height 2 between columns 1 and 2 of a 4 × 3 plane: of the 17
/// // neighbour pairs, 3 horizontal and 4 diagonal ones cross it with ‖ΔI‖² = 4.
/// let p = Plane::from_vec(4, 3, (0..12).map(|i| if i % 4 < 2 { 0.0 } else { 2.0 }).collect());
/// let mean = 7.0 * 4.0 / 29.0; // 29 pairs: 9 horizontal, 8 vertical, 12 diagonal
/// assert!((contrast_beta(&[p]) - 1.0 / (2.0 * mean)).abs() < 1e-6);
/// ```
pub fn contrast_beta(colour: &[Plane]) -> f32 {
    let mut sum = ContrastSum::default();
    sum.push(colour);
    sum.beta()
}

/// [`contrast_beta`] of an image delivered a few rows at a time (an image too large to hold):
/// the rows are [`push`](ContrastSum::push)ed top to bottom and [`beta`](ContrastSum::beta)
/// gives the same value, to the bit, as `contrast_beta` of the whole image, because the pairs
/// are summed in the same order.
#[derive(Clone, Debug, Default)]
pub struct ContrastSum {
    /// The last row pushed (one per plane): its pairs with the row below are still to come.
    last: Vec<Plane>,
    sum: f64,
    count: u64,
}

impl ContrastSum {
    /// Adds the next rows (one plane per colour channel, all of the image's width).
    pub fn push(&mut self, rows: &[Plane]) {
        let Some(first) = rows.first() else {
            return;
        };
        let (w, n) = (first.width, first.height);
        if n == 0 {
            return;
        }
        // The held row on top of the new ones: every row but the new last one now has the
        // row below it, so its pairs are complete.
        let window: Vec<Plane> = rows
            .iter()
            .enumerate()
            .map(|(c, p)| match self.last.get(c) {
                Some(prev) => {
                    let mut data = Vec::with_capacity(w * (n + 1));
                    data.extend_from_slice(&prev.data);
                    data.extend_from_slice(&p.data);
                    Plane::from_vec(w, n + 1, data)
                }
                None => p.clone(),
            })
            .collect();
        let h = window[0].height;
        self.add_rows(&window, h - 1);
        self.last = window
            .iter()
            .map(|p| Plane::from_vec(w, 1, p.data[(h - 1) * w..].to_vec()))
            .collect();
    }

    /// Adds the pairs starting in the first `rows` rows of `colour` (all four forward pairs
    /// where the neighbour is inside `colour`).
    fn add_rows(&mut self, colour: &[Plane], rows: usize) {
        let (w, h) = (colour[0].width, colour[0].height);
        for y in 0..rows {
            for x in 0..w {
                let p = y * w + x;
                for (d, &(dx, dy)) in FORWARD.iter().enumerate() {
                    if edge_exists(w, h, Connectivity::Eight, x, y, d, dx, dy) {
                        let q = ((y as isize + dy) as usize) * w + (x as isize + dx) as usize;
                        self.sum += colour_distance2(colour, p, q) as f64;
                        self.count += 1;
                    }
                }
            }
        }
    }

    /// β of every row pushed so far, taken as the whole image (its last row has no row
    /// below).
    pub fn beta(mut self) -> f32 {
        let last = std::mem::take(&mut self.last);
        if !last.is_empty() {
            self.add_rows(&last, 1);
        }
        if self.count == 0 || self.sum <= 0.0 {
            return 0.0;
        }
        (self.count as f64 / (2.0 * self.sum)) as f32
    }
}

/// The 8-connected forward weights `w · exp(−β‖I_p − I_q‖²) / dist(p, q)`.
pub fn contrast_weights(colour: &[Plane], strength: f32, beta: f32) -> Vec<f32> {
    let first = &colour[0];
    let (w, h) = (first.width, first.height);
    let inv_dist = [
        1.0,
        1.0,
        std::f32::consts::FRAC_1_SQRT_2,
        std::f32::consts::FRAC_1_SQRT_2,
    ];
    let mut weights = vec![0.0f32; w * h * 4];
    if weights.is_empty() {
        return weights;
    }
    weights
        .par_chunks_mut(w * 4)
        .enumerate()
        .for_each(|(y, row)| {
            for x in 0..w {
                let p = y * w + x;
                for (d, &(dx, dy)) in FORWARD.iter().enumerate() {
                    if edge_exists(w, h, Connectivity::Eight, x, y, d, dx, dy) {
                        let q = ((y as isize + dy) as usize) * w + (x as isize + dx) as usize;
                        row[x * 4 + d] =
                            strength * (-beta * colour_distance2(colour, p, q)).exp() * inv_dist[d];
                    }
                }
            }
        });
    weights
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn energy_counts_each_pair_once() {
        // 2 × 2, all weights 1, 8-connected: 6 pairs. A checkerboard cuts 4 of them
        // (2 horizontal, 2 vertical); the diagonals join equal labels.
        let e = PottsEnergy::new(2, 2, 2, Connectivity::Eight, vec![0.0; 8], vec![1.0; 16]);
        assert_eq!(e.energy(&[0, 1, 1, 0]), 4.0);
        assert_eq!(e.energy(&[0, 0, 1, 1]), 4.0);
        assert_eq!(e.energy(&[0, 0, 0, 0]), 0.0);
        let four = PottsEnergy::new(2, 2, 2, Connectivity::Four, vec![0.0; 8], vec![1.0; 16]);
        assert_eq!(four.energy(&[0, 1, 1, 0]), 4.0);
        assert_eq!(four.energy(&[0, 0, 1, 1]), 2.0);
        assert_eq!(e.incident_weight_sums(), vec![3.0; 4]);
    }

    #[test]
    fn contrast_sum_in_pieces_equals_the_whole_image() {
        let (w, h) = (13, 11);
        let planes: Vec<Plane> = (0..3)
            .map(|c| {
                let v = (0..w * h)
                    .map(|i| ((i * 7 + c * 13) % 17) as f32 * 0.37)
                    .collect();
                Plane::from_vec(w, h, v)
            })
            .collect();
        let whole = contrast_beta(&planes);
        assert!(whole > 0.0);
        for pieces in [vec![11], vec![1; 11], vec![4, 3, 4], vec![10, 1]] {
            let mut sum = ContrastSum::default();
            let mut y = 0;
            for n in pieces {
                let rows: Vec<Plane> = planes
                    .iter()
                    .map(|p| Plane::from_vec(w, n, p.data[y * w..(y + n) * w].to_vec()))
                    .collect();
                sum.push(&rows);
                y += n;
            }
            assert_eq!(sum.beta().to_bits(), whole.to_bits());
        }
    }

    #[test]
    fn weights_follow_the_formula() {
        let l = Plane::from_vec(2, 1, vec![0.0, 3.0]);
        let beta = contrast_beta(std::slice::from_ref(&l));
        // One pair with ‖ΔI‖² = 9.
        assert!((beta - 1.0 / 18.0).abs() < 1e-7);
        let w = contrast_weights(&[l], 2.0, beta);
        assert!((w[0] - 2.0 * (-0.5f32).exp()).abs() < 1e-6);
        assert_eq!(&w[1..], &[0.0; 7]);
        assert_eq!(contrast_beta(&[Plane::filled(3, 3, 1.0)]), 0.0);
    }
}
