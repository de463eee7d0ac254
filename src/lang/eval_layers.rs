//! The language reaching the many-layer kernel: before the first statement
//! of a program (or of the part of it after an `open`) that asks for the
//! temperature-route thickness or thermal wind of a layer, every such
//! request in that part whose layer is known (written out, `1000 hPa to
//! 850 hPa`, or a name already bound to a layer) is handed to
//! `Case::prepare_layers`, which computes them all in one pass over the
//! levels and offers them to the run's shared store; the calls themselves
//! then run as usual and are served from it, with the same bits
//! (`tests/sharing_on_demo.rs`, `tests/many_layers_on_demo.rs`).
//!
//! Calls evaluated in the statement's own selection are gathered, and those
//! of a whole statement value written `... in NAME` with NAME bound to a
//! region (a recipe's `output x = thermal_wind(layer) in area`), in that
//! region's selection, as `select` makes it. A call under `at`, `over` or
//! `during`, under an `in` inside an expression or with a region written
//! out, inside a block or an `if` branch runs with another selection (or
//! maybe not at all), and is left to the one-layer path, as is a call with
//! an `equator_band` option or a layer computed by an expression.

use super::*;
use crate::diagnostics::LayerRequest;
use crate::physics::sampling::Region;
use crate::physics::vertical::IntegrationRule;

/// Operators whose value starts from a layer's thickness, and whether they
/// need its thermal wind too.
const LAYER_OPERATORS: [(&str, bool); 4] = [("thickness", false), ("layer_mean_temperature", false), ("thermal_wind", true), ("ageostrophic_shear", true)];

/// The calls of `expr` evaluated in its own selection that start from a
/// layer's thickness.
fn layer_calls<'a>(expr: &'a Expr, out: &mut Vec<&'a Expr>) {
    match &expr.kind {
        ExprKind::Call { callee, arguments, options } => {
            if matches!(&callee.kind, ExprKind::Name(n) if LAYER_OPERATORS.iter().any(|(o, _)| o == n)) {
                out.push(expr);
            }
            for e in arguments.iter().chain(options.iter().map(|o| &o.value)) {
                layer_calls(e, out);
            }
        }
        ExprKind::Member { base, .. } => layer_calls(base, out),
        ExprKind::Unary { operand, .. } => layer_calls(operand, out),
        ExprKind::Binary { left, right, .. } => {
            layer_calls(left, out);
            layer_calls(right, out);
        }
        ExprKind::Convert { value, .. } => layer_calls(value, out),
        _ => {}
    }
}

/// The layer calls of a statement: those in its own selection (no
/// region), and those of a value written `... in NAME` whose name is bound
/// to a region, with that name (`output t = thermal_wind(layer) in area`).
fn statement_layer_calls(statement: &Statement) -> Vec<(&Expr, Option<&str>)> {
    let mut out = Vec::new();
    match &statement.kind {
        StatementKind::Let { value, .. } | StatementKind::Output { value, .. } | StatementKind::Expression(value) => match &value.kind {
            ExprKind::Select { base, how: SelectHow::In, selector } => {
                if let ExprKind::Name(region) = &selector.kind {
                    let mut calls = Vec::new();
                    layer_calls(base, &mut calls);
                    out.extend(calls.into_iter().map(|c| (c, Some(region.as_str()))));
                }
            }
            _ => {
                let mut calls = Vec::new();
                layer_calls(value, &mut calls);
                out.extend(calls.into_iter().map(|c| (c, None)));
            }
        },
        _ => {}
    }
    out
}

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
        let calls: Vec<(Expr, Option<String>)> = part.flat_map(|s| statement_layer_calls(s).into_iter().map(|(c, r)| (c.clone(), r.map(str::to_string)))).collect();
        // Grouped by rule, route and region: each group is one pass in the
        // selection its calls run in.
        let mut groups: Vec<((IntegrationRule, ThicknessRoute, Option<Region>), Vec<LayerRequest>)> = Vec::new();
        for (call, region_name) in &calls {
            let region = match region_name {
                None => None,
                Some(name) => match self.lookup(name) {
                    Some(Value::Region(region)) => Some(*region),
                    _ => continue,
                },
            };
            if let Some((rule, route, request)) = self.layer_request(call, context) {
                match groups.iter_mut().find(|(k, _)| *k == (rule, route, region)) {
                    Some((_, requests)) => requests.push(request),
                    None => groups.push(((rule, route, region), vec![request])),
                }
            }
        }
        for ((rule, route, region), requests) in groups {
            // The selection `select` gives a value written `... in region`.
            let mut inner = context.clone();
            if let Some(region) = region {
                inner.selection.region = match context.selection.region {
                    Some(outer) => match intersect(&outer, &region) {
                        Some(both) => Some(both),
                        None => continue, // the call reports it, with its span
                    },
                    None => Some(region),
                };
            }
            let Ok(mut case) = self.case(&inner, statements[index].span, None) else { return };
            case.integration = rule;
            // An error here is the one-layer path's to report, with its span.
            let _ = case.prepare_layers(&requests, route);
        }
    }

    /// The layer, rule and route of a layer call, when all are known before
    /// it runs.
    fn layer_request(&mut self, call: &Expr, context: &Context) -> Option<(IntegrationRule, ThicknessRoute, LayerRequest)> {
        let ExprKind::Call { callee, arguments, options } = &call.kind else { return None };
        let ExprKind::Name(name) = &callee.kind else { return None };
        let thermal_wind = LAYER_OPERATORS.iter().find(|(o, _)| o == name)?.1;
        let [argument] = arguments.as_slice() else { return None };
        let layer = match &argument.kind {
            ExprKind::Range { from, to } if matches!(from.kind, ExprKind::Number { .. }) && matches!(to.kind, ExprKind::Number { .. }) => self.expr(argument, context).ok()?,
            ExprKind::Name(n) => self.lookup(n)?.clone(),
            _ => return None,
        };
        let Value::Layer(layer) = layer else { return None };
        let (mut rule, mut route) = (IntegrationRule::Quadratic, ThicknessRoute::Temperature);
        for option in options {
            let word = match &option.value.kind {
                ExprKind::Name(w) | ExprKind::String(w) => w.as_str(),
                _ => return None,
            };
            match (option.name.name.as_str(), word) {
                ("route", w) => route = thickness_route(Some(w), option.value.span).ok()?,
                ("integration", "quadratic") => rule = IntegrationRule::Quadratic,
                ("integration", "trapezoid") => rule = IntegrationRule::Trapezoid,
                _ => return None,
            }
        }
        Some((rule, route, LayerRequest { layer, thermal_wind }))
    }
}
