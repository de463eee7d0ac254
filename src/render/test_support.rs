//! Invented fields for the renderers' tests and example pictures: a
//! baroclinic zone over a fictional ocean basin. Thickness falls poleward
//! across a front that meanders in a wave; the thermal wind follows from
//! the thickness gradient by the thermal-wind relation
//! V_T = (g0 / f) k x grad(dZ) (field guide), so the pictures are
//! physically consistent.

use ndarray::Array2;

pub(crate) const G0: f64 = 9.80665; // standard gravity, CGPM 1901
const OMEGA: f64 = 7.292115e-5; // Earth's rotation, WGS 84
const RADIUS: f64 = 6_371_000.0; // IUGG mean radius

pub(crate) struct Synthetic {
    pub lats: Vec<f64>,
    pub lons: Vec<f64>,
    /// 1000-500 hPa thickness (m), [lat, lon].
    pub thickness: Array2<f32>,
    /// Thermal wind components (m/s) from the thickness gradient.
    pub u: Array2<f32>,
    pub v: Array2<f32>,
    /// A signed field (an invented temperature-advection-like pattern, K/day).
    pub signed: Array2<f32>,
}

/// Thickness in metres: about 5700 m on the warm (equatorward) side, 5100 m
/// on the cold (poleward) side, the front along a wave of wavenumber 5 in
/// each hemisphere (mirrored, so both poles are cold).
pub(crate) fn thickness_at(lat: f64, lon: f64) -> f64 {
    let front = 48.0 + 7.0 * (5.0 * lon.to_radians()).sin();
    let distance = lat.abs();
    5400.0 - 300.0 * ((distance - front) / 12.0).tanh() - 2.0 * (distance - 45.0)
}

/// Build the synthetic set on the given grid (latitudes in any order).
pub(crate) fn synthetic(lats: Vec<f64>, lons: Vec<f64>) -> Synthetic {
    let (ny, nx) = (lats.len(), lons.len());
    let thickness = Array2::from_shape_fn((ny, nx), |(i, j)| thickness_at(lats[i], lons[j]) as f32);
    // Centred differences of the analytic thickness, 0.1 degree apart.
    let h = 0.1f64;
    let mut u = Array2::<f32>::zeros((ny, nx));
    let mut v = Array2::<f32>::zeros((ny, nx));
    let mut signed = Array2::<f32>::zeros((ny, nx));
    for i in 0..ny {
        let lat = lats[i];
        let f = 2.0 * OMEGA * lat.to_radians().sin();
        for j in 0..nx {
            let lon = lons[j];
            let dzdy = (thickness_at(lat + h, lon) - thickness_at(lat - h, lon))
                / (2.0 * h.to_radians() * RADIUS);
            let coslat = lat.to_radians().cos().max(1e-6);
            let dzdx = (thickness_at(lat, lon + h) - thickness_at(lat, lon - h))
                / (2.0 * h.to_radians() * RADIUS * coslat);
            if lat.abs() < 5.0 {
                // Geostrophic balance is undefined near the equator: missing.
                u[[i, j]] = f32::NAN;
                v[[i, j]] = f32::NAN;
            } else {
                u[[i, j]] = (-G0 / f * dzdy) as f32;
                v[[i, j]] = (G0 / f * dzdx) as f32;
            }
            let front = 48.0 + 7.0 * (5.0 * lon.to_radians()).sin();
            signed[[i, j]] = (4.0
                * (5.0 * lon.to_radians()).cos()
                * (-((lat.abs() - front) / 9.0).powi(2)).exp()) as f32;
        }
    }
    Synthetic {
        lats,
        lons,
        thickness,
        u,
        v,
        signed,
    }
}

/// A regional grid over the fictional basin, latitudes north to south.
pub(crate) fn regional() -> Synthetic {
    let lats: Vec<f64> = (0..=60).map(|i| 80.0 - i as f64).collect();
    let lons: Vec<f64> = (0..=100).map(|j| -70.0 + j as f64).collect();
    synthetic(lats, lons)
}

/// A global quarter-degree grid, 721 x 1440, latitudes north to south and
/// longitudes 0..359.75 (the benchmark size).
pub(crate) fn global_quarter_degree() -> Synthetic {
    let lats: Vec<f64> = (0..721).map(|i| 90.0 - 0.25 * i as f64).collect();
    let lons: Vec<f64> = (0..1440).map(|j| 0.25 * j as f64).collect();
    synthetic(lats, lons)
}

/// Where example pictures go for a person to look at.
pub(crate) fn check_dir() -> std::path::PathBuf {
    let dir = std::env::temp_dir().join("render-check");
    let _ = std::fs::create_dir_all(&dir);
    dir
}

/// Decode a PNG into (width, height, RGB or RGBA bytes, channels).
pub(crate) fn decode_png(bytes: &[u8]) -> (u32, u32, Vec<u8>, usize) {
    let decoder = png::Decoder::new(std::io::Cursor::new(bytes));
    let mut reader = decoder.read_info().expect("PNG header");
    let mut buf = vec![0; reader.output_buffer_size().expect("PNG size")];
    let info = reader.next_frame(&mut buf).expect("PNG frame");
    buf.truncate(info.buffer_size());
    let channels = info.color_type.samples();
    (info.width, info.height, buf, channels)
}
