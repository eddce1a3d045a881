//! Georeferenced images in memory: a grid of samples and the affine map from its pixels to the
//! map.
//!
//! **In:** samples (one band, `f32`), which of them are valid, and a GDAL-order geotransform.
//! **Out:** an [`Image`] that the raster reader fills and the keypoint detector and the
//! area-based refinement read; [`GeoTransform`] converts between pixel/line and map
//! coordinates both ways.
//!
//! Two coordinate conventions meet here, and every function says which it takes:
//! - **pixel/line** (GDAL's): (0, 0) is the top-left *corner* of the top-left pixel, so the
//!   centre of the sample in column `c`, row `r` is at (c + 0.5, r + 0.5);
//! - **sample index**: the centre of the sample in column `c`, row `r` is at (c, r). Image
//!   processing (filters, peaks, interpolation) works in these.
//!
//! ```
//! use tiemark::image::GeoTransform;
//! // 25 cm pixels, north up, top-left corner at (500 000, 6 000 000).
//! let gt = GeoTransform([500_000.0, 0.25, 0.0, 6_000_000.0, 0.0, -0.25]);
//! assert_eq!(gt.pixel_to_map(4.0, 8.0), [500_001.0, 5_999_998.0]);
//! let back = gt.inverse().unwrap().pixel_to_map(500_001.0, 5_999_998.0);
//! assert!((back[0] - 4.0).abs() < 1e-9 && (back[1] - 8.0).abs() < 1e-9);
//! ```

/// An affine map from pixel/line to map coordinates in GDAL's order
/// `[x0, dx, rx, y0, ry, dy]`: x = x0 + dx·p + rx·l, y = y0 + ry·p + dy·l. North-up images have
/// rx = ry = 0 and dy < 0. (Not `geo`'s affine order.)
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GeoTransform(pub [f64; 6]);

impl GeoTransform {
    /// The map position of pixel/line (p, l).
    #[inline]
    pub fn pixel_to_map(&self, p: f64, l: f64) -> [f64; 2] {
        let g = &self.0;
        [g[0] + g[1] * p + g[2] * l, g[3] + g[4] * p + g[5] * l]
    }

    /// The inverse map (map → pixel/line, also in GDAL's order); `None` when the pixel axes are
    /// parallel or a pixel has no area.
    pub fn inverse(&self) -> Option<GeoTransform> {
        let g = &self.0;
        let det = g[1] * g[5] - g[2] * g[4];
        if !det.is_finite()
            || det.abs() <= f64::EPSILON * (g[1].abs() + g[2].abs()) * (g[4].abs() + g[5].abs())
        {
            return None;
        }
        let (a, b, c, d) = (g[5] / det, -g[2] / det, -g[4] / det, g[1] / det);
        Some(GeoTransform([
            -(a * g[0] + b * g[3]),
            a,
            b,
            -(c * g[0] + d * g[3]),
            c,
            d,
        ]))
    }

    /// The pixel/line of map position (x, y); `None` when the transform has no inverse.
    pub fn map_to_pixel(&self, x: f64, y: f64) -> Option<[f64; 2]> {
        self.inverse().map(|i| i.pixel_to_map(x, y))
    }

    /// The side of a square of the same area as one pixel, in map units: the ground sampling
    /// distance of a north-up image, and its equivalent for a rotated or skewed one.
    pub fn pixel_size(&self) -> f64 {
        let g = &self.0;
        (g[1] * g[5] - g[2] * g[4]).abs().sqrt()
    }

    /// True when the pixel axes run along the map axes (no rotation or skew terms).
    pub fn is_north_up(&self) -> bool {
        self.0[2] == 0.0 && self.0[4] == 0.0
    }

    /// The geotransform of the same image read with every `factor` × `factor` block of pixels
    /// as one (the grid of a decimated read or of an overview that halves the size
    /// `log2(factor)` times): same top-left corner, pixels `factor` times larger.
    pub fn scaled(&self, factor: f64) -> GeoTransform {
        let g = &self.0;
        GeoTransform([
            g[0],
            g[1] * factor,
            g[2] * factor,
            g[3],
            g[4] * factor,
            g[5] * factor,
        ])
    }

    /// The geotransform of the same image resampled so that one new pixel spans `fx` old
    /// pixels across and `fy` down (same top-left corner): the grid GDAL gives an overview
    /// of `w × h` pixels made from a `W × H` image, with fx = W / w and fy = H / h, which
    /// differ from the nominal factor when W or H is not a multiple of it.
    pub fn scaled_xy(&self, fx: f64, fy: f64) -> GeoTransform {
        let g = &self.0;
        GeoTransform([g[0], g[1] * fx, g[2] * fy, g[3], g[4] * fx, g[5] * fy])
    }

    /// The geotransform of a window whose top-left corner is pixel/line (p0, l0).
    pub fn window(&self, p0: f64, l0: f64) -> GeoTransform {
        let [x, y] = self.pixel_to_map(p0, l0);
        let g = &self.0;
        GeoTransform([x, g[1], g[2], y, g[4], g[5]])
    }

    /// The map position of the centre of the sample with index (c, r).
    #[inline]
    pub fn sample_to_map(&self, c: f64, r: f64) -> [f64; 2] {
        self.pixel_to_map(c + 0.5, r + 0.5)
    }
}

/// One band of a georeferenced image: `width × height` samples, row by row from the top, with
/// a validity mask (no data, outside the footprint, alpha zero) and the geotransform of the
/// grid the samples are on.
#[derive(Debug, Clone, PartialEq)]
pub struct Image {
    /// Columns.
    pub width: usize,
    /// Rows.
    pub height: usize,
    /// Samples, row-major from the top-left; invalid samples hold 0.
    pub pixels: Vec<f32>,
    /// One flag a sample, `true` where the sample is real data; empty when every sample is.
    pub valid: Vec<bool>,
    /// From this grid's pixel/line to map coordinates.
    pub geotransform: GeoTransform,
}

impl Image {
    /// An image of the given samples, all valid. Panics when `pixels.len() != width * height`
    /// (a programming error, not an input error).
    pub fn new(width: usize, height: usize, pixels: Vec<f32>, geotransform: GeoTransform) -> Image {
        assert_eq!(pixels.len(), width * height, "image size");
        Image {
            width,
            height,
            pixels,
            valid: Vec::new(),
            geotransform,
        }
    }

    /// The sample in column `c`, row `r` (no bounds check beyond the slice's).
    #[inline]
    pub fn at(&self, c: usize, r: usize) -> f32 {
        self.pixels[r * self.width + c]
    }

    /// True when the sample in column `c`, row `r` is inside the image and real data.
    #[inline]
    pub fn is_valid(&self, c: usize, r: usize) -> bool {
        c < self.width
            && r < self.height
            && (self.valid.is_empty() || self.valid[r * self.width + c])
    }

    /// Bilinear interpolation at sample-index coordinates (x, y); `None` when any of the four
    /// samples around it is outside the image or not valid.
    pub fn bilinear(&self, x: f64, y: f64) -> Option<f64> {
        if !(x >= 0.0 && y >= 0.0) {
            return None;
        }
        let (c, r) = (x.floor() as usize, y.floor() as usize);
        let (c1, r1) = (c + usize::from(x > c as f64), r + usize::from(y > r as f64));
        if !(self.is_valid(c, r)
            && self.is_valid(c1, r)
            && self.is_valid(c, r1)
            && self.is_valid(c1, r1))
        {
            return None;
        }
        let (fx, fy) = (x - c as f64, y - r as f64);
        let top = f64::from(self.at(c, r)) * (1.0 - fx) + f64::from(self.at(c1, r)) * fx;
        let bottom = f64::from(self.at(c, r1)) * (1.0 - fx) + f64::from(self.at(c1, r1)) * fx;
        Some(top * (1.0 - fy) + bottom * fy)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn inverse_of_a_rotated_geotransform_round_trips() {
        // 10 cm pixels turned by 30°, with a skew term: the inverse maps every corner back.
        let (s, c) = (30f64.to_radians().sin(), 30f64.to_radians().cos());
        let gt = GeoTransform([1000.0, 0.1 * c, 0.1 * s + 0.003, 2000.0, 0.1 * s, -0.1 * c]);
        let inv = gt.inverse().unwrap();
        for (p, l) in [(0.0, 0.0), (640.0, 0.0), (0.0, 480.0), (640.5, 480.25)] {
            let [x, y] = gt.pixel_to_map(p, l);
            let [p2, l2] = inv.pixel_to_map(x, y);
            assert!(
                (p2 - p).abs() < 1e-7 && (l2 - l).abs() < 1e-7,
                "{p} {l} -> {p2} {l2}"
            );
        }
        assert!(!gt.is_north_up());
    }

    #[test]
    fn singular_geotransform_has_no_inverse() {
        assert!(GeoTransform([0.0, 1.0, 2.0, 0.0, 0.5, 1.0])
            .inverse()
            .is_none());
        assert!(GeoTransform([0.0, 0.0, 0.0, 0.0, 0.0, 0.0])
            .inverse()
            .is_none());
    }

    #[test]
    fn scaled_and_window_keep_the_ground_where_it_is() {
        let gt = GeoTransform([500.0, 0.05, 0.0, 900.0, 0.0, -0.05]);
        // Pixel (8, 4) of a read decimated by 4 covers full-resolution pixels (32..36, 16..20).
        assert_eq!(
            gt.scaled(4.0).pixel_to_map(8.0, 4.0),
            gt.pixel_to_map(32.0, 16.0)
        );
        assert_eq!(
            gt.window(100.0, 50.0).pixel_to_map(1.0, 2.0),
            gt.pixel_to_map(101.0, 52.0)
        );
        assert!((gt.pixel_size() - 0.05).abs() < 1e-15);
        // An overview of 3 × 2 pixels made from a 10 × 5 image: one pixel is 10/3 × 5/2.
        let r = GeoTransform([500.0, 0.05, 0.01, 900.0, 0.02, -0.05]);
        let o = r.scaled_xy(10.0 / 3.0, 2.5);
        for [p, l] in [[1.0, 1.0], [3.0, 2.0], [0.5, 1.5]] {
            let (a, b) = (
                o.pixel_to_map(p, l),
                r.pixel_to_map(p * 10.0 / 3.0, l * 2.5),
            );
            assert!((a[0] - b[0]).abs() < 1e-12 && (a[1] - b[1]).abs() < 1e-12);
        }
        assert_eq!(gt.scaled_xy(4.0, 4.0), gt.scaled(4.0));
    }

    #[test]
    fn bilinear_is_exact_on_a_plane_and_refuses_invalid_neighbours() {
        let gt = GeoTransform([0.0, 1.0, 0.0, 0.0, 0.0, -1.0]);
        let (w, h) = (5, 4);
        let pixels = (0..w * h)
            .map(|i| (2 * (i % w) + 3 * (i / w)) as f32)
            .collect();
        let mut img = Image::new(w, h, pixels, gt);
        let v = img.bilinear(1.25, 2.5).unwrap();
        assert!((v - (2.0 * 1.25 + 3.0 * 2.5)).abs() < 1e-9);
        assert_eq!(img.bilinear(4.0, 3.0), Some(17.0));
        assert_eq!(img.bilinear(4.5, 1.0), None);
        img.valid = vec![true; w * h];
        img.valid[3 * w + 3] = false;
        assert_eq!(img.bilinear(1.5, 1.5), Some(2.0 * 1.5 + 3.0 * 1.5));
        assert_eq!(img.bilinear(2.5, 2.5), None);
    }
}
