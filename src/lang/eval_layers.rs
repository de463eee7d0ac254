//! The language reaching the many-layer kernel: before the first statement
//! of a program (or of the part of it after an `open`) that asks for the
//! thickness, layer-mean temperature, thermal wind or ageostrophic shear of
//! a layer (by either route) or for a layer's temperature advection (which
//! starts from its geopotential thickness), every such request in that part
//! whose layer, options and selection are known is handed to
//! `Case::prepare_layers`, which computes them in one pass over the levels
//! per selection and offers them to the run's shared store under the
//! one-layer keys; the calls themselves then run as usual and are served
//! from it, with the same bits (`tests/sharing_on_demo.rs`,
//! `tests/many_layers_on_demo.rs`, which also count the passes and the
//! layers computed one at a time, as `BAROC_TIMINGS=1` prints them).
//!
//! What is computed ahead, and why it is the same work as the call's:
//! - The call's selection is built as `select` builds it, step by step
//!   from the statement down: `in` a region intersects the region (a
//!   region written out, `in box(...)`, a name bound to one, nested `in`s);
//!   `at` a pressure or a point and `over` a layer leave the selection as it
//!   is (the value is picked from in memory); `at` a time or a time step
//!   and `during` a range of times give the times `Evaluator::time_context`
//!   gives, the function `at_times` itself uses. The store's keys hold the
//!   whole selection, so a selection built differently could only miss,
//!   never serve a wrong value.
//! - A layer, a selector or an `equator_band` value is computed ahead only
//!   when that is cheap and nothing can be seen of it (`computable_ahead`):
//!   literals, names already bound to small values (numbers, layers,
//!   regions, points, times), arithmetic, ranges, members and conversions of
//!   those, and `point`, `box` and `time` of them. Anything else (a name
//!   bound to data or a field, a user function, a `print`) would read,
//!   compute or show something before its time: such a call is left to the
//!   one-layer path. A name bound only by a later statement of the part is
//!   not known yet when the part is prepared, and is left to it too.
//! - Options are read as `call_builtin` reads them (`route`, `integration`,
//!   and `equator_band` where the operator takes it, through
//!   `builtins_eval::equator_band_degrees`); an option the call
//!   would refuse, or one given twice, leaves the call to its own path.
//!   Calls are grouped by rule, route, band and selection: one pass each.
//! - Nothing here reports anything: an expression that fails ahead, a
//!   selection that would fail, a layer outside the data are left to the
//!   call, which reports them as before, with their spans.
//!
//! Not entered: the branches of an `if` (which run depends on a value not
//! known ahead, and with a field for condition both run, so computing one
//! ahead could be work the program never asks for), blocks and user
//! function bodies (their names are bound only while they run, so neither
//! layers nor selections can be known ahead), `parameter` defaults (an
//! override from outside may replace them), and selectors themselves (a
//! layer call there is an error the selector reports).

use super::*;
use crate::diagnostics::LayerRequest;
use crate::physics::vertical::IntegrationRule;

/// An operator whose value starts from a layer's thickness.
struct LayerOperator {
    name: &'static str,
    /// Whether it needs the layer's thermal wind too.
    thermal_wind: bool,
    /// The route it always takes; `None`: the `route` option's.
    route: Option<ThicknessRoute>,
    /// The options it accepts (as `call_builtin` allows them).
    options: &'static [&'static str],
}

const LAYER_OPERATORS: [LayerOperator; 5] = [
    LayerOperator { name: "thickness", thermal_wind: false, route: None, options: &["route", "integration"] },
    LayerOperator { name: "layer_mean_temperature", thermal_wind: false, route: None, options: &["route", "integration"] },
    LayerOperator { name: "thermal_wind", thermal_wind: true, route: None, options: &["route", "equator_band", "integration"] },
    LayerOperator { name: "ageostrophic_shear", thermal_wind: true, route: None, options: &["route", "equator_band", "integration"] },
    // Of a layer, the mean temperature from the geopotential thickness
    // (`Case::layer_temperature_advection`), by the default rule.
    LayerOperator { name: "temperature_advection", thermal_wind: false, route: Some(ThicknessRoute::Geopotential), options: &["equator_band"] },
];

/// Built-ins that only make a small value from their arguments (a point, a
/// region, a time): a selector or layer written with them is computed ahead.
const CONSTRUCTORS: [&str; 3] = ["point", "box", "time"];

/// The selections between a statement and one of its calls, outermost
/// first: each `in`, `at`, `during` or `over` with its selector.
type Steps<'a> = Vec<(SelectHow, &'a Expr)>;

/// The calls of `expr` that start from a layer's thickness, each with the
/// selections it runs under. `if` and blocks are not entered (see the
/// module comment), nor selectors (they are evaluated in the outer
/// selection, and a layer call there is an error).
fn layer_calls<'a>(expr: &'a Expr, steps: &mut Steps<'a>, out: &mut Vec<(&'a Expr, Steps<'a>)>) {
    match &expr.kind {
        ExprKind::Call { callee, arguments, options } => {
            if matches!(&callee.kind, ExprKind::Name(n) if LAYER_OPERATORS.iter().any(|o| o.name == n)) {
                out.push((expr, steps.clone()));
            }
            for e in arguments.iter().chain(options.iter().map(|o| &o.value)) {
                layer_calls(e, steps, out);
            }
        }
        ExprKind::Member { base, .. } => layer_calls(base, steps, out),
        ExprKind::Unary { operand, .. } => layer_calls(operand, steps, out),
        ExprKind::Binary { left, right, .. } => {
            layer_calls(left, steps, out);
            layer_calls(right, steps, out);
        }
        ExprKind::Convert { value, .. } => layer_calls(value, steps, out),
        ExprKind::Select { base, how, selector } => {
            steps.push((*how, selector));
            layer_calls(base, steps, out);
            steps.pop();
        }
        _ => {}
    }
}

/// The layer calls of a statement's value (`let`, `output`, an expression
/// statement), with the selections each runs under.
fn statement_layer_calls(statement: &Statement) -> Vec<(&Expr, Steps<'_>)> {
    let mut out = Vec::new();
    if let StatementKind::Let { value, .. } | StatementKind::Output { value, .. } | StatementKind::Expression(value) = &statement.kind {
        layer_calls(value, &mut Vec::new(), &mut out);
    }
    out
}

/// One pass: the calls' integration rule, route, equatorial band and
/// selection, and the layers asked for in it.
type Group = ((IntegrationRule, ThicknessRoute, f64, Selection), Vec<LayerRequest>);

impl Evaluator {
    /// Before statement `index` runs: when it is the first statement since
    /// the start or the last `open` with a layer call, prepares every layer
    /// call up to the next `open` in one pass (see the module comment).
    /// Never fails: whatever cannot be prepared is left to the calls.
    pub(super) fn prepare_layers(&mut self, statements: &[Statement], index: usize, context: &Context) {
        if !self.shared.keeps_values() || statement_layer_calls(&statements[index]).is_empty() {
            return;
        }
        let is_open = |s: &Statement| matches!(s.kind, StatementKind::Open { .. });
        let earlier = statements[..index].iter().rev().take_while(|s| !is_open(s));
        if earlier.into_iter().any(|s| !statement_layer_calls(s).is_empty()) {
            return; // prepared before that statement
        }
        let part = statements[index..].iter().take_while(|s| !is_open(s));
        let calls: Vec<(&Expr, Steps)> = part.flat_map(statement_layer_calls).collect();
        let mut groups: Vec<Group> = Vec::new();
        for (call, steps) in &calls {
            let Some(inner) = self.context_ahead(steps, context) else { continue };
            if let Some((rule, route, band, request)) = self.layer_request(call, &inner) {
                let key = (rule, route, band, inner.selection);
                match groups.iter_mut().find(|(k, _)| *k == key) {
                    Some((_, requests)) => requests.push(request),
                    None => groups.push((key, vec![request])),
                }
            }
        }
        for ((rule, route, band, selection), requests) in groups {
            // The case the calls make (`call_builtin`'s `case_of`).
            let Ok(mut case) = self.case(&Context { selection }, statements[index].span, Some(band)) else { return };
            case.integration = rule;
            // An error here is the one-layer path's to report, with its span.
            let _ = case.prepare_layers(&requests, route);
        }
    }

    /// Whether `expr` can be evaluated before its statement runs, cheaply
    /// and with nothing seen: literals, names bound to small values (no
    /// data, fields, functions or datasets), arithmetic, ranges, members and
    /// unit conversions of those, and `point`, `box` and `time` of them
    /// (built-in names no function can take).
    fn computable_ahead(&self, expr: &Expr) -> bool {
        match &expr.kind {
            ExprKind::Number { .. } | ExprKind::Angle { .. } | ExprKind::String(_) | ExprKind::Bool(_) => true,
            ExprKind::Name(n) => matches!(
                self.lookup(n),
                Some(Value::Number { .. } | Value::Bool(_) | Value::Text(_) | Value::Angle { .. } | Value::Range(..) | Value::Layer(_) | Value::Point { .. } | Value::Region(_) | Value::Time(_) | Value::TimeIndex(_))
            ),
            ExprKind::Unary { operand, .. } => self.computable_ahead(operand),
            ExprKind::Binary { left, right, .. } => self.computable_ahead(left) && self.computable_ahead(right),
            ExprKind::Range { from, to } => self.computable_ahead(from) && self.computable_ahead(to),
            ExprKind::Convert { value, .. } => self.computable_ahead(value),
            ExprKind::Member { base, .. } => self.computable_ahead(base),
            ExprKind::Call { callee, arguments, options } => {
                matches!(&callee.kind, ExprKind::Name(n) if CONSTRUCTORS.contains(&n.as_str()))
                    && options.is_empty()
                    && arguments.iter().all(|a| self.computable_ahead(a))
            }
            _ => false,
        }
    }

    /// The context a call under `steps` runs in, built as `select` builds
    /// it; `None` when a selector cannot be computed ahead or the selection
    /// would fail (the statement then reports it).
    fn context_ahead(&mut self, steps: &[(SelectHow, &Expr)], context: &Context) -> Option<Context> {
        let mut context = context.clone();
        for (how, selector) in steps {
            if !self.computable_ahead(selector) {
                return None;
            }
            let value = self.expr(selector, &context).ok()?;
            let time = |v: &Value| match v {
                Value::Text(s) => DateTime::parse(s).ok(),
                Value::Time(t) => Some(t.clone()),
                _ => None,
            };
            let span = selector.span;
            context = match (how, value) {
                (SelectHow::In, Value::Region(region)) => {
                    let mut inner = context.clone();
                    inner.selection.region = Some(match context.selection.region {
                        Some(outer) => intersect(&outer, &region)?,
                        None => region,
                    });
                    inner
                }
                // A level, a point or a layer: the value is computed in the
                // same selection and picked from in memory.
                (SelectHow::At, Value::Number { unit, .. }) if unit.dimension() == Dimension::PRESSURE => context,
                (SelectHow::At, Value::Point { .. }) | (SelectHow::Over, Value::Layer(_)) => context,
                (SelectHow::At, Value::Text(text)) => self.time_context(&context, &TimeWanted::Exact(DateTime::parse(&text).ok()?), span).ok()?.0,
                (SelectHow::At, Value::Time(t)) => self.time_context(&context, &TimeWanted::Exact(t), span).ok()?.0,
                (SelectHow::At, Value::TimeIndex(i)) => self.time_context(&context, &TimeWanted::Index(i), span).ok()?.0,
                (SelectHow::During, Value::Range(a, b)) => {
                    let wanted = TimeWanted::Between(time(&a)?, time(&b)?);
                    self.time_context(&context, &wanted, span).ok()?.0
                }
                _ => return None,
            };
        }
        Some(context)
    }

    /// The rule, route, equatorial band and layer of a layer call evaluated
    /// in `context`, when all are known before it runs and the call would
    /// accept them (its options read as `call_builtin` reads them).
    fn layer_request(&mut self, call: &Expr, context: &Context) -> Option<(IntegrationRule, ThicknessRoute, f64, LayerRequest)> {
        let ExprKind::Call { callee, arguments, options } = &call.kind else { return None };
        let ExprKind::Name(name) = &callee.kind else { return None };
        let operator = LAYER_OPERATORS.iter().find(|o| o.name == name)?;
        let [argument] = arguments.as_slice() else { return None };
        if !self.computable_ahead(argument) {
            return None;
        }
        // (`temperature_advection` of a pressure is no layer: left alone.)
        let Ok(Value::Layer(layer)) = self.expr(argument, context) else { return None };
        let (mut rule, mut route, mut band) = (IntegrationRule::Quadratic, operator.route.unwrap_or(ThicknessRoute::Temperature), DEFAULT_EQUATOR_BAND);
        for (k, option) in options.iter().enumerate() {
            let option_name = option.name.name.as_str();
            if !operator.options.contains(&option_name) || options[..k].iter().any(|o| o.name.name == option_name) {
                return None; // refused by the call, or given twice (the call reads the first)
            }
            let word = match &option.value.kind {
                ExprKind::Name(w) | ExprKind::String(w) => Some(w.as_str()),
                _ => None,
            };
            match (option_name, word) {
                ("route", Some(w)) => route = thickness_route(Some(w), option.value.span).ok()?,
                ("integration", Some("quadratic")) => rule = IntegrationRule::Quadratic,
                ("integration", Some("trapezoid")) => rule = IntegrationRule::Trapezoid,
                ("equator_band", _) if self.computable_ahead(&option.value) => {
                    let value = self.expr(&option.value, context).ok()?;
                    band = super::super::builtins_eval::equator_band_degrees(&value, option.value.span).ok()?;
                }
                _ => return None,
            }
        }
        let thermal_wind = operator.thermal_wind;
        Some((rule, route, band, LayerRequest { layer, thermal_wind }))
    }
}
