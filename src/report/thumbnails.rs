//! The row of small pictures a report shows per evaluated image: the image, its true labels,
//! the prediction, where the prediction is wrong, and how unsure the model was.
//!
//! Downscaling works on boxes of source pixels (each thumbnail pixel covers a box of the
//! image): the photo is box-averaged; labels take the most frequent labelled class of the
//! box, so thin scribbles survive shrinking; a box is marked wrong when any labelled pixel
//! in it is wrong, so scattered errors stay visible too.

use std::ops::Range;

use crate::dataset::{ClassTable, UNLABELLED};
use crate::eval::uncertainty::unsureness;
use crate::imageio::RasterImage;
use crate::prediction::Prediction;
use crate::report::colormap::viridis;
use crate::report::data_uri::png_data_uri;

/// Longest side of a thumbnail in pixels: five of them fit a report row on a laptop screen.
pub const THUMB_SIDE: usize = 176;

/// Right / wrong in the error picture: sky blue and orange of the Okabe–Ito palette
/// (Okabe & Ito 2008, "Color Universal Design"), a pair told apart by all common
/// colour-vision deficiencies.
pub const RIGHT: [u8; 3] = [0x56, 0xb4, 0xe9];
pub const WRONG: [u8; 3] = [0xe6, 0x9f, 0x00];

/// One image's pictures as `data:` URIs, all `width` × `height`.
#[derive(Clone, Debug)]
pub struct ThumbnailRow {
    pub image: String,
    pub width: usize,
    pub height: usize,
    pub photo: String,
    pub truth: String,
    pub prediction: String,
    pub errors: String,
    pub uncertainty: String,
}

/// Thumbnail size for a `w` × `h` image: longest side [`THUMB_SIDE`], never enlarged.
pub fn thumb_size(w: usize, h: usize) -> (usize, usize) {
    let scale = (THUMB_SIDE as f64 / w.max(h) as f64).min(1.0);
    let f = |v: usize| ((v as f64 * scale).round() as usize).max(1);
    (f(w), f(h))
}

/// Source range of thumbnail index `t` of `n` over `len` source pixels (never empty).
fn span(t: usize, n: usize, len: usize) -> Range<usize> {
    let a = t * len / n;
    let b = ((t + 1) * len / n).max(a + 1);
    a..b.min(len)
}

/// Calls `f(thumbnail pixel, source indices)` for every box.
fn for_each_box(w: usize, h: usize, tw: usize, th: usize, mut f: impl FnMut(usize, &[usize])) {
    let mut idx = Vec::new();
    for ty in 0..th {
        let ys = span(ty, th, h);
        for tx in 0..tw {
            let xs = span(tx, tw, w);
            idx.clear();
            for y in ys.clone() {
                idx.extend(xs.clone().map(|x| y * w + x));
            }
            f(ty * tw + tx, &idx);
        }
    }
}

/// Most frequent value of `values` at `idx` other than `UNLABELLED`, if any.
fn mode(values: &[u8], idx: &[usize], counts: &mut [u32; 256]) -> Option<u8> {
    counts.fill(0);
    for &i in idx {
        counts[values[i] as usize] += 1;
    }
    counts[UNLABELLED as usize] = 0;
    let (best, &n) = counts
        .iter()
        .enumerate()
        .max_by_key(|&(v, &n)| (n, std::cmp::Reverse(v)))
        .expect("256 counts");
    (n > 0).then_some(best as u8)
}

impl ThumbnailRow {
    /// Pictures of one scored image: `truth` and the prediction's labels are class indices
    /// (`UNLABELLED` = no true label, shown as the darkened photo); uncertainty comes from
    /// its probabilities (smoothed ones after mean-field).
    pub fn new(
        name: &str,
        image: &RasterImage,
        truth: &[u8],
        prediction: &Prediction,
        classes: &ClassTable,
    ) -> Self {
        let (w, h) = (image.width, image.height);
        let (tw, th) = thumb_size(w, h);
        let src = image.to_rgb8();
        let pred = &prediction.labels;
        let unsure = unsureness(&prediction.probabilities);
        let colour: Vec<[u8; 3]> = classes.classes().iter().map(|c| c.color).collect();
        let n = tw * th;
        let (mut photo, mut dim) = (vec![0u8; n * 3], vec![[0u8; 3]; n]);
        let (mut t_rgb, mut p_rgb, mut e_rgb, mut u_rgb) = (
            vec![0u8; n * 3],
            vec![0u8; n * 3],
            vec![0u8; n * 3],
            vec![0u8; n * 3],
        );
        let mut counts = [0u32; 256];
        for_each_box(w, h, tw, th, |t, idx| {
            let mut sum = [0u64; 3];
            let mut u = 0.0f32;
            let (mut labelled, mut wrong) = (false, false);
            for &i in idx {
                for k in 0..3 {
                    sum[k] += src[i * 3 + k] as u64;
                }
                u += unsure[i];
                if truth[i] != UNLABELLED {
                    labelled = true;
                    wrong |= truth[i] != pred[i];
                }
            }
            let avg: [u8; 3] = std::array::from_fn(|k| (sum[k] / idx.len() as u64) as u8);
            photo[t * 3..t * 3 + 3].copy_from_slice(&avg);
            // Darkened grey photo: the context behind sparse labels and errors.
            let grey = (avg.iter().map(|&v| v as u32).sum::<u32>() / 3 * 2 / 5) as u8;
            dim[t] = [grey; 3];
            let put = |buf: &mut [u8], c: [u8; 3]| buf[t * 3..t * 3 + 3].copy_from_slice(&c);
            put(
                &mut t_rgb,
                mode(truth, idx, &mut counts).map_or(dim[t], |c| colour[c as usize]),
            );
            put(
                &mut p_rgb,
                mode(pred, idx, &mut counts).map_or(dim[t], |c| colour[c as usize]),
            );
            put(
                &mut e_rgb,
                match (labelled, wrong) {
                    (false, _) => dim[t],
                    (true, false) => RIGHT,
                    (true, true) => WRONG,
                },
            );
            put(&mut u_rgb, viridis(u / idx.len() as f32));
        });
        let uri = |rgb: &[u8]| png_data_uri(tw, th, rgb);
        ThumbnailRow {
            image: name.to_string(),
            width: tw,
            height: th,
            photo: uri(&photo),
            truth: uri(&t_rgb),
            prediction: uri(&p_rgb),
            errors: uri(&e_rgb),
            uncertainty: uri(&u_rgb),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn boxes_cover_every_source_pixel_once() {
        for (w, h, tw, th) in [(10, 7, 3, 2), (5, 5, 5, 5), (400, 300, 176, 132)] {
            let mut seen = vec![0u32; w * h];
            for_each_box(w, h, tw, th, |_, idx| {
                idx.iter().for_each(|&i| seen[i] += 1)
            });
            assert!(seen.iter().all(|&s| s == 1), "{w}x{h} → {tw}x{th}");
        }
        assert_eq!(thumb_size(1000, 500), (176, 88));
        assert_eq!(thumb_size(40, 30), (40, 30));
    }

    #[test]
    fn mode_ignores_unlabelled_and_prefers_lower_on_ties() {
        let mut c = [0u32; 256];
        assert_eq!(mode(&[255, 255, 2, 1], &[0, 1, 2, 3], &mut c), Some(1));
        assert_eq!(mode(&[255, 255], &[0, 1], &mut c), None);
        assert_eq!(mode(&[3, 3, 0], &[0, 1, 2], &mut c), Some(3));
    }
}
