//! Boundary F1: how well predicted class boundaries line up with the true ones, within a
//! tolerance of a few pixels (Csurka, Larlus & Perronnin 2013, "What is a good evaluation
//! measure for semantic segmentation?", BMVC). IoU barely moves when a boundary is ragged or a
//! region is sprinkled with specks; this score does, which is what smoothing is meant to fix.
//!
//! Definitions (label maps `truth` and `pred`, 4-neighbourhood, Euclidean tolerance θ):
//! - A pixel `p` of class `c` is a **boundary pixel** of `c` when some 4-neighbour has another
//!   class (the inner boundary, so every boundary pixel belongs to exactly one class, its own).
//!   In the truth, both `p` and that neighbour must be labelled: a labelled region that meets
//!   only unlabelled pixels has no known boundary there.
//! - **Precision** of class `c`: the fraction of predicted boundary pixels of `c` that lie within
//!   θ of a true boundary pixel of `c`. A predicted boundary pixel with any unlabelled pixel
//!   within θ is not scored (neither hit nor miss): the true boundary could be hidden there.
//! - **Recall** of class `c`: the fraction of true boundary pixels of `c` within θ of a
//!   predicted boundary pixel of `c` (predicted boundaries are taken everywhere).
//! - F1 of `c` = 2PR / (P + R), counts pooled over images; a class with neither true nor scored
//!   predicted boundary pixels is left out (as in the IoU means), one with only one of the two
//!   scores 0. The reported boundary F1 is the mean over the classes left in.
//!
//! With scribble labels, strokes of two classes rarely touch, so there are few or no true
//! boundaries and the score says little about boundary quality: callers report it as
//! undefined when there are no true boundary pixels and say so when labels are sparse.
//!
//! Implementation: boundary pixels are sparse, so each one scans the ~13 offsets of its
//! tolerance disc instead of computing a distance transform per class. On a 512² five-class
//! map this was much faster than imageproc's Euclidean distance transform (one per class
//! and side); see `benches/boundary.rs` and the README. imageproc's transform stays in the
//! tests as the reference twin, and the fixture test checks against scipy.ndimage.

use serde::{Deserialize, Serialize};

use crate::error::{GroveError, Result};

/// The tolerance used unless stated otherwise, in pixels (Csurka et al. use a small
/// fraction of the image diagonal; 2 px is common practice for images of a few hundred px).
pub const DEFAULT_TOLERANCE: f32 = 2.0;
/// Above this the disc scan stops being cheap, and a boundary "match" means little anyway.
pub const MAX_TOLERANCE: f32 = 32.0;

/// Boundary pixel counts per class, to be pooled over images like a confusion matrix.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct BoundaryCounts {
    tolerance: f32,
    /// Scored predicted boundary pixels, per class.
    pub predicted: Vec<u64>,
    /// Of those, the ones within the tolerance of a true boundary pixel of the same class.
    pub predicted_matched: Vec<u64>,
    /// True boundary pixels, per class.
    pub truth: Vec<u64>,
    /// Of those, the ones within the tolerance of a predicted boundary pixel of the same class.
    pub truth_matched: Vec<u64>,
}

impl BoundaryCounts {
    /// Empty counts for `n_classes` classes; error if the tolerance is not in 0..=32 px.
    pub fn new(n_classes: usize, tolerance: f32) -> Result<Self> {
        if !(0.0..=MAX_TOLERANCE).contains(&tolerance) {
            return Err(GroveError::Config(format!(
                "boundary tolerance {tolerance} px must be between 0 and {MAX_TOLERANCE}"
            )));
        }
        Ok(BoundaryCounts {
            tolerance,
            predicted: vec![0; n_classes],
            predicted_matched: vec![0; n_classes],
            truth: vec![0; n_classes],
            truth_matched: vec![0; n_classes],
        })
    }

    pub fn tolerance(&self) -> f32 {
        self.tolerance
    }

    pub fn n_classes(&self) -> usize {
        self.truth.len()
    }

    /// Counts the boundaries of one `width × height` image. `ignore` is the unlabelled value
    /// of `truth`. Errors (counts unchanged): wrong lengths, a class index out of range.
    pub fn add(
        &mut self,
        width: usize,
        height: usize,
        truth: &[u8],
        pred: &[u8],
        ignore: u8,
    ) -> Result<()> {
        let n = width * height;
        if truth.len() != n || pred.len() != n {
            return Err(GroveError::Data(format!(
                "boundary F1: a {width}x{height} image needs {n} labels, got {} true and {} predicted",
                truth.len(),
                pred.len()
            )));
        }
        let k = self.n_classes();
        if let Some(i) = (0..n)
            .find(|&i| pred[i] as usize >= k || (truth[i] != ignore && truth[i] as usize >= k))
        {
            return Err(GroveError::Data(format!(
                "boundary F1: pixel {i} has truth {} / prediction {}, but there are only {k} classes",
                truth[i], pred[i]
            )));
        }
        let valid = |i: usize| truth[i] != ignore;
        let truth_edge = boundary_mask(width, height, truth, Some(ignore));
        let pred_edge = boundary_mask(width, height, pred, None);
        let disc = Disc::new(self.tolerance, width, height);
        let any_unlabelled = truth.contains(&ignore);
        for p in 0..n {
            if pred_edge[p] {
                let c = pred[p];
                let hit = |q: usize| truth_edge[q] && truth[q] == c;
                let (scored, matched) = if any_unlabelled {
                    // Stops at the first unlabelled pixel: then this pixel is not scored.
                    let mut matched = false;
                    let near_unlabelled = disc.any(p, |q| {
                        matched |= hit(q);
                        !valid(q)
                    });
                    (!near_unlabelled, matched)
                } else {
                    (true, disc.any(p, hit))
                };
                if scored {
                    self.predicted[c as usize] += 1;
                    self.predicted_matched[c as usize] += matched as u64;
                }
            }
            if truth_edge[p] {
                let c = truth[p];
                let matched = disc.any(p, |q| pred_edge[q] && pred[q] == c);
                self.truth[c as usize] += 1;
                self.truth_matched[c as usize] += matched as u64;
            }
        }
        Ok(())
    }

    /// Adds another image's (or fold's) counts. Error if the class count or tolerance differs.
    pub fn merge(&mut self, other: &BoundaryCounts) -> Result<()> {
        if other.n_classes() != self.n_classes() || other.tolerance != self.tolerance {
            return Err(GroveError::Data(format!(
                "cannot merge boundary counts of {} classes at {} px with {} classes at {} px",
                self.n_classes(),
                self.tolerance,
                other.n_classes(),
                other.tolerance
            )));
        }
        for (a, b) in [
            (&mut self.predicted, &other.predicted),
            (&mut self.predicted_matched, &other.predicted_matched),
            (&mut self.truth, &other.truth),
            (&mut self.truth_matched, &other.truth_matched),
        ] {
            a.iter_mut().zip(b).for_each(|(a, b)| *a += b);
        }
        Ok(())
    }

    /// All true boundary pixels; 0 means boundary F1 is undefined (e.g. scribble labels).
    pub fn truth_pixels(&self) -> u64 {
        self.truth.iter().sum()
    }

    /// Boundary F1 per class; None for a class with neither true nor scored predicted
    /// boundary pixels.
    pub fn per_class_f1(&self) -> Vec<Option<f64>> {
        (0..self.n_classes())
            .map(|c| {
                let (np, nt) = (self.predicted[c], self.truth[c]);
                if np == 0 && nt == 0 {
                    return None;
                }
                let precision = ratio(self.predicted_matched[c], np);
                let recall = ratio(self.truth_matched[c], nt);
                Some(if precision + recall > 0.0 {
                    2.0 * precision * recall / (precision + recall)
                } else {
                    0.0
                })
            })
            .collect()
    }

    /// Mean boundary F1 over the classes that have boundaries; None when the truth has no
    /// boundary at all (then no prediction can be judged on its boundaries).
    pub fn mean_f1(&self) -> Option<f64> {
        if self.truth_pixels() == 0 {
            return None;
        }
        let present: Vec<f64> = self.per_class_f1().into_iter().flatten().collect();
        Some(present.iter().sum::<f64>() / present.len() as f64)
    }
}

fn ratio(a: u64, b: u64) -> f64 {
    if b == 0 {
        0.0
    } else {
        a as f64 / b as f64
    }
}

/// Inner-boundary mask over the 4-neighbourhood. With `ignore`, pixels with that value are
/// neither boundary pixels nor make their neighbours ones.
fn boundary_mask(width: usize, height: usize, labels: &[u8], ignore: Option<u8>) -> Vec<bool> {
    let mut edge = vec![false; labels.len()];
    let counts = |v: u8| Some(v) != ignore;
    // Each differing pair of neighbours (left-right, then up-down) marks both sides.
    let mut mark = |a: usize, b: usize| {
        let (la, lb) = (labels[a], labels[b]);
        let differ = la != lb && counts(la) && counts(lb);
        edge[a] |= differ;
        edge[b] |= differ;
    };
    for y in 0..height {
        let row = y * width;
        for x in 1..width {
            mark(row + x - 1, row + x);
        }
        if y > 0 {
            for x in 0..width {
                mark(row - width + x, row + x);
            }
        }
    }
    edge
}

/// The pixels within the tolerance of a pixel: integer offsets (dx, dy) with
/// dx² + dy² ≤ θ², also as index offsets for pixels far enough from the border that no
/// bounds check is needed (almost all of them).
struct Disc {
    offsets: Vec<(isize, isize)>,
    linear: Vec<isize>,
    radius: usize,
    width: usize,
    height: usize,
}

impl Disc {
    fn new(tolerance: f32, width: usize, height: usize) -> Self {
        let offsets = disc_offsets(tolerance);
        let linear = offsets
            .iter()
            .map(|&(dx, dy)| dy * width as isize + dx)
            .collect();
        Disc {
            offsets,
            linear,
            radius: tolerance.floor() as usize,
            width,
            height,
        }
    }

    /// Calls `f` on the in-image pixels within the tolerance of `p` until it returns true.
    #[inline(always)]
    fn any(&self, p: usize, mut f: impl FnMut(usize) -> bool) -> bool {
        let (x, y, r) = (p % self.width, p / self.width, self.radius);
        if x >= r && y >= r && x + r < self.width && y + r < self.height {
            self.linear.iter().any(|&d| f((p as isize + d) as usize))
        } else {
            self.offsets.iter().any(|&(dx, dy)| {
                let (qx, qy) = (x as isize + dx, y as isize + dy);
                qx >= 0
                    && qy >= 0
                    && (qx as usize) < self.width
                    && (qy as usize) < self.height
                    && f(qy as usize * self.width + qx as usize)
            })
        }
    }
}

fn disc_offsets(tolerance: f32) -> Vec<(isize, isize)> {
    let r = tolerance.floor() as isize;
    let t2 = (tolerance as f64) * (tolerance as f64);
    let mut v = Vec::new();
    for dy in -r..=r {
        for dx in -r..=r {
            if ((dx * dx + dy * dy) as f64) <= t2 {
                v.push((dx, dy));
            }
        }
    }
    v
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Worked by hand: a 6×1 strip, truth 0 0 0 1 1 1, prediction shifted by one pixel
    /// (0 0 0 0 1 1). True boundary pixels: x = 2 (class 0), 3 (class 1); predicted: 3 (0),
    /// 4 (1). At θ = 0 nothing matches (F1 0); at θ = 1 everything does (F1 1).
    #[test]
    fn one_pixel_shift_by_hand() {
        let truth = [0u8, 0, 0, 1, 1, 1];
        let pred = [0u8, 0, 0, 0, 1, 1];
        let mut exact = BoundaryCounts::new(2, 0.0).unwrap();
        exact.add(6, 1, &truth, &pred, 255).unwrap();
        assert_eq!(exact.truth, vec![1, 1]);
        assert_eq!(exact.predicted, vec![1, 1]);
        assert_eq!(exact.per_class_f1(), vec![Some(0.0), Some(0.0)]);
        let mut loose = BoundaryCounts::new(2, 1.0).unwrap();
        loose.add(6, 1, &truth, &pred, 255).unwrap();
        assert_eq!(loose.mean_f1(), Some(1.0));
    }

    /// Unlabelled pixels: a boundary next to them is not scored, and labels that meet only
    /// unlabelled pixels have no boundary (scribbles: F1 undefined).
    #[test]
    fn unlabelled_pixels_are_not_judged() {
        // Two strokes separated by unlabelled pixels; the prediction puts a boundary between.
        let truth = [0u8, 0, 255, 255, 255, 1, 1];
        let pred = [0u8, 0, 0, 0, 1, 1, 1];
        let mut b = BoundaryCounts::new(2, 2.0).unwrap();
        b.add(7, 1, &truth, &pred, 255).unwrap();
        assert_eq!(b.truth_pixels(), 0);
        assert_eq!(b.predicted, vec![0, 0]);
        assert_eq!(b.mean_f1(), None);
        assert!(b.add(7, 1, &truth, &pred[..6], 255).is_err());
        assert!(b.add(7, 1, &[3u8; 7], &pred, 255).is_err());
        assert!(BoundaryCounts::new(2, -1.0).is_err());
        assert!(BoundaryCounts::new(2, f32::NAN).is_err());
    }

    #[test]
    fn disc_offsets_are_the_pixels_within_the_tolerance() {
        // 0 px: the pixel itself; 1 px: the 4-neighbourhood; 2 px: 13 pixels (radius-2 disc).
        assert_eq!(disc_offsets(0.0).len(), 1);
        assert_eq!(disc_offsets(1.0).len(), 5);
        assert_eq!(disc_offsets(1.5).len(), 9);
        assert_eq!(disc_offsets(2.0).len(), 13);
    }
}
