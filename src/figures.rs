//! Pictures of language values: the bridge from fields (with coordinates
//! and metadata) to the renderers' plain-array specs.

use ndarray::{ArrayView2, Axis};

use crate::grid::{Field, VectorField};
use crate::mime::MimeBundle;
use crate::render::colour::Levels;
use crate::render::map::{ContourLayer, MapSpec, ShadedLayer, VectorLayer};
use crate::render::{FigureSize, RenderError};

/// The first horizontal slice of a field, and a note of which it is.
fn first_slice(f: &Field) -> (ArrayView2<'_, f32>, String) {
    let slice = f.data.index_axis(Axis(0), 0).index_axis_move(Axis(0), 0);
    let mut note = Vec::new();
    if let Some(t) = &f.times {
        let labels = t.labels();
        note.push(if labels.len() > 1 { format!("{} (first of {} times)", labels[0], labels.len()) } else { labels[0].clone() });
    }
    if let Some(l) = &f.levels {
        note.push(if l.len() > 1 { format!("{} hPa (first of {} levels)", l[0] / 100.0, l.len()) } else { format!("{} hPa", l[0] / 100.0) });
    }
    for (k, v) in &f.attributes {
        if k == "pressure_level" {
            note.push(v.clone());
        }
    }
    (slice, note.join(", "))
}

/// The contour interval the trade uses for a field, where there is one:
/// thickness every 60 m, geopotential height every 60 m (common practice).
fn habitual_interval(f: &Field) -> Option<f64> {
    let length = crate::units::Unit::parse(&f.units).map(|u| u.dimension() == crate::units::Dimension::LENGTH).unwrap_or(false);
    (length && (f.name.starts_with("thickness") || f.standard_name.as_deref() == Some("geopotential_height"))).then_some(60.0)
}

/// A map of a scalar field: shaded, with labelled contour lines, and
/// optional vectors on top.
pub fn field_map_with(f: &Field, vectors: Option<&VectorField>, size: &FigureSize) -> Result<MimeBundle, RenderError> {
    let (values, note) = first_slice(f);
    let mut spec = MapSpec::new(format!("{} ({})", f.long_name, f.units), &f.grid.latitudes, &f.grid.longitudes).subtitle(note);
    let shaded = ShadedLayer::new(values, f.name.clone(), f.units.clone());
    spec = spec.shaded(shaded);
    let mut lines = ContourLayer::new(values, f.name.clone(), f.units.clone());
    if let Some(interval) = habitual_interval(f) {
        lines = lines.every(interval);
    } else {
        lines = lines.levels(Levels::Auto);
    }
    spec = spec.contour_lines(lines);
    let vector_slices;
    if let Some(w) = vectors {
        vector_slices = (first_slice(&w.eastward).0, first_slice(&w.northward).0);
        spec = spec.vectors(VectorLayer::arrows(vector_slices.0, vector_slices.1, w.eastward.long_name.replace("eastward ", "")));
    }
    spec = spec.caption("Baroc: an analysis tool, not a warning service.");
    crate::render::map::render_map(&spec, size)
}

/// A map of a scalar field with the default size; None if it cannot be
/// drawn (a single point, all values missing).
pub fn field_map(f: &Field, vectors: Option<&VectorField>) -> Option<MimeBundle> {
    field_map_with(f, vectors, &FigureSize::default()).ok()
}

/// A map of a vector field: speed shaded, barbs for winds, arrows for other
/// vectors (gradients, shears).
pub fn vector_map_with(w: &VectorField, size: &FigureSize) -> Result<MimeBundle, RenderError> {
    let speed = w.speed();
    let (values, note) = first_slice(&speed);
    let (u, _) = first_slice(&w.eastward);
    let (v, _) = first_slice(&w.northward);
    let name = w.eastward.long_name.replace("eastward ", "");
    let is_speed = crate::units::Unit::parse(&w.eastward.units).map(|u| u.dimension() == crate::units::Dimension::VELOCITY).unwrap_or(false);
    let layer = if is_speed { VectorLayer::barbs(u, v, name.clone()) } else { VectorLayer::arrows(u, v, name.clone()) };
    let spec = MapSpec::new(format!("{name} ({})", w.eastward.units), &w.eastward.grid.latitudes, &w.eastward.grid.longitudes)
        .subtitle(note)
        .shaded(ShadedLayer::new(values, format!("speed of {name}"), w.eastward.units.clone()))
        .vectors(layer)
        .caption("Baroc: an analysis tool, not a warning service.");
    crate::render::map::render_map(&spec, size)
}

pub fn vector_map(w: &VectorField) -> Option<MimeBundle> {
    vector_map_with(w, &FigureSize::default()).ok()
}
