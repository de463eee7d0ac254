//! The kernel's logo, drawn in code.
//!
//! The picture: on a rounded dark-blue tile, a thin vertical height mast with
//! two wind arrows leaving it. The low arrow is short and points east; the
//! high arrow is longer and turned to the north-east: wind that strengthens
//! and veers with height, which is what Baroc is about. Shapes are defined in
//! unit coordinates (0..1, y downwards) and sampled 4x4 per pixel for smooth
//! edges, so any size renders from the same description.

/// Straight RGBA colour, components 0..1.
#[derive(Clone, Copy)]
struct Colour([f32; 4]);

const TILE_TOP: Colour = Colour([0.07, 0.16, 0.30, 1.0]);
const TILE_BOTTOM: Colour = Colour([0.10, 0.33, 0.45, 1.0]);
const MAST: Colour = Colour([0.80, 0.86, 0.92, 0.85]);
const LOW_WIND: Colour = Colour([0.62, 0.84, 1.00, 1.0]);
const HIGH_WIND: Colour = Colour([1.00, 0.71, 0.28, 1.0]);

const SUBSAMPLES: u32 = 4;

/// One arrow: a shaft from `tail` to `tip` with a triangular head.
struct Arrow {
    tail: (f32, f32),
    tip: (f32, f32),
    shaft_half_width: f32,
    head_length: f32,
    head_half_width: f32,
    colour: Colour,
}

fn arrows() -> [Arrow; 2] {
    // Veering of the high arrow: 30 degrees above east, length 0.62.
    let angle = 30f32.to_radians();
    let high_tail = (0.20, 0.40);
    let high_tip = (
        high_tail.0 + 0.62 * angle.cos(),
        high_tail.1 - 0.62 * angle.sin(),
    );
    [
        Arrow {
            tail: (0.20, 0.72),
            tip: (0.60, 0.72),
            shaft_half_width: 0.045,
            head_length: 0.17,
            head_half_width: 0.12,
            colour: LOW_WIND,
        },
        Arrow {
            tail: high_tail,
            tip: high_tip,
            shaft_half_width: 0.045,
            head_length: 0.19,
            head_half_width: 0.13,
            colour: HIGH_WIND,
        },
    ]
}

/// Colour of the picture at one point, or transparent outside the tile.
fn sample(x: f32, y: f32) -> [f32; 4] {
    if !inside_rounded_square(x, y, 0.04, 0.20) {
        return [0.0; 4];
    }
    let mut colour = mix(TILE_TOP, TILE_BOTTOM, y);
    let mast = segment_distance((x, y), (0.20, 0.16), (0.20, 0.86));
    if mast < 0.025 {
        colour = over(colour, MAST);
    }
    for arrow in arrows() {
        if arrow_contains(&arrow, x, y) {
            colour = over(colour, arrow.colour.0);
        }
    }
    colour
}

fn inside_rounded_square(x: f32, y: f32, margin: f32, radius: f32) -> bool {
    let (low, high) = (margin + radius, 1.0 - margin - radius);
    let dx = if x < low {
        low - x
    } else if x > high {
        x - high
    } else {
        0.0
    };
    let dy = if y < low {
        low - y
    } else if y > high {
        y - high
    } else {
        0.0
    };
    x >= margin
        && x <= 1.0 - margin
        && y >= margin
        && y <= 1.0 - margin
        && dx * dx + dy * dy <= radius * radius
}

fn arrow_contains(arrow: &Arrow, x: f32, y: f32) -> bool {
    let (dx, dy) = (arrow.tip.0 - arrow.tail.0, arrow.tip.1 - arrow.tail.1);
    let length = (dx * dx + dy * dy).sqrt();
    let (ux, uy) = (dx / length, dy / length);
    // Distance along the arrow from its tail, and distance across it.
    let (px, py) = (x - arrow.tail.0, y - arrow.tail.1);
    let along = px * ux + py * uy;
    let across = (-px * uy + py * ux).abs();
    let head_start = length - arrow.head_length;
    if along >= 0.0 && along <= head_start && across <= arrow.shaft_half_width {
        return true;
    }
    if along > head_start && along <= length {
        let allowed = arrow.head_half_width * (length - along) / arrow.head_length;
        return across <= allowed;
    }
    false
}

fn segment_distance(p: (f32, f32), a: (f32, f32), b: (f32, f32)) -> f32 {
    let (abx, aby) = (b.0 - a.0, b.1 - a.1);
    let t = (((p.0 - a.0) * abx + (p.1 - a.1) * aby) / (abx * abx + aby * aby)).clamp(0.0, 1.0);
    let (cx, cy) = (a.0 + t * abx, a.1 + t * aby);
    ((p.0 - cx).powi(2) + (p.1 - cy).powi(2)).sqrt()
}

fn mix(a: Colour, b: Colour, t: f32) -> [f32; 4] {
    let t = t.clamp(0.0, 1.0);
    std::array::from_fn(|i| a.0[i] * (1.0 - t) + b.0[i] * t)
}

/// Porter-Duff "over" of a straight-alpha colour onto an opaque one.
fn over(below: [f32; 4], above: impl Into<[f32; 4]>) -> [f32; 4] {
    let above = above.into();
    let alpha = above[3];
    [
        above[0] * alpha + below[0] * (1.0 - alpha),
        above[1] * alpha + below[1] * (1.0 - alpha),
        above[2] * alpha + below[2] * (1.0 - alpha),
        alpha + below[3] * (1.0 - alpha),
    ]
}

impl From<Colour> for [f32; 4] {
    fn from(colour: Colour) -> Self {
        colour.0
    }
}

/// The logo as straight RGBA8 pixels, row by row.
pub fn logo_pixels(size: u32) -> Vec<u8> {
    let mut pixels = Vec::with_capacity((size * size * 4) as usize);
    let step = 1.0 / (size * SUBSAMPLES) as f32;
    for row in 0..size {
        for column in 0..size {
            // Average premultiplied colour over the subsamples.
            let mut sum = [0.0f32; 4];
            for sy in 0..SUBSAMPLES {
                for sx in 0..SUBSAMPLES {
                    let x = ((column * SUBSAMPLES + sx) as f32 + 0.5) * step;
                    let y = ((row * SUBSAMPLES + sy) as f32 + 0.5) * step;
                    let colour = sample(x, y);
                    sum[0] += colour[0] * colour[3];
                    sum[1] += colour[1] * colour[3];
                    sum[2] += colour[2] * colour[3];
                    sum[3] += colour[3];
                }
            }
            let count = (SUBSAMPLES * SUBSAMPLES) as f32;
            let alpha = sum[3] / count;
            let straight = |premultiplied: f32| {
                if alpha > 0.0 {
                    premultiplied / count / alpha
                } else {
                    0.0
                }
            };
            for value in [straight(sum[0]), straight(sum[1]), straight(sum[2]), alpha] {
                pixels.push((value.clamp(0.0, 1.0) * 255.0).round() as u8);
            }
        }
    }
    pixels
}

/// The logo as a PNG file of `size` x `size` pixels.
pub fn logo_png(size: u32) -> Result<Vec<u8>, png::EncodingError> {
    let pixels = logo_pixels(size);
    let mut bytes = Vec::new();
    {
        let mut encoder = png::Encoder::new(&mut bytes, size, size);
        encoder.set_color(png::ColorType::Rgba);
        encoder.set_depth(png::BitDepth::Eight);
        let mut writer = encoder.write_header()?;
        writer.write_image_data(&pixels)?;
        writer.finish()?;
    }
    Ok(bytes)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn decode(bytes: &[u8]) -> (png::OutputInfo, Vec<u8>) {
        let decoder = png::Decoder::new(std::io::Cursor::new(bytes));
        let mut reader = decoder.read_info().unwrap();
        let mut pixels = vec![0; reader.output_buffer_size().unwrap()];
        let info = reader.next_frame(&mut pixels).unwrap();
        (info, pixels)
    }

    fn pixel(pixels: &[u8], size: u32, x: u32, y: u32) -> [u8; 4] {
        let i = ((y * size + x) * 4) as usize;
        [pixels[i], pixels[i + 1], pixels[i + 2], pixels[i + 3]]
    }

    #[test]
    fn both_sizes_decode_with_the_right_dimensions() {
        for size in [32, 64] {
            let (info, pixels) = decode(&logo_png(size).unwrap());
            assert_eq!((info.width, info.height), (size, size));
            assert_eq!(info.color_type, png::ColorType::Rgba);
            // Corners lie outside the rounded tile: fully transparent.
            assert_eq!(pixel(&pixels, size, 0, 0)[3], 0);
            assert_eq!(pixel(&pixels, size, size - 1, size - 1)[3], 0);
        }
    }

    #[test]
    fn arrows_show_their_colours_where_drawn() {
        let size = 64;
        let (_, pixels) = decode(&logo_png(size).unwrap());
        // Middle of the low arrow's shaft, (0.40, 0.72) in unit coordinates.
        let low = pixel(&pixels, size, 25, 46);
        assert!(
            low[2] > 230 && low[0] < 190,
            "low arrow is pale blue: {low:?}"
        );
        // On the high arrow's shaft, 0.3 along it from the tail.
        let (x, y) = (
            0.20 + 0.3 * 30f32.to_radians().cos(),
            0.40 - 0.3 * 30f32.to_radians().sin(),
        );
        let high = pixel(&pixels, size, (x * 64.0) as u32, (y * 64.0) as u32);
        assert!(
            high[0] > 230 && high[2] < 120,
            "high arrow is amber: {high:?}"
        );
        // Plain tile near the bottom right: opaque and dark.
        let tile = pixel(&pixels, size, 52, 56);
        assert_eq!(tile[3], 255);
        assert!(tile[0] < 60, "tile is dark blue: {tile:?}");
    }
}
