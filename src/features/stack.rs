//! The per-pixel feature vector: the one place that knows the feature order and names.
//!
//! Order: filter-bank responses (see `bank`), then position (x, y in [0, 1]) if enabled,
//! then the local texton histograms (k bins per window size). Filters want planes, the
//! forest wants one row of F floats per pixel; planes are kept and rows are gathered in
//! blocks only when the forest needs them, so a full pixel-major copy never exists.

use serde::{Deserialize, Serialize};

use crate::error::{GroveError, Result};
use crate::features::bank::{filter_bank, filter_bank_names, FilterBankConfig};
use crate::features::color::lab_planes;
use crate::features::gaussian::kernel_radius;
use crate::features::textons::{texton_histograms, TextonDictionary};
use crate::imageio::RasterImage;
use crate::plane::Plane;

/// Everything that decides which features a model computes; stored in the model file.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FeatureConfig {
    pub bank: FilterBankConfig,
    /// Append normalised x and y. Off by default: only where a class really sits in the same
    /// place in every image (registered scans such as MRI templates, a fixed camera) do they
    /// carry over to new images; elsewhere they learn where things happened to be.
    pub position: bool,
    /// Texton dictionary size k; 0 disables texton features.
    pub textons: usize,
    /// Square window sides (odd, pixels) for the local texton histograms.
    pub texton_windows: Vec<usize>,
    /// Pixels per training image fed to k-means.
    pub texton_samples_per_image: usize,
    /// Lloyd iterations for the texton dictionary.
    pub kmeans_iterations: usize,
    /// k-means restarts (the lowest-inertia run is kept).
    pub kmeans_restarts: usize,
}

impl Default for FeatureConfig {
    fn default() -> Self {
        FeatureConfig {
            bank: FilterBankConfig::default(),
            position: false,
            textons: 32,
            texton_windows: vec![15],
            texton_samples_per_image: 5000,
            kmeans_iterations: 50,
            kmeans_restarts: 1,
        }
    }
}

/// Largest texton dictionary (k-means cost grows with k; 32 is the default).
pub const MAX_TEXTONS: usize = 1024;
/// Largest texton histogram window side (the histograms' own limit).
pub const MAX_TEXTON_WINDOW: usize = crate::features::textons::MAX_WINDOW;
/// Most pixels per image fed to k-means.
pub const MAX_TEXTON_SAMPLES: usize = 1_000_000;

impl FeatureConfig {
    pub fn validate(&self) -> Result<()> {
        self.bank.validate()?;
        if self.textons > 0 {
            if self.textons > MAX_TEXTONS {
                return Err(GroveError::Config(format!(
                    "{} textons is too many (at most {MAX_TEXTONS})",
                    self.textons
                )));
            }
            if self.texton_windows.is_empty() || self.texton_windows.len() > 2 {
                return Err(GroveError::Config(
                    "give one or two texton window sizes".into(),
                ));
            }
            if let Some(w) = self
                .texton_windows
                .iter()
                .find(|&&w| w % 2 == 0 || w == 0 || w > MAX_TEXTON_WINDOW)
            {
                return Err(GroveError::Config(format!(
                    "texton window {w} must be an odd number between 1 and {MAX_TEXTON_WINDOW}"
                )));
            }
            if !(1..=MAX_TEXTON_SAMPLES).contains(&self.texton_samples_per_image) {
                return Err(GroveError::Config(format!(
                    "texton samples per image must be between 1 and {MAX_TEXTON_SAMPLES}"
                )));
            }
        }
        Ok(())
    }
}

/// All feature planes of one image, in the canonical order.
pub struct FeatureStack {
    pub width: usize,
    pub height: usize,
    pub planes: Vec<Plane>,
}

impl FeatureStack {
    pub fn n_features(&self) -> usize {
        self.planes.len()
    }

    /// Pixel-major rows for the given pixel indices.
    pub fn gather_rows(&self, pixels: &[u32]) -> Vec<f32> {
        gather_rows(&self.planes, pixels)
    }

    /// Pixel-major rows for pixels `start..start + out.len() / F`.
    pub fn rows_into(&self, start: usize, out: &mut [f32]) {
        let all = Rect::whole(self.width, self.height);
        self.rect_rows_into(&all, start, out);
    }

    /// Pixel-major rows for pixels `start..start + out.len() / F` of the sub-rectangle `rect`
    /// (counted row-major within `rect`, in stack coordinates): a tile's core inside its
    /// window with halo.
    pub fn rect_rows_into(&self, rect: &Rect, start: usize, out: &mut [f32]) {
        let f = self.planes.len();
        let n = out.len() / f;
        let mut i = 0;
        while i < n {
            // One contiguous run of a row of `rect` at a time.
            let (cx, cy) = ((start + i) % rect.width, (start + i) / rect.width);
            let run = (rect.width - cx).min(n - i);
            let from = (rect.y + cy) * self.width + rect.x + cx;
            for (j, plane) in self.planes.iter().enumerate() {
                for (r, &v) in plane.data[from..from + run].iter().enumerate() {
                    out[(i + r) * f + j] = v;
                }
            }
            i += run;
        }
    }
}

/// A rectangle of pixels: columns `x..x + width`, rows `y..y + height`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Rect {
    pub x: usize,
    pub y: usize,
    pub width: usize,
    pub height: usize,
}

impl Rect {
    /// All of a `width × height` image.
    pub fn whole(width: usize, height: usize) -> Rect {
        Rect {
            x: 0,
            y: 0,
            width,
            height,
        }
    }

    pub fn area(&self) -> usize {
        self.width * self.height
    }
}

/// Where the pixels handed to [`FeatureExtractor::features_at`] sit in the whole image, so
/// features that depend on the position are computed in whole-image coordinates.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Placement {
    /// Size of the whole image.
    pub image_width: usize,
    pub image_height: usize,
    /// The excerpt within it.
    pub window: Rect,
}

impl Placement {
    /// An image on its own.
    pub fn whole(width: usize, height: usize) -> Placement {
        Placement {
            image_width: width,
            image_height: height,
            window: Rect::whole(width, height),
        }
    }
}

/// The fitted feature stage: config, colour mode and texton dictionary.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct FeatureExtractor {
    pub config: FeatureConfig,
    /// 1 (lightness only, trained on grey images) or 3 (L, a, b).
    pub channels: usize,
    pub textons: Option<TextonDictionary>,
}

impl FeatureExtractor {
    /// CIE Lab planes in the model's colour mode: grey input to a colour model gives
    /// a = b = 0; colour input to a grey model keeps L only.
    pub fn lab(&self, image: &RasterImage) -> Vec<Plane> {
        let mut lab = if self.channels == 3 {
            lab_planes(&image.to_rgb().channels)
        } else {
            lab_planes(&image.channels)
        };
        lab.truncate(self.channels);
        lab
    }

    /// The filter-bank responses (the input of the texton dictionary).
    pub fn responses(&self, image: &RasterImage) -> Vec<Plane> {
        filter_bank(&self.lab(image), &self.config.bank)
    }

    /// Appends position and texton histograms to the responses of a whole image.
    pub fn stack(&self, responses: Vec<Plane>) -> FeatureStack {
        let (w, h) = (responses[0].width, responses[0].height);
        self.stack_at(responses, &Placement::whole(w, h))
    }

    /// Appends position (in whole-image coordinates) and texton histograms to the responses
    /// of the excerpt `at.window` of an image.
    pub fn stack_at(&self, responses: Vec<Plane>, at: &Placement) -> FeatureStack {
        let (w, h) = (responses[0].width, responses[0].height);
        debug_assert_eq!((w, h), (at.window.width, at.window.height));
        let mut planes = responses;
        if self.config.position {
            planes.extend(position_planes_at(at));
        }
        if let Some(dict) = &self.textons {
            let map = dict.assign_planes(
                &planes[..filter_bank_names(self.channels, &self.config.bank).len()],
            );
            for &win in &self.config.texton_windows {
                planes.extend(texton_histograms(&map, w, h, dict.k(), win).expect(
                    "texton windows are checked by FeatureConfig::validate before fitting",
                ));
            }
        }
        FeatureStack {
            width: w,
            height: h,
            planes,
        }
    }

    /// Responses + stack in one call.
    pub fn features(&self, image: &RasterImage) -> FeatureStack {
        self.stack(self.responses(image))
    }

    /// Features of `window`, the excerpt `at.window` of a larger image. They equal the
    /// whole image's features exactly at every pixel at least [`FeatureExtractor::halo`]
    /// pixels inside each edge of the window that is not an edge of the image (the filters
    /// and histograms reflect at the window's edges, which is right only where the window
    /// edge is the image's).
    pub fn features_at(&self, window: &RasterImage, at: &Placement) -> FeatureStack {
        self.stack_at(self.responses(window), at)
    }

    /// How far (in pixels, along each axis) the features of a pixel reach: the widest
    /// Gaussian kernel radius (4σ truncation) plus half the widest texton window, because
    /// a histogram counts the textons of pixels whose textons depend on filter responses.
    pub fn halo(&self) -> usize {
        let filters = self
            .config
            .bank
            .scales
            .iter()
            .map(|&s| kernel_radius(s))
            .max()
            .unwrap_or(0);
        let windows = match self.textons {
            Some(_) => self.config.texton_windows.iter().max().map_or(0, |w| w / 2),
            None => 0,
        };
        filters + windows
    }

    /// Feature names in stack order.
    pub fn names(&self) -> Vec<String> {
        let mut names = filter_bank_names(self.channels, &self.config.bank);
        if self.config.position {
            names.extend(POSITION_NAMES.map(String::from));
        }
        if let Some(dict) = &self.textons {
            for &win in &self.config.texton_windows {
                names.extend((0..dict.k()).map(|j| format!("texton{j}_w{win}")));
            }
        }
        names
    }

    pub fn n_features(&self) -> usize {
        self.names().len()
    }
}

/// Pixel-major rows (one value per plane) at the given pixel indices.
pub fn gather_rows(planes: &[Plane], pixels: &[u32]) -> Vec<f32> {
    let f = planes.len();
    let mut out = vec![0.0f32; pixels.len() * f];
    for (j, plane) in planes.iter().enumerate() {
        for (row, &p) in pixels.iter().enumerate() {
            out[row * f + j] = plane.data[p as usize];
        }
    }
    out
}

/// Names of the two position features.
pub const POSITION_NAMES: [&str; 2] = ["pos_x", "pos_y"];

/// x / (w - 1) and y / (h - 1), so both run over [0, 1] whatever the image size.
pub fn position_planes(w: usize, h: usize) -> [Plane; 2] {
    position_planes_at(&Placement::whole(w, h))
}

/// [`position_planes`] of the whole image, over the excerpt `at.window` only.
pub fn position_planes_at(at: &Placement) -> [Plane; 2] {
    let sx = 1.0 / (at.image_width.max(2) - 1) as f32;
    let sy = 1.0 / (at.image_height.max(2) - 1) as f32;
    let Rect {
        x,
        y,
        width: w,
        height: h,
    } = at.window;
    let xs: Vec<f32> = (0..w * h).map(|i| (x + i % w) as f32 * sx).collect();
    let ys: Vec<f32> = (0..w * h).map(|i| (y + i / w) as f32 * sy).collect();
    [Plane::from_vec(w, h, xs), Plane::from_vec(w, h, ys)]
}
