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
//! whose quadratic integral meets a missing level (humidity not reported
//! aloft, a gap) takes the one-layer path's fallback, the trapezoid over its
//! own levels at those time steps (`fall_back_where_missing`, shared with
//! `Case::thickness`), and its thermal wind is then the one-layer stencil on
//! the thickness so patched.
//!
//! By the geopotential route a thickness is a difference of the
//! geopotential at the boundaries: layers whose boundaries are data levels
//! take them from one read of those levels, and the boundaries' geopotential
//! is offered too (see `prepare_geopotential_layers`).
//!
//! Every pass is counted (`SharedResults::note_many_layer_pass`), as is
//! every layer `Case::thickness` computes one at a time
//! (`SharedResults::note_one_layer`); `BAROC_TIMINGS=1` prints both
//! (`io::timings::layer_paths`).

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
    /// were computed this way: none without a store that keeps values.
    /// Errors are the one-layer path's (a layer outside the data is left to
    /// that path to report, with its span).
    pub fn prepare_layers(&self, requests: &[LayerRequest], route: ThicknessRoute) -> Result<usize> {
        let Some(store) = self.shared.clone().filter(|s| s.keeps_values()) else { return Ok(0) };
        if route == ThicknessRoute::Geopotential {
            return self.prepare_geopotential_layers(&store, requests);
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
        // The trapezoid over a layer's own levels, on the levels read (they
        // are among those the quadratic reaches; `None` should one not be).
        let trapezoid_on_read = |layer: Layer| -> Option<vertical::LevelWeights> {
            let weights = vertical::layer_integral_weights(&levels, layer.bottom, layer.top).ok()?;
            let terms = weights.terms.iter().map(|&(k, weight)| needed.iter().position(|&n| n == k).map(|i| (i, weight))).collect::<Option<Vec<_>>>()?;
            Some(vertical::LevelWeights { terms })
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
            let mut thickness_layers = per_layer(thickness).into_iter();
            let mut wind_layers = winds.map(|(u, v)| (per_layer(u).into_iter(), per_layer(v).into_iter()));
            for (request, _) in group.iter() {
                let mut data = thickness_layers.next().expect("one thickness per layer");
                let wind_layer = wind_layers.as_mut().map(|(u, v)| (u.next().expect("one wind per layer"), v.next().expect("one wind per layer")));
                if self.integration == vertical::IntegrationRule::Quadratic && data.iter().any(|x| x.is_nan()) {
                    // As `Case::thickness`: the trapezoid over the layer's
                    // own levels (among those read) where a level the
                    // quadratic reaches is missing, then the thermal wind
                    // of the thickness so patched, by the one-layer stencil.
                    let Some(trapezoid) = trapezoid_on_read(request.layer) else { continue };
                    let fallback = layers::weighted_layers_with(t.data.view(), companion, std::slice::from_ref(&trapezoid), factor, transform).index_axis_move(ndarray::Axis(1), 0);
                    let mut patched_method = method.clone();
                    fall_back_where_missing(&mut data, &fallback, &mut patched_method);
                    let dz = thickness_field(request.layer, &t, data, patched_method)?;
                    if with_wind {
                        let (u, v) = thermal_wind::thermal_wind_from_thickness(&dz.grid, &self.constants, dz.horizontal_slices(), self.equator_band);
                        let wind = self.thermal_wind_field(request.layer, route, &dz, u, v)?;
                        store.offer(&self.dataset, self.shared_key(&thermal_wind_key(request.layer, route)), Shared::Vector(Arc::new(wind)));
                    }
                    store.offer(&self.dataset, self.shared_key(&thickness_key(request.layer, route)), Shared::Field(Arc::new(dz)));
                    continue;
                }
                let dz = thickness_field(request.layer, &t, data, method.clone())?;
                if let Some((u, v)) = wind_layer {
                    let wind = self.thermal_wind_field(request.layer, route, &dz, u, v)?;
                    store.offer(&self.dataset, self.shared_key(&thermal_wind_key(request.layer, route)), Shared::Vector(Arc::new(wind)));
                }
                store.offer(&self.dataset, self.shared_key(&thickness_key(request.layer, route)), Shared::Field(Arc::new(dz)));
            }
        }
        Ok(computed)
    }

    /// The geopotential route (`thickness(...) with route geopotential`, the
    /// thermal wind from it, and the layer-mean temperature a layer's
    /// temperature advection starts from): the layers whose two boundaries
    /// are data levels of the geopotential, on pressure-level data, take
    /// their boundaries from one read of those levels. Each boundary's
    /// geopotential is the value `Case::geopotential_at` gives there (a data
    /// level: the level itself, through the same `apply_weights`) and is
    /// offered under its key too (the geostrophic winds at the boundaries
    /// start from it); each thickness is `geopotential_difference` of them,
    /// as in `Case::thickness`, and each thermal wind the one-layer stencil
    /// on it. A boundary off the data levels (interpolated, hydrostatically
    /// or not) and model-level data are left to the one-layer path.
    fn prepare_geopotential_layers(&self, store: &SharedResults, requests: &[LayerRequest]) -> Result<usize> {
        let route = ThicknessRoute::Geopotential;
        let Ok((name, kind)) = self.geopotential_source() else { return Ok(0) };
        if self.dataset.reads_any_pressure(&name) {
            return Ok(0);
        }
        let z_levels = self.levels_of(&name)?;
        let t_levels = self.dataset.find_role(Role::Temperature).and_then(|t| t.levels.clone());
        // The plan `geopotential_at` makes for a boundary, when it is a data
        // level: the index of that level.
        let data_level = |p: f64| match vertical::geopotential_plan(&z_levels, t_levels.as_deref(), p, self.integration) {
            Ok(plan) if plan.method == vertical::GeopotentialInterpolation::DataLevel && plan.temperature.is_none() => match plan.geopotential.terms.as_slice() {
                [(k, w)] if *w == 1.0 => Some(*k),
                _ => None,
            },
            _ => None,
        };
        let mut wanted: Vec<LayerRequest> = Vec::new();
        let mut boundaries: Vec<(f64, usize)> = Vec::new();
        for request in requests {
            if let Some(entry) = wanted.iter_mut().find(|r| r.layer == request.layer) {
                entry.thermal_wind |= request.thermal_wind;
                continue;
            }
            let (Some(bottom), Some(top)) = (data_level(request.layer.bottom), data_level(request.layer.top)) else { continue };
            for (p, k) in [(request.layer.bottom, bottom), (request.layer.top, top)] {
                if !boundaries.iter().any(|b| b.0 == p) {
                    boundaries.push((p, k));
                }
            }
            wanted.push(*request);
        }
        if wanted.is_empty() {
            return Ok(0);
        }
        let mut needed: Vec<usize> = boundaries.iter().map(|b| b.1).collect();
        needed.sort_unstable();
        needed.dedup();
        let z = self.read_data(&name, &self.selection_with_levels(Some(needed.iter().map(|&k| z_levels[k]).collect())))?;
        let how = vertical::GeopotentialInterpolation::DataLevel.describe();
        let mut at_boundaries: Vec<(f64, Arc<Field>)> = Vec::with_capacity(boundaries.len());
        for &(p, k) in &boundaries {
            let index = needed.iter().position(|&n| n == k).expect("needed");
            let data = vertical::apply_weights(z.data.view(), &vertical::LevelWeights { terms: vec![(index, 1.0)] }, 1.0);
            let field = Arc::new(geopotential_field(&z, data, p, how.clone())?);
            store.offer(&self.dataset, self.shared_key(&format!("geopotential_at {p:?} false")), Shared::Field(field.clone()));
            at_boundaries.push((p, field));
        }
        let at = |p: f64| &at_boundaries.iter().find(|b| b.0 == p).expect("a boundary").1;
        store.note_many_layer_pass(wanted.len());
        for request in &wanted {
            let (data, method) = geopotential_difference(at(request.layer.top), at(request.layer.bottom), kind, &self.constants);
            let dz = thickness_field(request.layer, at(request.layer.top), data, method)?;
            if request.thermal_wind {
                let (u, v) = thermal_wind::thermal_wind_from_thickness(&dz.grid, &self.constants, dz.horizontal_slices(), self.equator_band);
                let wind = self.thermal_wind_field(request.layer, route, &dz, u, v)?;
                store.offer(&self.dataset, self.shared_key(&thermal_wind_key(request.layer, route)), Shared::Vector(Arc::new(wind)));
            }
            store.offer(&self.dataset, self.shared_key(&thickness_key(request.layer, route)), Shared::Field(Arc::new(dz)));
        }
        Ok(wanted.len())
    }
}

/// The layers of a kernel's output [time, layer, lat, lon], each as its own
/// [time, lat, lon] array in standard layout: a single layer is moved out,
/// not copied (its memory becomes the result's); several are copied one by
/// one (a layer of a many-layer array is not contiguous on its own). Never
/// fails.
fn per_layer(output: Array4<f32>) -> Vec<Array3<f32>> {
    let layers = output.dim().1;
    if layers == 1 && output.is_standard_layout() {
        return vec![output.index_axis_move(ndarray::Axis(1), 0)];
    }
    (0..layers).map(|k| output.index_axis(ndarray::Axis(1), k).to_owned()).collect()
}
