//! A `DataSource` over one or more GRIB2 files.
//!
//! Opening indexes every message once (`grib2::index_file`: metadata
//! sections read, data sections only located) and groups the messages into
//! variables by parameter (code table 4.2) and kind of level (code table
//! 4.5), each variable a full table of valid times by levels. Reading
//! decodes only the messages of the times and levels asked for, in parallel
//! across messages, straight into the field's storage; values the bitmap
//! marks missing come out as NaN.
//!
//! Grids: template 3.0 (latitude-longitude, any scan direction) maps onto
//! `grid::Grid`, rows in the file's latitude order and columns always west
//! to east. Polar stereographic (3.20) and Lambert conformal (3.30) grids
//! become projected grids (`projection::ProjectedGrid`) with x and y
//! ascending, from the first point and the increments; winds flagged
//! grid-relative (flag table 3.3 bit 5) are named x_wind / y_wind so the
//! dataset turns them to earth-relative on read. Rotated latitude-longitude
//! (3.1) becomes a projected grid too (x and y the rotated longitude and
//! latitude, the rotated pole the antipode of the template's southern
//! pole), never read as if it were latitude-longitude; a non-zero angle of
//! rotation is refused. Hybrid levels (type 105) are indexed with their
//! level numbers and vertical coordinate values (kept in the variable's
//! attributes and `GribSource::hybrid_levels`); the source is a
//! `ModelLevelStore`, so the dataset presents them on pressure levels
//! (`io::model_level_source`), with the surface pressure `sp` (pressure on
//! the ground).

use std::fs::File;
use std::os::unix::fs::FileExt;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Arc;

use ndarray::{Array4, Axis};
use rayon::prelude::*;

use super::grib2::{self, FieldIndex, GridDefinition, LatLonGrid, Span};
use super::grib2_unpack;
use super::model_level_source::{ModelLevelStore, ModelLevelVariable};
use super::{DataError, DataSource, Selection, VariableInfo};
use crate::physics::model_levels::HybridCoefficients;
use crate::physics::sampling::Region;
use crate::grid::{Field, Grid, TimeAxis};

/// A message and the file it lives in.
#[derive(Debug, Clone)]
struct Located {
    file: usize,
    field: FieldIndex,
}

/// The model levels of a variable on hybrid levels (fixed surface 105):
/// level numbers as in the file, and the vertical coordinate values of
/// section 4 (the a coefficients of the half levels, then the b ones).
#[derive(Debug, Clone, PartialEq)]
pub struct HybridLevels {
    pub levels: Vec<f64>,
    pub pv: Vec<f64>,
}

/// How a variable's messages fill its table.
#[derive(Debug, Clone)]
struct Table {
    /// Level values (Pa for isobaric levels, level numbers for hybrid
    /// levels); one `None` for a single-level variable.
    levels: Vec<Option<f64>>,
    /// Row-major: `messages[t * levels.len() + l]`.
    messages: Vec<Located>,
    hybrid: Option<HybridLevels>,
}

/// Where the decoded points go: scan order to the grid's order.
#[derive(Debug, Clone, Copy)]
struct Layout {
    ni: usize,
    nj: usize,
    /// The file scans west (flag table 3.4 bit 1): columns are reversed.
    reverse_columns: bool,
    /// Adjacent points run along a meridian (flag table 3.4 bit 3).
    column_major: bool,
    /// Projected grids only: the file scans from the top row down (flag
    /// table 3.4 bit 2 clear), so rows are reversed to put y ascending.
    reverse_rows: bool,
}

pub struct GribSource {
    paths: Vec<PathBuf>,
    files: Vec<File>,
    variables: Vec<VariableInfo>,
    tables: Vec<Table>,
    model_levels: Vec<ModelLevelVariable>,
    layout: Layout,
    grid: Arc<Grid>,
}

impl std::fmt::Debug for GribSource {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("GribSource").field("paths", &self.paths).field("variables", &self.variables.len()).finish()
    }
}

/// The variable a message belongs to: its name, and the level value that
/// orders it within the variable.
struct Placement {
    name: String,
    parameter: Option<grib2::Parameter>,
    surface_kind: u8,
    level: Option<f64>,
    /// Order of variables: isobaric first, so that roles find them first.
    rank: u8,
}

fn place(field: &FieldIndex) -> Placement {
    let product = &field.product;
    let parameter = grib2::parameter(field.discipline, product.category, product.number);
    let base = parameter.map_or_else(
        || format!("parameter_{}_{}_{}", field.discipline, product.category, product.number),
        |p| p.name.to_string(),
    );
    let surface = product.first_surface;
    let number = |v: Option<f64>| v.map_or("missing".to_string(), |v| format!("{v}"));
    let (name, level, rank) = match surface.kind {
        grib2::SURFACE_ISOBARIC => (base, surface.value, 0),
        // The log of surface pressure is a surface field, whether on the
        // ground or (as ECMWF writes it) on hybrid level 1.
        grib2::SURFACE_GROUND | grib2::SURFACE_HYBRID if base == "lnsp" => (base, None, 2),
        grib2::SURFACE_HYBRID => (format!("{base}_hybrid"), surface.value, 1),
        grib2::SURFACE_GROUND if base == "pres" => ("sp".to_string(), None, 2),
        grib2::SURFACE_GROUND if base == "lsm" => (base, None, 2),
        grib2::SURFACE_GROUND => (format!("{base}_surface"), None, 2),
        grib2::SURFACE_MEAN_SEA_LEVEL if base == "prmsl" => (base, None, 2),
        grib2::SURFACE_MEAN_SEA_LEVEL => (format!("{base}_mean_sea_level"), None, 2),
        grib2::SURFACE_HEIGHT_ABOVE_GROUND => (format!("{base}_{}m", number(surface.value)), None, 3),
        kind => (format!("{base}_surface{kind}_{}", number(surface.value)), None, 4),
    };
    Placement { name, parameter, surface_kind: surface.kind, level, rank }
}

/// Names a message for errors: "file message N".
fn where_is(paths: &[PathBuf], located: &Located) -> String {
    format!("{} {}", paths[located.file].display(), located.field.label())
}

/// The latitude-longitude grid of template 3.0 in Baroc's order, and the
/// layout that maps scan order onto it. Fails on scans Baroc does not
/// read (alternate row direction).
fn latlon_grid(g: &LatLonGrid) -> Result<(Grid, Layout), String> {
    let mode = g.scanning_mode;
    if mode & 0x10 != 0 {
        return Err(format!("its scanning mode {mode:#04x} reverses every other row (flag table 3.4 bit 4), which Baroc does not read"));
    }
    if g.ni == 0 || g.nj == 0 {
        return Err(format!("its grid has {} x {} points", g.ni, g.nj));
    }
    let reverse_columns = mode & 0x80 != 0;
    let column_major = mode & 0x20 != 0;
    let spread = |first: f64, last: f64, n: usize| -> Vec<f64> {
        if n == 1 {
            vec![first]
        } else {
            (0..n).map(|k| first + (last - first) * k as f64 / (n - 1) as f64).collect()
        }
    };
    let latitudes = spread(g.first_latitude, g.last_latitude, g.nj);
    // Columns west to east whatever the scan direction; the eastern end is
    // unwrapped past the western one (a global grid from 0 to 359.75).
    let (mut west, mut east) =
        if reverse_columns { (g.last_longitude, g.first_longitude) } else { (g.first_longitude, g.last_longitude) };
    if g.ni > 1 && east <= west {
        east += 360.0;
    }
    if g.ni == 1 {
        east = west;
    }
    while west >= 360.0 {
        west -= 360.0;
        east -= 360.0;
    }
    let longitudes = spread(west, east, g.ni);
    Ok((Grid::new(latitudes, longitudes), Layout { ni: g.ni, nj: g.nj, reverse_columns, column_major, reverse_rows: false }))
}

/// A rotated latitude-longitude grid (template 3.1) as a projected `Grid`:
/// x and y are the rotated longitude and latitude in degrees, ascending
/// (rows flipped when the file scans north to south), and the projection
/// is a rotated pole whose north pole is the antipode of the template's
/// southern pole of projection (WMO-No. 306, template 3.1 octets 73-80; CF
/// `rotated_latitude_longitude` takes the northern pole). A non-zero angle
/// of rotation is refused rather than read wrongly.
fn rotated_grid(g: &LatLonGrid, south_pole_latitude: f64, south_pole_longitude: f64, rotation_angle: f64) -> Result<(Grid, Layout), String> {
    use crate::projection::{ProjectedGrid, Projection, RotatedPole};
    if !(rotation_angle.is_finite() && rotation_angle.abs() < 1e-9) {
        return Err(format!(
            "its angle of rotation is {rotation_angle} degrees (template 3.1 octets 81-84); Baroc reads rotated latitude-longitude grids whose angle of rotation is 0"
        ));
    }
    let radius = sphere_radius(&g.earth)?;
    let (grid, mut layout) = latlon_grid(g)?;
    let mut x = grid.longitudes;
    // Rotated longitudes about the rotated meridian 0 (-180..180), where
    // the projection's forward transformation puts them.
    if x[0] >= 180.0 {
        x.iter_mut().for_each(|v| *v -= 360.0);
    }
    let mut y = grid.latitudes;
    if y.len() > 1 && y[0] > y[y.len() - 1] {
        y.reverse();
        layout.reverse_rows = true;
    }
    let pole_longitude = (south_pole_longitude + 360.0).rem_euclid(360.0) - 180.0;
    let pole = RotatedPole::new(-south_pole_latitude, pole_longitude, 0.0, radius).map_err(|e| format!("its rotated latitude-longitude grid: {e}"))?;
    Ok((Grid::projected(ProjectedGrid::new(Projection::RotatedPole(pole), x, y)), layout))
}

/// The radius of a spherical earth of code table 3.2, in m. Baroc's
/// projections are spherical, so oblate shapes are refused rather than read
/// on a sphere (which would shift points by up to some 20 km).
fn sphere_radius(earth: &grib2::Earth) -> Result<f64, String> {
    match earth.shape {
        0 => Ok(6_367_470.0),
        1 => match earth.radius {
            Some(r) if r.is_finite() && r > 1e6 => Ok(r),
            other => Err(format!(
                "its earth shape is 1 (a sphere of radius given in the message, code table 3.2) but the radius is {}",
                other.map_or("missing".to_string(), |r| format!("{r} m"))
            )),
        },
        6 => Ok(6_371_229.0),
        8 => Ok(6_371_200.0),
        other => Err(format!(
            "its earth shape {other} (code table 3.2) is an oblate spheroid or unknown; Baroc's projections are spherical and read shapes 0 (radius 6,367,470 m), 1 (radius given), 6 (6,371,229 m) and 8 (6,371,200 m)"
        )),
    }
}

/// The grid's coordinates along one axis in ascending order from the first
/// point's coordinate, the spacing and the scan direction: a file scanning
/// negatively starts at the largest coordinate.
fn ascending_axis(first: f64, spacing: f64, n: usize, positive: bool) -> Vec<f64> {
    (0..n).map(|k| if positive { first + spacing * k as f64 } else { first - spacing * (n - 1 - k) as f64 }).collect()
}

/// A projected grid (templates 3.20 and 3.30) as a `Grid` with its
/// `ProjectedGrid`: x and y in metres from the projection of the first
/// point (La1, Lo1) and the increments Dx, Dy (metres in the projection
/// plane), ascending whatever the scan direction, and the layout that maps
/// scan order onto it. Fails on an oblate earth, a bipolar projection,
/// alternating row scans and parameters the projection refuses.
fn projected_grid(definition: &GridDefinition) -> Result<(Grid, Layout), String> {
    use crate::projection::{LambertConformal, PolarStereographic, Pole, ProjectedGrid, Projection};
    let (nx, ny, first_latitude, first_longitude, dx, dy, centre, mode, earth) = match definition {
        GridDefinition::LambertConformal(g) => {
            (g.nx, g.ny, g.first_latitude, g.first_longitude, g.dx_metres, g.dy_metres, g.projection_centre_flag, g.scanning_mode, &g.earth)
        }
        GridDefinition::PolarStereographic(g) => {
            (g.nx, g.ny, g.first_latitude, g.first_longitude, g.dx_metres, g.dy_metres, g.projection_centre_flag, g.scanning_mode, &g.earth)
        }
        other => return Err(format!("its grid (template 3.{}) is not a projected grid", other.template())),
    };
    if mode & 0x10 != 0 {
        return Err(format!("its scanning mode {mode:#04x} reverses every other row (flag table 3.4 bit 4), which Baroc does not read"));
    }
    if nx == 0 || ny == 0 || !(dx > 0.0 && dy > 0.0) {
        return Err(format!("its grid has {nx} x {ny} points spaced {dx} m by {dy} m"));
    }
    // Flag table 3.5: bit 1 (0x80) the south pole is on the projection
    // plane; bit 2 (0x40) bipolar and symmetric.
    if centre & 0x40 != 0 {
        return Err(format!("its projection centre flag {centre:#04x} asks for a bipolar projection (flag table 3.5 bit 2), which Baroc does not read"));
    }
    let south = centre & 0x80 != 0;
    let radius = sphere_radius(earth)?;
    let projection = match definition {
        GridDefinition::LambertConformal(g) => {
            let parallels = (g.first_standard_parallel, g.second_standard_parallel);
            if south != (parallels.0 < 0.0) {
                return Err(format!(
                    "its projection centre flag says the {} pole is on the projection plane, but its standard parallels {} and {} are in the other hemisphere",
                    if south { "south" } else { "north" },
                    parallels.0,
                    parallels.1
                ));
            }
            // The origin latitude only shifts y; LaD is where GRIB2 gives Dx
            // and Dy, so it is the natural origin.
            let origin = if g.true_scale_latitude.abs() < 90.0 { g.true_scale_latitude } else { parallels.0 };
            Projection::LambertConformal(
                LambertConformal::new(parallels, g.orientation_longitude, origin, 0.0, 0.0, radius).map_err(|e| format!("its Lambert conformal grid: {e}"))?,
            )
        }
        GridDefinition::PolarStereographic(g) => Projection::PolarStereographic(
            PolarStereographic::with_standard_parallel(
                if south { Pole::South } else { Pole::North },
                g.orientation_longitude,
                g.true_scale_latitude,
                0.0,
                0.0,
                radius,
            )
            .map_err(|e| format!("its polar stereographic grid: {e}"))?,
        ),
        _ => unreachable!("matched above"),
    };
    let (x0, y0) = projection.forward(first_latitude, first_longitude);
    let reverse_columns = mode & 0x80 != 0;
    let reverse_rows = mode & 0x40 == 0;
    let x = ascending_axis(x0, dx, nx, !reverse_columns);
    let y = ascending_axis(y0, dy, ny, !reverse_rows);
    let layout = Layout { ni: nx, nj: ny, reverse_columns, column_major: mode & 0x20 != 0, reverse_rows };
    Ok((Grid::projected(ProjectedGrid::new(projection, x, y)), layout))
}

impl GribSource {
    /// Indexes GRIB2 files and combines their messages into one set of
    /// variables. Fails, naming the file and message, on: a message that
    /// cannot be read, a grid Baroc cannot use yet, an unsupported packing,
    /// two messages for the same variable, time and level, a variable
    /// whose messages do not fill its table of times and levels, or grids
    /// that differ between messages.
    pub fn open<P: AsRef<Path>>(paths: &[P]) -> Result<Self, DataError> {
        let paths: Vec<PathBuf> = paths.iter().map(|p| p.as_ref().to_path_buf()).collect();
        let mut files = Vec::new();
        let mut all: Vec<Located> = Vec::new();
        for (k, path) in paths.iter().enumerate() {
            files.push(File::open(path).map_err(|e| DataError::Open { path: path.display().to_string(), message: e.to_string() })?);
            all.extend(grib2::index_file(path)?.into_iter().map(|field| Located { file: k, field }));
        }
        let first = all.first().ok_or_else(|| DataError::Invalid("no GRIB2 messages found".into()))?.clone();
        let (grid, layout) = match &first.field.grid {
            GridDefinition::LatLon(g) => {
                latlon_grid(g).map_err(|e| DataError::Invalid(format!("{}: {e}", where_is(&paths, &first))))?
            }
            projected @ (GridDefinition::LambertConformal(_) | GridDefinition::PolarStereographic(_)) => projected_grid(projected)
                .map_err(|e| DataError::Invalid(format!("{}: {e}. Grid parameters: {}", where_is(&paths, &first), projected.parameters())))?,
            rotated @ GridDefinition::RotatedLatLon { grid, south_pole_latitude, south_pole_longitude, rotation_angle } => {
                rotated_grid(grid, *south_pole_latitude, *south_pole_longitude, *rotation_angle)
                    .map_err(|e| DataError::Invalid(format!("{}: {e}. Grid parameters: {}", where_is(&paths, &first), rotated.parameters())))?
            }
        };
        let grid = Arc::new(grid);
        // Flag table 3.3 bit 5 (0x08): u and v are along the grid's x and y
        // rather than east and north. Only projected grids turn them; on a
        // latitude-longitude grid the two are the same directions.
        let resolution_flags = match &first.field.grid {
            GridDefinition::LambertConformal(g) => g.resolution_flags,
            GridDefinition::PolarStereographic(g) => g.resolution_flags,
            GridDefinition::RotatedLatLon { grid, .. } => grid.resolution_flags,
            _ => 0,
        };
        let grid_relative_winds = grid.projection.is_some() && resolution_flags & 0x08 != 0;

        // Check every message before grouping: the same grid, a packing
        // the decoder knows, a readable valid time.
        for located in &all {
            if located.field.grid != first.field.grid {
                return Err(DataError::GridMismatch {
                    first: where_is(&paths, &first),
                    first_grid: first.field.grid.parameters(),
                    second: where_is(&paths, located),
                    second_grid: located.field.grid.parameters(),
                });
            }
            if grib2::packing_name(located.field.packing).is_none() {
                return Err(DataError::Invalid(format!(
                    "{}: its data representation template 5.{} is not supported (Baroc unpacks 5.0 simple, 5.2 complex, 5.3 complex with spatial differencing, 5.40 JPEG 2000, 5.41 PNG, 5.42 CCSDS and 5.200 run-length packing)",
                    where_is(&paths, located),
                    located.field.packing
                )));
            }
            located.field.valid_time().map_err(|e| DataError::Invalid(format!("{}: {e}", where_is(&paths, located))))?;
        }

        // Group by variable name, keeping the first appearance order.
        struct Group {
            placement: Placement,
            members: Vec<(i64, Option<f64>, Located)>,
        }
        let mut groups: Vec<Group> = Vec::new();
        for located in all {
            let placement = place(&located.field);
            let time = located.field.valid_time().expect("checked above");
            match groups.iter_mut().find(|g| g.placement.name == placement.name) {
                Some(group) => group.members.push((time, placement.level, located)),
                None => groups.push(Group { members: vec![(time, placement.level, located)], placement }),
            }
        }
        groups.sort_by_key(|g| g.placement.rank);
        let earliest = groups.iter().flat_map(|g| g.members.iter().map(|m| m.0)).min().expect("at least one message");
        let time_units = format!("hours since {}", grib2::format_time(earliest));

        let mut variables = Vec::new();
        let mut tables = Vec::new();
        for group in groups {
            let Placement { name, parameter, surface_kind, .. } = group.placement;
            let times: Vec<i64> = group.members.iter().map(|m| m.0).collect::<std::collections::BTreeSet<_>>().into_iter().collect();
            let mut levels: Vec<Option<f64>> = Vec::new();
            for m in &group.members {
                if !levels.iter().any(|l| same_level(*l, m.1)) {
                    levels.push(m.1);
                }
            }
            // Isobaric levels from the ground up (highest pressure first);
            // model levels in their numbering order.
            if surface_kind == grib2::SURFACE_ISOBARIC {
                levels.sort_by(|a, b| b.unwrap_or(0.0).total_cmp(&a.unwrap_or(0.0)));
            } else {
                levels.sort_by(|a, b| a.unwrap_or(0.0).total_cmp(&b.unwrap_or(0.0)));
            }
            if levels.iter().any(Option::is_none) && levels.len() > 1 {
                return Err(DataError::Invalid(format!(
                    "`{name}` in {}: some of its messages have no level value",
                    paths.iter().map(|p| p.display().to_string()).collect::<Vec<_>>().join(", ")
                )));
            }
            let mut slots: Vec<Option<Located>> = vec![None; times.len() * levels.len()];
            for (time, level, located) in group.members {
                let t = times.binary_search(&time).expect("time collected");
                let l = levels.iter().position(|x| same_level(*x, level)).expect("level collected");
                let slot = &mut slots[t * levels.len() + l];
                if let Some(earlier) = slot {
                    return Err(DataError::Invalid(format!(
                        "`{name}` is given twice for {}{}: by {} and by {}; Baroc needs one message per variable, time and level",
                        grib2::format_time(time),
                        level_text(surface_kind, level),
                        where_is(&paths, earlier),
                        where_is(&paths, &located)
                    )));
                }
                *slot = Some(located);
            }
            let mut messages = Vec::with_capacity(slots.len());
            for (k, slot) in slots.into_iter().enumerate() {
                let Some(located) = slot else {
                    let (t, l) = (k / levels.len(), k % levels.len());
                    return Err(DataError::Invalid(format!(
                        "`{name}` has no message for {}{} in {}, though it has messages for other times and levels; Baroc needs every level at every time",
                        grib2::format_time(times[t]),
                        level_text(surface_kind, levels[l]),
                        paths.iter().map(|p| p.display().to_string()).collect::<Vec<_>>().join(", ")
                    )));
                };
                messages.push(located);
            }
            let hybrid = if surface_kind == grib2::SURFACE_HYBRID && name != "lnsp" {
                let pv = messages[0].field.product.pv.clone();
                if let Some(other) = messages.iter().find(|m| m.field.product.pv != pv) {
                    return Err(DataError::Invalid(format!(
                        "`{name}`: the hybrid level coefficients differ between {} and {}",
                        where_is(&paths, &messages[0]),
                        where_is(&paths, other)
                    )));
                }
                Some(HybridLevels { levels: levels.iter().map(|l| l.unwrap_or(f64::NAN)).collect(), pv })
            } else {
                None
            };
            let mut packings: Vec<&str> = Vec::new();
            for m in &messages {
                let p = grib2::packing_name(m.field.packing).expect("checked above");
                if !packings.contains(&p) {
                    packings.push(p);
                }
            }
            let head = &messages[0].field;
            let mut attributes = vec![
                ("GRIB2_discipline".to_string(), head.discipline.to_string()),
                ("GRIB2_parameter_category".to_string(), head.product.category.to_string()),
                ("GRIB2_parameter_number".to_string(), head.product.number.to_string()),
                ("GRIB2_fixed_surface_type".to_string(), surface_kind.to_string()),
                ("GRIB2_packing".to_string(), packings.join(", ")),
            ];
            if grid_relative_winds && matches!(parameter.and_then(|p| p.standard_name), Some("eastward_wind" | "northward_wind")) {
                attributes.push(("GRIB2_wind_components".into(), "grid-relative (flag table 3.3 bit 5 set)".into()));
            }
            if let Some(h) = &hybrid {
                attributes.push(("GRIB2_hybrid_level_numbers".into(), join_numbers(&h.levels)));
                attributes.push(("GRIB2_hybrid_coefficients".into(), join_numbers(&h.pv)));
            }
            // Only isobaric and hybrid fields and the named surface fields
            // carry a standard name, so roles never pick a 2 m temperature.
            let standard_name = match surface_kind {
                // Grid-relative components carry the CF names of components
                // along x and y, so the dataset turns them to east and north
                // on read (`projected::rotate_component`), as for NetCDF.
                grib2::SURFACE_ISOBARIC | grib2::SURFACE_HYBRID if grid_relative_winds => parameter.and_then(|p| match p.standard_name {
                    Some("eastward_wind") => Some("x_wind"),
                    Some("northward_wind") => Some("y_wind"),
                    other => other,
                }),
                grib2::SURFACE_ISOBARIC | grib2::SURFACE_HYBRID => parameter.and_then(|p| p.standard_name),
                grib2::SURFACE_GROUND if name == "sp" => Some("surface_air_pressure"),
                // The surface geopotential (or orography) that the
                // hydrostatic integral on model levels starts from.
                grib2::SURFACE_GROUND if name == "z_surface" => Some("surface_geopotential"),
                grib2::SURFACE_GROUND if name == "gh_surface" => Some("surface_altitude"),
                // The land-sea mask the maps draw coastlines from.
                grib2::SURFACE_GROUND if name == "lsm" => Some("land_binary_mask"),
                grib2::SURFACE_MEAN_SEA_LEVEL if name == "prmsl" => Some("air_pressure_at_mean_sea_level"),
                _ => None,
            };
            let pressure_levels =
                (surface_kind == grib2::SURFACE_ISOBARIC).then(|| levels.iter().map(|l| l.unwrap_or(f64::NAN)).collect::<Vec<_>>());
            variables.push(VariableInfo {
                name: name.clone(),
                long_name: Some(match (parameter, surface_kind) {
                    (Some(p), grib2::SURFACE_HYBRID) if name != "lnsp" => format!("{} on hybrid model levels", p.long_name),
                    (Some(p), _) => p.long_name.to_string(),
                    (None, _) => format!(
                        "GRIB2 parameter discipline {}, category {}, number {}",
                        head.discipline, head.product.category, head.product.number
                    ),
                }),
                units: parameter.map_or(String::new(), |p| p.units.to_string()),
                standard_name: standard_name.map(str::to_string),
                levels: pressure_levels,
                times: Some(TimeAxis {
                    values: times.iter().map(|&t| (t - earliest) as f64 / 3600.0).collect(),
                    units: time_units.clone(),
                    calendar: "proleptic_gregorian".into(),
                }),
                grid: grid.clone(),
                attributes,
                packed: true,
            });
            tables.push(Table { levels, messages, hybrid });
        }
        // Surface pressure for the hybrid coefficients: `sp`, or else the
        // log of surface pressure (ps = exp(lnsp)).
        let surface_pressure = if variables.iter().any(|v| v.name == "sp") || !variables.iter().any(|v| v.name == "lnsp") { "sp" } else { "lnsp" };
        let mut model_levels = Vec::new();
        for (info, table) in variables.iter().zip(&tables) {
            let Some(hybrid) = &table.hybrid else { continue };
            let coefficients = full_level_coefficients(hybrid).map_err(|e| {
                DataError::Invalid(format!("{}: `{}` ({}): {e}", where_is(&paths, &table.messages[0]), info.name, info.long_name.clone().unwrap_or_default()))
            })?;
            let numbers = &hybrid.levels;
            let description = match (numbers.first(), numbers.last()) {
                (Some(a), Some(b)) if numbers.len() > 1 => format!("model levels {a} to {b} (GRIB2 fixed surface 105, {} levels)", numbers.len()),
                (Some(a), _) => format!("model level {a} (GRIB2 fixed surface 105)"),
                _ => "model levels".into(),
            };
            model_levels.push(ModelLevelVariable { info: info.clone(), coefficients, surface_pressure: surface_pressure.into(), description });
        }
        Ok(Self { paths, files, variables, tables, model_levels, layout, grid })
    }

    /// The hybrid model levels of a variable on them (level numbers and
    /// vertical coordinate values), if it is on hybrid levels.
    pub fn hybrid_levels(&self, variable: &str) -> Option<&HybridLevels> {
        let k = self.variables.iter().position(|v| v.name == variable)?;
        self.tables[k].hybrid.as_ref()
    }

    /// The message locations of a variable, in (time, level) order, as
    /// "file message N": for messages and tests.
    pub fn message_labels(&self, variable: &str) -> Vec<String> {
        let Some(k) = self.variables.iter().position(|v| v.name == variable) else { return Vec::new() };
        self.tables[k].messages.iter().map(|m| where_is(&self.paths, m)).collect()
    }

    fn read_span(&self, file: usize, span: Span) -> Result<Vec<u8>, DataError> {
        let mut buffer = Vec::new();
        self.read_span_into(file, span, &mut buffer)?;
        Ok(buffer)
    }

    /// Reads a span into a buffer reused across messages.
    fn read_span_into(&self, file: usize, span: Span, buffer: &mut Vec<u8>) -> Result<(), DataError> {
        buffer.resize(span.length as usize, 0);
        self.files[file].read_exact_at(buffer, span.offset).map_err(|e| DataError::Open {
            path: self.paths[file].display().to_string(),
            message: format!("reading bytes {}..{}: {e}", span.offset, span.offset + span.length),
        })
    }

    /// Decodes one message into `out` (one horizontal slice, in the grid's
    /// order): with Baroc's own unpackers (`grib2_unpack`) for simple,
    /// complex, spatially differenced and CCSDS packing, through the `grib`
    /// crate for the others (JPEG 2000, PNG, run-length) and for what the
    /// own unpackers do not implement. Damaged data are an error either way.
    fn decode_into(&self, located: &Located, out: &mut [f32], scratch: &mut DecodeScratch) -> Result<(), DataError> {
        let field = &located.field;
        let fail = |e: String| {
            DataError::Invalid(format!(
                "{}: cannot unpack its values ({}, template 5.{}): {e}",
                where_is(&self.paths, located),
                grib2::packing_name(field.packing).unwrap_or("unknown packing"),
                field.packing
            ))
        };
        let Layout { ni, nj, reverse_columns, column_major, reverse_rows } = self.layout;
        let points = ni * nj;
        let in_order = !reverse_columns && !column_major && !reverse_rows;
        if grib2_unpack::covers(field.packing) {
            // Sections 5 to 7 usually follow each other: one read.
            let (s5, s6, s7) = (field.section5, field.section6, field.section7);
            let contiguous = s5.offset + s5.length == s6.offset && s6.offset + s6.length == s7.offset;
            let (section5, section6, section7): (&[u8], &[u8], &[u8]) = if contiguous {
                self.read_span_into(located.file, Span { offset: s5.offset, length: s5.length + s6.length + s7.length }, &mut scratch.bytes)?;
                let (a, rest) = scratch.bytes.split_at(s5.length as usize);
                let (b, c) = rest.split_at(s6.length as usize);
                (a, b, c)
            } else {
                self.read_span_into(located.file, s5, &mut scratch.bytes)?;
                self.read_span_into(located.file, s6, &mut scratch.bitmap)?;
                self.read_span_into(located.file, s7, &mut scratch.data)?;
                (&scratch.bytes, &scratch.bitmap, &scratch.data)
            };
            let target: &mut [f32] = if in_order {
                out
            } else {
                scratch.values.resize(points, 0.0);
                &mut scratch.values
            };
            match grib2_unpack::unpack(section5, section6, section7, target, &mut scratch.unpack) {
                Ok(()) => {
                    OWN_UNPACKER_MESSAGES.fetch_add(1, Ordering::Relaxed);
                    if !in_order {
                        reorder(&self.layout, scratch.values.iter().copied(), out);
                    }
                    return Ok(());
                }
                Err(grib2_unpack::UnpackError::Damaged(e)) => return Err(fail(e)),
                // Not implemented here: the grib crate may read it.
                Err(grib2_unpack::UnpackError::Unsupported(_)) => {}
            }
        }
        let mut section5 = self.read_span(located.file, field.section5)?;
        let section7 = self.read_span(located.file, field.section7)?;
        if field.packing == 41 {
            png_sample_bits(&mut section5, &section7);
        }
        let decoder = grib::Grib2SubmessageDecoder::new(points, section5, self.read_span(located.file, field.section6)?, section7)
            .map_err(|e| fail(e.to_string()))?;
        let values = decoder.dispatch().map_err(|e| fail(e.to_string()))?;
        let mut count = 0usize;
        if in_order {
            for (slot, v) in out.iter_mut().zip(values) {
                *slot = v;
                count += 1;
            }
        } else {
            count = reorder(&self.layout, values.take(points), out);
        }
        if count != points {
            return Err(fail(format!("it holds {count} values for a grid of {points} points")));
        }
        CRATE_UNPACKER_MESSAGES.fetch_add(1, Ordering::Relaxed);
        Ok(())
    }
}

/// Buffers one decoding thread reuses from message to message.
#[derive(Default)]
struct DecodeScratch {
    bytes: Vec<u8>,
    bitmap: Vec<u8>,
    data: Vec<u8>,
    /// Values in scan order, when the scan differs from the grid's order.
    values: Vec<f32>,
    unpack: grib2_unpack::Scratch,
}

/// Messages decoded so far in this process by Baroc's own unpackers and by
/// the `grib` crate (for benchmarks and tests: which unpacker ran).
static OWN_UNPACKER_MESSAGES: AtomicUsize = AtomicUsize::new(0);
static CRATE_UNPACKER_MESSAGES: AtomicUsize = AtomicUsize::new(0);

/// (messages unpacked by `io::grib2_unpack`, messages unpacked by the
/// `grib` crate) since the process started.
pub fn unpacker_counts() -> (usize, usize) {
    (OWN_UNPACKER_MESSAGES.load(Ordering::Relaxed), CRATE_UNPACKER_MESSAGES.load(Ordering::Relaxed))
}

/// Puts values in scan order into the grid's order; returns how many.
fn reorder(layout: &Layout, values: impl Iterator<Item = f32>, out: &mut [f32]) -> usize {
    let Layout { ni, nj, reverse_columns, column_major, reverse_rows } = *layout;
    let mut count = 0;
    for (p, v) in values.enumerate() {
        let (j, i) = if column_major { (p % nj, p / nj) } else { (p / ni, p % ni) };
        let column = if reverse_columns { ni - 1 - i } else { i };
        let row = if reverse_rows { nj - 1 - j } else { j };
        out[row * ni + column] = v;
        count += 1;
    }
    count
}

/// PNG packing (template 5.41) stores each value as one pixel, and a PNG
/// pixel is 1, 2, 4, 8 or 16 bits per channel: an encoder asked for another
/// width (12 bits, say) writes the next wider image, while section 5 keeps
/// the width asked for. The decoder reads pixels at section 5's width, so
/// the width is set here from the image's own header (PNG specification,
/// ISO/IEC 15948, IHDR: bit depth times channels of the colour type).
fn png_sample_bits(section5: &mut [u8], section7: &[u8]) {
    // Section 7: 5 octets of header, then the PNG stream: an 8-byte
    // signature, the IHDR chunk's length and type (8), width and height (8),
    // then bit depth and colour type.
    let (Some(&depth), Some(&colour)) = (section7.get(5 + 24), section7.get(5 + 25)) else { return };
    if section7.get(5 + 12..5 + 16) != Some(b"IHDR".as_slice()) {
        return;
    }
    let channels = match colour {
        0 => 1,
        4 => 2,
        2 => 3,
        6 => 4,
        _ => return,
    };
    // Octet 20 of template 5.41: bits per value.
    if let Some(bits) = section5.get_mut(19) {
        let pixel = depth as u32 * channels;
        if *bits != 0 && pixel <= 32 && *bits as u32 != pixel {
            *bits = pixel as u8;
        }
    }
}

/// The error for a variable read where pressure levels are needed but it
/// has none: for a variable on GRIB2 hybrid model levels, says so (and
/// where its levels and coefficients are kept); otherwise `NoLevels`.
pub fn no_pressure_levels(info: &VariableInfo) -> DataError {
    let attribute = |key: &str| info.attributes.iter().find(|(k, _)| k == key).map(|(_, v)| v.split_whitespace().count());
    match (attribute("GRIB2_hybrid_level_numbers"), attribute("GRIB2_hybrid_coefficients")) {
        (Some(levels), Some(coefficients)) => DataError::Invalid(format!(
            "`{}` is on {levels} hybrid model levels (GRIB2 fixed surface type 105), not pressure levels; a dataset (`Dataset::open`) presents it on pressure levels, interpolated in ln p (its level numbers and {coefficients} hybrid coefficients are kept in the attributes GRIB2_hybrid_level_numbers and GRIB2_hybrid_coefficients)",
            info.name
        )),
        _ => DataError::NoLevels { variable: info.name.clone() },
    }
}

/// The coefficients of each full model level from a hybrid variable's
/// vertical coordinate values: `pv` holds the A (Pa) of the N+1 half levels
/// then their B; full level n lies between half levels n-1 and n, and its
/// pressure is their mean, p_n = (A_{n-1} + A_n)/2 + (B_{n-1} + B_n)/2 ps
/// (ECMWF IFS documentation, Part III, section 2.2: pressure on half
/// levels p = A + B ps; the full level as the mean of its half levels is
/// common practice in post-processing). Fails when the values are not A
/// and B pairs or a level number lies outside them.
pub fn full_level_coefficients(hybrid: &HybridLevels) -> Result<HybridCoefficients, String> {
    let pv = &hybrid.pv;
    if pv.is_empty() {
        return Err("it is on hybrid levels (fixed surface 105) but its messages carry no vertical coordinate values (PV), so the pressure of its levels is unknown".into());
    }
    if !pv.len().is_multiple_of(2) || pv.len() < 4 {
        return Err(format!(
            "its {} hybrid coefficients (PV) are not the A and B of two or more half levels (an even count is needed)",
            pv.len()
        ));
    }
    let half = pv.len() / 2;
    let (a, b) = pv.split_at(half);
    let mut ap = Vec::new();
    let mut bs = Vec::new();
    for &number in &hybrid.levels {
        if !(number.fract() == 0.0 && number >= 1.0 && (number as usize) < half) {
            return Err(format!(
                "its {} hybrid coefficients describe {} half levels, so model levels 1 to {}, but the data have model level {number} ({} levels in all: {})",
                pv.len(),
                half,
                half - 1,
                hybrid.levels.len(),
                join_numbers(&hybrid.levels)
            ));
        }
        let n = number as usize;
        ap.push(0.5 * (a[n - 1] + a[n]));
        bs.push(0.5 * (b[n - 1] + b[n]));
    }
    HybridCoefficients::from_ap(ap, bs)
}

fn same_level(a: Option<f64>, b: Option<f64>) -> bool {
    match (a, b) {
        (Some(x), Some(y)) => (x - y).abs() <= 1e-6 * x.abs().max(1.0),
        (None, None) => true,
        _ => false,
    }
}

fn level_text(kind: u8, level: Option<f64>) -> String {
    match (kind, level) {
        (grib2::SURFACE_ISOBARIC, Some(p)) => format!(" at {} hPa", p / 100.0),
        (grib2::SURFACE_HYBRID, Some(n)) => format!(" on model level {n}"),
        _ => String::new(),
    }
}

fn join_numbers(values: &[f64]) -> String {
    values.iter().map(|v| format!("{v}")).collect::<Vec<_>>().join(" ")
}

impl DataSource for GribSource {
    fn label(&self) -> String {
        self.paths.iter().map(|p| p.display().to_string()).collect::<Vec<_>>().join(", ")
    }

    fn variables(&self) -> &[VariableInfo] {
        &self.variables
    }

    fn global_attributes(&self) -> Vec<(String, String)> {
        vec![("source_format".into(), "GRIB edition 2".into())]
    }

    fn read(&self, name: &str, selection: &Selection) -> Result<Field, DataError> {
        let k = self.variables.iter().position(|v| v.name == name).ok_or_else(|| DataError::MissingVariable {
            path: self.label(),
            name: name.to_string(),
            available: self.variables.iter().map(|v| v.name.clone()).collect(),
            suggestion: String::new(),
        })?;
        let info = &self.variables[k];
        let table = &self.tables[k];
        if table.hybrid.is_some() {
            return Err(no_pressure_levels(info));
        }
        // Every GRIB2 variable has a time axis (valid times) and, unless
        // isobaric, one level, so the shared rule applies as it is.
        let (time_indices, level_indices) = super::selected_indices(name, info, selection)?;
        self.read_table(k, &time_indices, &level_indices, selection.region.as_ref())
    }
}

impl ModelLevelStore for GribSource {
    fn model_level_variables(&self) -> &[ModelLevelVariable] {
        &self.model_levels
    }

    fn read_model_levels(&self, name: &str, times: &[usize], levels: &[usize], region: Option<&Region>) -> Result<Field, DataError> {
        let k = self.variables.iter().position(|v| v.name == name).filter(|&k| self.tables[k].hybrid.is_some());
        let k = k.ok_or_else(|| DataError::Invalid(format!("{}: `{name}` is not on hybrid model levels", self.label())))?;
        let count = self.tables[k].levels.len();
        if let Some(&bad) = levels.iter().find(|&&l| l >= count) {
            return Err(DataError::Invalid(format!("{}: `{name}` has {count} model levels; level index {bad} asked for", self.label())));
        }
        self.read_table(k, times, levels, region)
    }
}

impl GribSource {
    /// Decodes the messages of variable `k` at the given time and level
    /// indices, [time, level, y, x], over the region.
    fn read_table(&self, k: usize, time_indices: &[usize], level_indices: &[usize], region: Option<&Region>) -> Result<Field, DataError> {
        let info = &self.variables[k];
        let table = &self.tables[k];
        let name = info.name.as_str();
        let selection = Selection { times: None, levels: None, region: region.copied() };
        let (nj, ni) = (self.layout.nj, self.layout.ni);
        let wanted: Vec<&Located> =
            time_indices.iter().flat_map(|&t| level_indices.iter().map(move |&l| &table.messages[t * table.levels.len() + l])).collect();
        // Zeros from fresh pages, huge pages asked for (no pass writing
        // them, fewer page faults); every slice is
        // then overwritten by its message or the read fails.
        let mut data: Array4<f32> = crate::physics::allocation::zeroed((time_indices.len(), level_indices.len(), nj, ni));
        let slices = data.as_slice_mut().expect("a new array is contiguous");
        slices
            .par_chunks_mut(nj * ni)
            .zip(wanted.par_iter())
            .try_for_each_init(DecodeScratch::default, |scratch, (out, located)| self.decode_into(located, out, scratch))?;

        let mut grid = self.grid.clone();
        if let (Some(region), Some(projected)) = (&selection.region, &self.grid.projection) {
            // A latitude-longitude box on a projected grid: the block of rows
            // and columns holding the cells inside it (inverse projection).
            let (south, north, west, east) = (region.south, region.north, region.west, region.east);
            let (rows, cols) = super::projected::block_in_box(projected, south, north, west, east)
                .ok_or_else(|| DataError::EmptyRegion { variable: name.into(), south, north, west, east, grid: grid.describe() })?;
            let (rows, cols): (Vec<usize>, Vec<usize>) = (rows.collect(), cols.collect());
            data = data.select(Axis(2), &rows).select(Axis(3), &cols);
            grid = Arc::new(super::projected::sub_grid(projected, &rows, &cols));
        } else if let Some(region) = &selection.region {
            let lat: Vec<usize> = (0..grid.latitudes.len())
                .filter(|&j| grid.latitudes[j] >= region.south - 1e-9 && grid.latitudes[j] <= region.north + 1e-9)
                .collect();
            let (lon, lons) = super::netcdf_source::longitude_selection(&grid.longitudes, region);
            if lat.is_empty() || lon.is_empty() {
                let (south, north, west, east) = (region.south, region.north, region.west, region.east);
                return Err(DataError::EmptyRegion { variable: name.into(), south, north, west, east, grid: grid.describe() });
            }
            data = data.select(Axis(2), &lat).select(Axis(3), &lon);
            grid = Arc::new(Grid::new(lat.iter().map(|&j| grid.latitudes[j]).collect(), lons));
        }
        let times = info.times.as_ref().map(|t| t.select(time_indices));
        // Model levels keep their level numbers as the level coordinate.
        let levels = match &info.levels {
            Some(l) => Some(level_indices.iter().map(|&i| l[i]).collect()),
            None if table.hybrid.is_some() => Some(level_indices.iter().map(|&i| table.levels[i].unwrap_or(f64::NAN)).collect()),
            None => None,
        };
        let mut field = Field::new(name, info.units.clone(), data, times, levels, grid).map_err(DataError::Invalid)?;
        field.long_name = info.long_name.clone().unwrap_or_else(|| name.to_string());
        field.standard_name = info.standard_name.clone();
        Ok(field)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn full_level_coefficients_are_the_mean_of_the_half_levels() {
        // By hand: half levels A = 0, 2000, 5000 Pa and B = 0, 0.4, 1;
        // level 1 -> A 1000, B 0.2; level 2 -> A 3500, B 0.7; over ps =
        // 1000 hPa: 21000 Pa and 73500 Pa.
        let hybrid = HybridLevels { levels: vec![1.0, 2.0], pv: vec![0.0, 2000.0, 5000.0, 0.0, 0.4, 1.0] };
        let c = full_level_coefficients(&hybrid).unwrap();
        assert_eq!(c.pressure(0, 100_000.0), 21_000.0);
        assert_eq!(c.pressure(1, 100_000.0), 73_500.0);
        let bad = HybridLevels { levels: vec![1.0, 2.0, 3.0], pv: hybrid.pv.clone() };
        assert!(full_level_coefficients(&bad).unwrap_err().contains("model levels 1 to 2, but the data have model level 3"));
        let odd = HybridLevels { levels: vec![1.0], pv: vec![0.0, 1.0, 2.0] };
        assert!(full_level_coefficients(&odd).unwrap_err().contains("even count"));
    }
}
