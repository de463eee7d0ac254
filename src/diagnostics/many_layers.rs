//! Many layers in one pass: when a program asks for the temperature-route
//! thickness (or the thermal wind) of several layers, or of a layer spanning
//! several data levels, the evaluator hands the layers to
//! `Case::prepare_layers` before the calls run. It reads the levels they
//! need once, integrates every layer in one pass over them
//! (`physics::layers`, with the thermal wind fused in where asked), and
//! offers each result to the shared store under the key the one-layer call
//! uses, so that the calls that follow are served from it.
//!
//! The values are the bits of the one-layer path (`Case::thickness`,
//! `Case::thermal_wind`): the same weights, the same order of the f64 sums,
//! the same row kernels for the wind (`tests/sharing_on_demo.rs` compares a
//! run with sharing, which takes this path, against one without). A layer
//! whose quadratic integral meets a missing level is not offered: the
//! one-layer path, with its fallback to the trapezoid, computes it as before.

use super::*;
use crate::physics::layers;

/// What a program asks of one layer: its thickness, and whether also its
/// thermal wind (the thermal wind and the ageostrophic shear need it).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LayerRequest {
    pub layer: Layer,
    pub thermal_wind: bool,
}

impl Case {
    /// Computes the requested layers by `route` in one pass and offers them
    /// to the shared store (see the module comment). Returns how many layers
    /// were computed this way: none without a store that keeps values, for
    /// the geopotential route, or when every layer is already stored.
    /// Errors are the one-layer path's (a layer outside the data is left to
    /// that path to report, with its span).
    pub fn prepare_layers(&self, requests: &[LayerRequest], route: ThicknessRoute) -> Result<usize> {
        let Some(store) = self.shared.clone().filter(|s| s.keeps_values()) else { return Ok(0) };
        if route == ThicknessRoute::Geopotential {
            return Ok(0);
        }
        let t_name = self.role_name(Role::Temperature)?;
        let levels = self.levels_of(&t_name)?;
        // Model-level data read any pressure straight from the model levels
        // (`Case::levels_including`), so a layer bound off the presented
        // levels is left to the one-layer path, which reads it that way.
        let direct = self.dataset.reads_any_pressure(&t_name);
        let on_levels = |p: f64| levels.iter().any(|&l| (l - p).abs() <= 1e-6 * p);
        // One entry per layer, thermal wind wanted if any request wants it;
        // layers that fail (outside the data) are left to the one-layer path.
        let mut wanted: Vec<(LayerRequest, vertical::LevelWeights)> = Vec::new();
        for request in requests {
            if let Some(entry) = wanted.iter_mut().find(|(r, _)| r.layer == request.layer) {
                entry.0.thermal_wind |= request.thermal_wind;
                continue;
            }
            if direct && !(on_levels(request.layer.bottom) && on_levels(request.layer.top)) {
                continue;
            }
            if let Ok(weights) = vertical::layer_integral_weights_by(&levels, request.layer.bottom, request.layer.top, self.integration) {
                wanted.push((*request, weights));
            }
        }
        if wanted.is_empty() {
            return Ok(0);
        }
        let humidity_name = self.humidity_for(route, &levels);
        // The union of the levels the layers reach, read once.
        let mut needed: Vec<usize> = wanted.iter().flat_map(|(_, w)| w.terms.iter().map(|t| t.0)).collect();
        needed.sort_unstable();
        needed.dedup();
        let selection = self.selection_with_levels(Some(needed.iter().map(|&k| levels[k]).collect()));
        let t = self.read_data(&t_name, &selection)?;
        let q = match &humidity_name {
            Some(name) => Some(self.read_data(name, &selection)?),
            None => None,
        };
        let remap = |w: &vertical::LevelWeights| vertical::LevelWeights {
            terms: w.terms.iter().map(|&(k, weight)| (needed.iter().position(|&n| n == k).expect("needed"), weight)).collect(),
        };
        let transform: fn(f64, f64) -> f64 = if q.is_some() { vertical::virtual_temperature } else { |t, _| t };
        let companion = q.as_ref().map(|q| q.data.view());
        let factor = self.constants.dry_air_gas_constant / self.constants.gravity;
        let method = self.integral_method(humidity_name.is_some());
        let mut computed = 0;
        for with_wind in [true, false] {
            let group: Vec<&(LayerRequest, vertical::LevelWeights)> = wanted.iter().filter(|(r, _)| r.thermal_wind == with_wind).collect();
            if group.is_empty() {
                continue;
            }
            let weights: Vec<vertical::LevelWeights> = group.iter().map(|(_, w)| remap(w)).collect();
            let (thickness, winds) = if with_wind {
                let (dz, u, v) = layers::layers_and_thermal_wind_with(&t.grid, &self.constants, t.data.view(), companion, &weights, self.equator_band, transform);
                (dz, Some((u, v)))
            } else {
                (layers::weighted_layers_with(t.data.view(), companion, &weights, factor, transform), None)
            };
            store.note_many_layer_pass(group.len());
            computed += group.len();
            for (index, (request, _)) in group.iter().enumerate() {
                let data = thickness.index_axis(ndarray::Axis(1), index).to_owned();
                if self.integration == vertical::IntegrationRule::Quadratic && data.iter().any(|x| x.is_nan()) {
                    continue; // the one-layer path decides on its fallback
                }
                let dz = thickness_field(request.layer, &t, data, method.clone())?;
                if let Some((u, v)) = &winds {
                    let component = |a: &Array4<f32>| a.index_axis(ndarray::Axis(1), index).to_owned();
                    let wind = self.thermal_wind_field(request.layer, route, &dz, component(u), component(v))?;
                    store.offer(&self.dataset, self.shared_key(&thermal_wind_key(request.layer, route)), Shared::Vector(wind));
                }
                store.offer(&self.dataset, self.shared_key(&thickness_key(request.layer, route)), Shared::Field(dz));
            }
        }
        Ok(computed)
    }
}
