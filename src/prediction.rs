//! What a segmenter delivers for one image: the label map and the probabilities it came
//! from, after the optional pairwise smoothing ([`crate::smooth`]). Every output (label maps,
//! overlays, confidence and uncertainty maps, areas, scores) is built from a [`Prediction`],
//! so with mean-field smoothing the confidence maps show the smoothed probabilities, and the
//! CLI, the batch driver and the web workspace all go through [`Segmenter::predictions`].

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::imageio::RasterImage;
use crate::plane::Plane;
use crate::segmenter::{Probabilities, Segmenter};
use crate::smooth::tiles::{TiledSmoother, SMOOTH_HALO};
use crate::smooth::{contrast_beta, smooth, SmoothMethod, SmoothSettings};

/// The smoothing a model applies unless told otherwise: only method and strength are stored
/// (the solver's other settings keep their defaults), so tuning the solver never changes the
/// model file's layout.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct SmoothDefault {
    pub method: SmoothMethod,
    pub strength: f32,
}

impl SmoothDefault {
    /// No smoothing (what models of format version 1 get).
    pub const NONE: SmoothDefault = SmoothDefault {
        method: SmoothMethod::None,
        strength: 0.0,
    };

    /// The library's default ([`SmoothSettings::default`]), for models trained without the
    /// strength search of `grove train`.
    pub fn library() -> Self {
        let s = SmoothSettings::default();
        SmoothDefault {
            method: s.method,
            strength: s.strength,
        }
    }

    /// The full settings (strength 0 is no smoothing, whatever the method).
    pub fn settings(&self) -> SmoothSettings {
        let method = if self.strength == 0.0 {
            SmoothMethod::None
        } else {
            self.method
        };
        SmoothSettings {
            method,
            strength: self.strength,
            ..SmoothSettings::default()
        }
    }

    /// "expansion, strength 3" or "none".
    pub fn describe(&self) -> String {
        describe(&self.settings())
    }
}

/// "expansion, strength 3" or "none".
pub fn describe(s: &SmoothSettings) -> String {
    match s.method {
        SmoothMethod::None => "none".into(),
        m => format!("{}, strength {}", m.name(), s.strength),
    }
}

/// Labels and probabilities of one image.
#[derive(Clone, Debug, PartialEq)]
pub struct Prediction {
    /// Class index (not id) per pixel, row-major.
    pub labels: Vec<u8>,
    /// The forest's probabilities, or mean-field's smoothed ones.
    pub probabilities: Probabilities,
}

impl From<Probabilities> for Prediction {
    /// No smoothing: the most probable class per pixel.
    fn from(probabilities: Probabilities) -> Self {
        Prediction {
            labels: probabilities.argmax(),
            probabilities,
        }
    }
}

/// An image's colour as the smoothing energy sees it: its CIE Lab planes in the model's colour
/// mode and the contrast scale β computed from them. Made once per image, so several
/// smoothing settings (`eval --compare-smoothing`, the strength search of `train`) share it.
pub struct ImageContrast {
    pub lab: Vec<Plane>,
    pub beta: f32,
}

impl ImageContrast {
    pub fn new(model: &Segmenter, image: &RasterImage) -> Self {
        let lab = model.features.lab(image);
        let beta = contrast_beta(&lab);
        ImageContrast { lab, beta }
    }

    /// Smooths `probs` with `settings` (expected validated), in tiles of `tile` pixels with
    /// a halo of [`SMOOTH_HALO`] (`tile` = 0, or an image within one tile: whole).
    pub fn smooth(
        &self,
        probs: Probabilities,
        settings: &SmoothSettings,
        tile: usize,
    ) -> Prediction {
        if settings.method == SmoothMethod::None {
            return probs.into();
        }
        let (w, h) = (probs.width, probs.height);
        if tile == 0 || (w <= tile && h <= crate::tiling::band_rows(w, tile)) {
            let s = smooth(&probs, &self.lab, settings, Some(self.beta));
            return Prediction {
                labels: s.labels,
                probabilities: s.probabilities.unwrap_or(probs),
            };
        }
        let k = probs.n_classes;
        let mut smoother = TiledSmoother::new(settings, self.beta, (w, h), k, tile, SMOOTH_HALO);
        let mut labels = Vec::with_capacity(w * h);
        let mut data = Vec::with_capacity(w * h * k);
        // Pushed a band at a time so only one band of the image is copied at once.
        let step = crate::tiling::band_rows(w, tile);
        for y in (0..h).step_by(step) {
            let rows = step.min(h - y);
            let lab: Vec<Plane> = self
                .lab
                .iter()
                .map(|p| Plane::from_vec(w, rows, p.data[y * w..(y + rows) * w].to_vec()))
                .collect();
            let band = Probabilities {
                width: w,
                height: rows,
                n_classes: k,
                data: probs.data[y * w * k..(y + rows) * w * k].to_vec(),
            };
            for done in smoother.push(&lab, &band) {
                labels.extend(done.labels);
                data.extend(done.probabilities.data);
            }
        }
        Prediction {
            labels,
            probabilities: Probabilities {
                width: w,
                height: h,
                n_classes: k,
                data,
            },
        }
    }
}

impl Segmenter {
    /// The image's prediction under each of `settings` (validated), from one forest pass in
    /// tiles of `tile` pixels (see [`crate::tiling::predict_tiled`]). The image's Lab planes
    /// are computed only when some setting smooths, so `none` costs nothing extra.
    pub fn predictions(
        &self,
        image: &RasterImage,
        tile: usize,
        settings: &[SmoothSettings],
    ) -> Vec<Prediction> {
        let probs = crate::tiling::predict_tiled(self, image, tile);
        self.smooth_all(image, probs, tile, settings)
    }

    /// One prediction under `settings` (validated).
    pub fn predict(
        &self,
        image: &RasterImage,
        tile: usize,
        settings: &SmoothSettings,
    ) -> Prediction {
        self.predictions(image, tile, std::slice::from_ref(settings))
            .pop()
            .expect("one setting gives one prediction")
    }

    /// `probs` (of `image`) under each of `settings`, smoothed in tiles of `tile` pixels
    /// (0 = whole; see [`ImageContrast::smooth`]). Alpha-expansion runs on one thread, so
    /// several settings are smoothed in parallel; a single one takes `probs` by move.
    pub fn smooth_all(
        &self,
        image: &RasterImage,
        probs: Probabilities,
        tile: usize,
        settings: &[SmoothSettings],
    ) -> Vec<Prediction> {
        let contrast = settings
            .iter()
            .any(|s| s.method != SmoothMethod::None)
            .then(|| ImageContrast::new(self, image));
        let one = |p: Probabilities, s: &SmoothSettings| match &contrast {
            Some(c) => c.smooth(p, s, tile),
            None => p.into(),
        };
        match settings {
            [s] => vec![one(probs, s)],
            _ => settings.par_iter().map(|s| one(probs.clone(), s)).collect(),
        }
    }
}
