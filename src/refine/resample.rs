//! Cubic convolution sampling of an [`Image`] at sample-index coordinates.
//!
//! **In:** an image and a position in sample-index coordinates (the centre of sample (c, r) is
//! at (c, r), see [`crate::image`]). **Out:** the interpolated value, or `None` when any of the
//! 4 × 4 samples the kernel reads is outside the image or not valid.
//!
//! The kernel is Keys' cubic convolution with a = −1/2 (R. Keys, "Cubic convolution
//! interpolation for digital image processing", IEEE Trans. ASSP 29(6), 1981; from memory). The
//! refinement resamples the target with it rather than bilinearly: a bilinear read at a
//! fractional offset f is the two-tap filter [1 − f, f], whose phase is not linear, and it
//! would pull every measured shift towards whole pixels.

use crate::image::Image;

/// Keys' weights (a = −1/2) of the four samples at offsets −1, 0, 1, 2 from the sample below
/// `t` ∈ [0, 1).
#[inline]
fn weights(t: f64) -> [f64; 4] {
    let t2 = t * t;
    let t3 = t2 * t;
    [
        -0.5 * t3 + t2 - 0.5 * t,
        1.5 * t3 - 2.5 * t2 + 1.0,
        -1.5 * t3 + 2.0 * t2 + 0.5 * t,
        0.5 * t3 - 0.5 * t2,
    ]
}

/// The cubic-convolution value of `image` at sample-index coordinates (x, y); `None` when any
/// of the 4 × 4 samples around it is outside the image or not valid.
pub fn cubic(image: &Image, x: f64, y: f64) -> Option<f64> {
    if !(x.is_finite() && y.is_finite()) {
        return None;
    }
    let (fx, fy) = (x.floor(), y.floor());
    let (c0, r0) = (fx as i64 - 1, fy as i64 - 1);
    if c0 < 0 || r0 < 0 || c0 + 3 >= image.width as i64 || r0 + 3 >= image.height as i64 {
        return None;
    }
    let (c0, r0) = (c0 as usize, r0 as usize);
    let (wx, wy) = (weights(x - fx), weights(y - fy));
    let mut sum = 0.0;
    for (j, wyj) in wy.iter().enumerate() {
        let mut row = 0.0;
        for (i, wxi) in wx.iter().enumerate() {
            if !image.is_valid(c0 + i, r0 + j) {
                return None;
            }
            row += wxi * f64::from(image.at(c0 + i, r0 + j));
        }
        sum += wyj * row;
    }
    Some(sum)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::image::GeoTransform;

    fn ramp(w: usize, h: usize, f: impl Fn(f64, f64) -> f64) -> Image {
        let pixels = (0..w * h)
            .map(|i| f((i % w) as f64, (i / w) as f64) as f32)
            .collect();
        Image::new(w, h, pixels, GeoTransform([0.0, 1.0, 0.0, 0.0, 0.0, -1.0]))
    }

    #[test]
    fn weights_sum_to_one_and_interpolate() {
        for t in [0.0, 0.1, 0.25, 0.5, 0.9] {
            let w = weights(t);
            assert!((w.iter().sum::<f64>() - 1.0).abs() < 1e-12);
        }
        assert_eq!(weights(0.0), [0.0, 1.0, 0.0, 0.0]);
    }

    #[test]
    fn exact_on_quadratics_and_refuses_invalid_or_outside() {
        // Keys' kernel with a = −1/2 reproduces polynomials up to degree 2 (Keys 1981).
        let mut img = ramp(8, 8, |x, y| 0.5 * x * x - 2.0 * x * y + 3.0 * y + 1.0);
        let (x, y) = (3.3, 4.7);
        let v = cubic(&img, x, y).unwrap();
        assert!((v - (0.5 * x * x - 2.0 * x * y + 3.0 * y + 1.0)).abs() < 1e-9);
        assert_eq!(cubic(&img, 0.5, 3.0), None);
        assert_eq!(cubic(&img, 6.2, 3.0), None);
        assert!(cubic(&img, 1.0, 1.0).is_some());
        img.valid = vec![true; 64];
        img.valid[5 * 8 + 5] = false;
        assert_eq!(cubic(&img, 4.5, 4.5), None);
        assert!(cubic(&img, 2.5, 2.5).is_some());
    }
}
