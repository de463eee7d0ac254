//! Model-level data read at pressures that are not presented levels, and
//! the program's constants in the hydrostatic integral, on a small store
//! held in memory (no file format involved):
//!
//! - a pressure outside the presented standard set (775 hPa, a layer bound
//!   of 980 hPa) is one ln-p interpolation from the model levels, checked
//!   with temperature quadratic in ln p against a hand computation;
//! - geopotential from the hydrostatic integral uses the case's Rd and g0:
//!   an isothermal atmosphere's heights above the ground scale with Rd and
//!   agree with the exact hypsometric solution (field guide, "Formulas").

use std::sync::Arc;

use baroc::constants::Constants;
use baroc::diagnostics::{Case, Layer, ThicknessRoute};
use baroc::grid::{Field, Grid, TimeAxis};
use baroc::io::model_level_source::{ModelLevelStore, ModelLevelVariable, OnPressureLevels};
use baroc::io::{DataError, DataSource, Dataset, Selection, VariableInfo};
use baroc::physics::model_levels::{BelowLowestLevel, HybridCoefficients};
use baroc::physics::sampling::Region;
use baroc::physics::vertical::IntegrationRule;
use ndarray::Array4;

/// Model-level pressures (Pa), top first, chosen so that none is a
/// standard isobaric level: pure pressure levels (b = 0) above a lowest
/// level on the ground (ap 0, b 1).
const MODEL_PRESSURES: [f64; 12] = [8_000.0, 12_500.0, 21_000.0, 30_000.0, 45_500.0, 61_000.0, 72_000.0, 79_000.0, 86_500.0, 93_000.0, 98_800.0, 0.0];
const SURFACE_PRESSURE: f64 = 101_000.0;
const T0: f64 = 250.0;

fn x_of(p: f64) -> f64 {
    (100_000.0 / p).ln()
}

/// Temperature quadratic in ln p (an analytic profile: ln-p interpolation
/// is exact only for a profile linear in ln p, so one interpolation and
/// two differ by a computable amount).
fn temperature_quadratic(p: f64) -> f64 {
    T0 + 20.0 * x_of(p) + 40.0 * x_of(p).powi(2)
}

fn level_pressure(k: usize) -> f64 {
    if k == MODEL_PRESSURES.len() - 1 {
        SURFACE_PRESSURE
    } else {
        MODEL_PRESSURES[k]
    }
}

/// Linear interpolation in ln p between the model levels bracketing p
/// (the hand computation the reader must reproduce).
fn by_hand(p: f64, profile: fn(f64) -> f64) -> f64 {
    let n = MODEL_PRESSURES.len();
    let k = (0..n - 1).find(|&k| level_pressure(k) <= p && p <= level_pressure(k + 1)).expect("bracketed");
    let (p1, p2) = (level_pressure(k), level_pressure(k + 1));
    let w = (p1.ln() - p.ln()) / (p1.ln() - p2.ln());
    profile(p1) + w * (profile(p2) - profile(p1))
}

struct Store {
    variables: Vec<VariableInfo>,
    model: Vec<ModelLevelVariable>,
    profile: fn(f64) -> f64,
}

fn grid() -> Arc<Grid> {
    Arc::new(Grid::new(vec![44.0, 45.0], vec![5.0, 6.0, 7.0]))
}

fn info(name: &str, units: &str, standard_name: &str) -> VariableInfo {
    VariableInfo {
        name: name.into(),
        long_name: None,
        units: units.into(),
        standard_name: Some(standard_name.into()),
        levels: None,
        times: Some(TimeAxis { values: vec![0.0], units: "hours since 2031-03-02 00:00:00".into(), calendar: "standard".into() }),
        grid: grid(),
        attributes: Vec::new(),
        packed: false,
    }
}

fn store(profile: fn(f64) -> f64) -> Store {
    let n = MODEL_PRESSURES.len();
    let coefficients = HybridCoefficients::from_ap(MODEL_PRESSURES.to_vec(), (0..n).map(|k| if k == n - 1 { 1.0 } else { 0.0 }).collect()).unwrap();
    let t = info("t_model", "K", "air_temperature");
    Store {
        variables: vec![info("ps", "Pa", "surface_air_pressure"), info("zs", "m2 s-2", "surface_geopotential"), t.clone()],
        model: vec![ModelLevelVariable { info: t, coefficients, surface_pressure: "ps".into(), description: "model levels 1 to 12".into() }],
        profile,
    }
}

impl DataSource for Store {
    fn label(&self) -> String {
        "store in memory".into()
    }
    fn variables(&self) -> &[VariableInfo] {
        &self.variables
    }
    fn read(&self, variable: &str, _selection: &Selection) -> Result<Field, DataError> {
        let value = match variable {
            "ps" => SURFACE_PRESSURE,
            "zs" => 0.0,
            other => return Err(DataError::Invalid(format!("{other} is not a surface variable"))),
        };
        let v = &self.variables.iter().find(|v| v.name == variable).unwrap();
        Field::new(variable, v.units.clone(), Array4::from_elem((1, 1, 2, 3), value as f32), v.times.clone(), None, grid()).map_err(DataError::Invalid)
    }
    fn global_attributes(&self) -> Vec<(String, String)> {
        Vec::new()
    }
}

impl ModelLevelStore for Store {
    fn model_level_variables(&self) -> &[ModelLevelVariable] {
        &self.model
    }
    fn read_model_levels(&self, name: &str, times: &[usize], levels: &[usize], _region: Option<&Region>) -> Result<Field, DataError> {
        assert_eq!(name, "t_model");
        let data = Array4::from_shape_fn((times.len(), levels.len(), 2, 3), |(_, k, _, _)| (self.profile)(level_pressure(levels[k])) as f32);
        Field::new(name, "K", data, self.model[0].info.times.clone(), Some(levels.iter().map(|&k| k as f64 + 1.0).collect()), grid()).map_err(DataError::Invalid)
    }
}

fn case(profile: fn(f64) -> f64) -> Case {
    let source = OnPressureLevels::new(Box::new(store(profile)), BelowLowestLevel::Missing).unwrap();
    Case::new(Arc::new(Dataset::from_sources(vec![Box::new(source)]).unwrap()))
}

#[test]
fn a_pressure_between_presented_levels_is_one_interpolation_from_the_model_levels() {
    let case = case(temperature_quadratic);
    let levels = case.levels_of("temperature").unwrap();
    assert!(levels.contains(&80_000.0) && levels.contains(&75_000.0) && !levels.contains(&77_500.0));
    let t = case.at_pressure("temperature", 77_500.0, false).unwrap();
    let hand = by_hand(77_500.0, temperature_quadratic);
    // Twice interpolated (model -> 800 and 750 hPa -> 775 hPa), for the
    // size of what the test tells apart.
    let (t800, t750) = (by_hand(80_000.0, temperature_quadratic), by_hand(75_000.0, temperature_quadratic));
    let w = (x_of(77_500.0) - x_of(80_000.0)) / (x_of(75_000.0) - x_of(80_000.0));
    let twice = t800 + w * (t750 - t800);
    assert!((twice - hand).abs() > 0.02, "the profile must tell the two apart: {twice} vs {hand}");
    for &v in t.data.iter() {
        assert!((v as f64 - hand).abs() < 2e-3, "{v} K, by hand {hand} K (twice interpolated: {twice} K)");
    }
    // The value at one pressure keeps the note of how model-level data
    // reached pressure (and what happens below ground).
    assert!(t.attributes.iter().any(|(k, v)| k == "vertical_interpolation" && v.contains("missing")), "{:?}", t.attributes);
    // A presented level is read as it was.
    let t800_read = case.at_pressure("temperature", 80_000.0, false).unwrap();
    assert!((t800_read.data[[0, 0, 0, 0]] as f64 - t800).abs() < 2e-3);
}

#[test]
fn a_layer_bound_between_presented_levels_comes_straight_from_the_model_levels() {
    let mut case = case(temperature_quadratic);
    case.integration = IntegrationRule::Trapezoid;
    let (bottom, top) = (98_000.0, 14_000.0);
    let (layer, _) = Layer::new(bottom, top);
    let dz = case.thickness(layer, ThicknessRoute::Temperature).unwrap();
    // Hand computation: the trapezoid rule in ln p (field guide,
    // hypsometric equation dz = (Rd/g0) T d ln p) over 980 hPa, the
    // presented levels from 975 to 150 hPa, and 140 hPa, each value one
    // ln-p interpolation from the model levels.
    let c = Constants::default();
    let presented = case.levels_of("temperature").unwrap();
    let mut pressures = vec![bottom];
    pressures.extend(presented.iter().copied().filter(|&p| p < bottom && p > top));
    pressures.push(top);
    let trapezoid = |values: &dyn Fn(f64) -> f64| -> f64 {
        pressures.windows(2).map(|pair| 0.5 * (values(pair[0]) + values(pair[1])) * (pair[0] / pair[1]).ln()).sum::<f64>() * c.dry_air_gas_constant / c.gravity
    };
    let hand = trapezoid(&|p| by_hand(p, temperature_quadratic));
    // Had the bounds been interpolated between the presented levels around
    // them (1000 and 975 hPa, 150 and 100 hPa), with a model level between
    // those, the thickness would differ by this much.
    let around = |p: f64| {
        let lower = presented.iter().copied().filter(|&l| l >= p).fold(f64::INFINITY, f64::min);
        let upper = presented.iter().copied().filter(|&l| l <= p).fold(f64::NEG_INFINITY, f64::max);
        if lower == upper {
            return by_hand(p, temperature_quadratic);
        }
        let w = (x_of(p) - x_of(lower)) / (x_of(upper) - x_of(lower));
        by_hand(lower, temperature_quadratic) + w * (by_hand(upper, temperature_quadratic) - by_hand(lower, temperature_quadratic))
    };
    let twice = trapezoid(&around);
    assert!((twice - hand).abs() > 0.5, "the profile must tell the two apart: {twice} m vs {hand} m");
    for &v in dz.data.iter() {
        assert!((v as f64 - hand).abs() < 0.02, "{v} m, by hand {hand} m (bounds interpolated twice: {twice} m)");
    }
}

fn isothermal(_p: f64) -> f64 {
    T0
}

#[test]
fn the_hydrostatic_integral_uses_the_case_constants() {
    // Isothermal atmosphere: Phi(p) = Phi_s + Rd T0 ln(ps/p) exactly
    // (hypsometric equation, field guide), so geopotential above the
    // ground scales with Rd and heights (Phi/g0) with Rd/g0.
    let p = 61_000.0; // a model level: no interpolation error at all
    let plain = case(isothermal);
    let mut changed = case(isothermal);
    changed.constants.dry_air_gas_constant *= 1.1;
    changed.constants.gravity = 9.7;
    let phi = plain.geopotential_at(p, false).unwrap();
    let phi_changed = changed.geopotential_at(p, false).unwrap();
    let c = Constants::default();
    let exact = c.dry_air_gas_constant * T0 * (SURFACE_PRESSURE / p).ln();
    for (&a, &b) in phi.data.iter().zip(phi_changed.data.iter()) {
        assert!((a as f64 - exact).abs() < 1e-4 * exact, "{a} vs hypsometric {exact}");
        assert!((b as f64 / a as f64 - 1.1).abs() < 1e-5, "ratio {}", b / a);
    }
    // Thickness by the geopotential route divides by the case's g0:
    // heights scale by (1.1 Rd / 9.7) / (Rd / g0).
    let (layer, _) = Layer::new(86_500.0, 45_500.0);
    let dz = plain.thickness(layer, ThicknessRoute::Geopotential).unwrap();
    let dz_changed = changed.thickness(layer, ThicknessRoute::Geopotential).unwrap();
    let expected = 1.1 * c.gravity / 9.7;
    for (&a, &b) in dz.data.iter().zip(dz_changed.data.iter()) {
        assert!((b as f64 / a as f64 - expected).abs() < 1e-5, "ratio {} expected {expected}", b / a);
    }
}

/// The one-pass many-layer path (`Case::prepare_layers`) must give what
/// the one-layer path gives: on model-level data it takes only layers whose
/// bounds are presented levels and leaves a bound such as 980 hPa to the
/// one-layer path, which reads it straight from the model levels (the
/// one-pass path would interpolate it between presented levels).
#[test]
fn the_many_layer_pass_leaves_off_level_bounds_of_model_level_data_to_the_one_layer_path() {
    use baroc::diagnostics::LayerRequest;
    use baroc::sharing::SharedResults;
    let plain = case(temperature_quadratic);
    let mut shared = case(temperature_quadratic);
    shared.shared = Some(Arc::new(SharedResults::with_budget(1 << 30)));
    let presented = plain.levels_of("temperature").unwrap();
    let (off, _) = Layer::new(98_000.0, 14_000.0);
    let (on, _) = Layer::new(presented[1], presented[presented.len() - 2]);
    let requests = [LayerRequest { layer: off, thermal_wind: false }, LayerRequest { layer: on, thermal_wind: false }];
    assert_eq!(shared.prepare_layers(&requests, ThicknessRoute::Temperature).unwrap(), 1, "only the layer on presented levels goes the one-pass way");
    for layer in [off, on] {
        let a = plain.thickness(layer, ThicknessRoute::Temperature).unwrap();
        let b = shared.thickness(layer, ThicknessRoute::Temperature).unwrap();
        assert!(a.data.iter().zip(b.data.iter()).all(|(x, y)| x.to_bits() == y.to_bits()), "{layer:?}: {} vs {}", a.data[[0, 0, 0, 0]], b.data[[0, 0, 0, 0]]);
    }
}
