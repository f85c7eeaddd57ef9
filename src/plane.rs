//! A single-channel f32 raster, row-major. Every filter and feature in grove works on
//! planes because separable filters and integral images want one contiguous channel at a
//! time (see DESIGN notes: plane-major for filters, pixel-major for the forest).

/// One channel of an image: `data[y * width + x]`.
#[derive(Clone, Debug, PartialEq)]
pub struct Plane {
    pub width: usize,
    pub height: usize,
    pub data: Vec<f32>,
}

impl Plane {
    /// A plane filled with `value`.
    pub fn filled(width: usize, height: usize, value: f32) -> Self {
        Plane {
            width,
            height,
            data: vec![value; width * height],
        }
    }

    /// Wraps existing row-major data; panics only on a programming error (length mismatch).
    pub fn from_vec(width: usize, height: usize, data: Vec<f32>) -> Self {
        assert_eq!(data.len(), width * height, "plane data length");
        Plane {
            width,
            height,
            data,
        }
    }

    #[inline]
    pub fn get(&self, x: usize, y: usize) -> f32 {
        self.data[y * self.width + x]
    }

    #[inline]
    pub fn len(&self) -> usize {
        self.data.len()
    }

    #[inline]
    pub fn is_empty(&self) -> bool {
        self.data.is_empty()
    }

    /// Row `y` as a slice.
    #[inline]
    pub fn row(&self, y: usize) -> &[f32] {
        &self.data[y * self.width..(y + 1) * self.width]
    }
}
