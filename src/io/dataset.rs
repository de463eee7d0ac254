//! A dataset: several sources seen as one, with variables found by name or
//! by physical role.
//!
//! Files combine when their grids agree: one variable per file (the union of
//! their variables), or one time per file (a variable present in several
//! files is joined along time, in time order). Disagreeing grids are an
//! error that names both.

use std::path::Path;

use super::model_level_source::{ModelLevelStore, OnPressureLevels};
use super::netcdf_source::NetcdfSource;
use crate::physics::model_levels::BelowLowestLevel;
use super::{DataError, DataSource, Selection, VariableInfo};
use crate::grid::{Field, TimeAxis};

/// Physical roles, found through CF standard names, so one diagnostic serves
/// files from different sources.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
pub enum Role {
    Temperature,
    Geopotential,
    GeopotentialHeight,
    EastwardWind,
    NorthwardWind,
    SpecificHumidity,
    SurfacePressure,
}

impl Role {
    pub const ALL: [Role; 7] = [
        Role::Temperature,
        Role::Geopotential,
        Role::GeopotentialHeight,
        Role::EastwardWind,
        Role::NorthwardWind,
        Role::SpecificHumidity,
        Role::SurfacePressure,
    ];

    /// The role's name in the language.
    pub fn name(self) -> &'static str {
        match self {
            Role::Temperature => "temperature",
            Role::Geopotential => "geopotential",
            Role::GeopotentialHeight => "geopotential_height",
            Role::EastwardWind => "eastward_wind",
            Role::NorthwardWind => "northward_wind",
            Role::SpecificHumidity => "specific_humidity",
            Role::SurfacePressure => "surface_pressure",
        }
    }

    pub fn from_name(name: &str) -> Option<Role> {
        Role::ALL.into_iter().find(|r| r.name() == name)
    }

    /// The CF standard names that carry this role (CF standard name table).
    pub fn standard_names(self) -> &'static [&'static str] {
        match self {
            Role::Temperature => &["air_temperature"],
            Role::Geopotential => &["geopotential"],
            Role::GeopotentialHeight => &["geopotential_height"],
            // Grid-relative components of a projected grid are turned to
            // earth-relative when read (io::projected).
            Role::EastwardWind => &["eastward_wind", "x_wind", "grid_eastward_wind"],
            Role::NorthwardWind => &["northward_wind", "y_wind", "grid_northward_wind"],
            Role::SpecificHumidity => &["specific_humidity"],
            Role::SurfacePressure => &["surface_air_pressure", "surface_pressure"],
        }
    }

    /// The canonical units of the role (udunits spelling).
    pub fn units(self) -> &'static str {
        match self {
            Role::Temperature => "K",
            Role::Geopotential => "m2 s-2",
            Role::GeopotentialHeight => "m",
            Role::EastwardWind | Role::NorthwardWind => "m s-1",
            Role::SpecificHumidity => "kg kg-1",
            Role::SurfacePressure => "Pa",
        }
    }

    /// Variable names that commonly carry the role when a file has no
    /// standard_name (common practice, no source); used only as a fallback.
    fn usual_names(self) -> &'static [&'static str] {
        match self {
            Role::Temperature => &["t", "ta", "temp", "air", "temperature"],
            Role::Geopotential => &["z", "phi", "geopotential"],
            Role::GeopotentialHeight => &["zg", "gh", "hgt", "height"],
            Role::EastwardWind => &["u", "ua", "uwnd"],
            Role::NorthwardWind => &["v", "va", "vwnd"],
            Role::SpecificHumidity => &["q", "hus", "shum"],
            Role::SurfacePressure => &["sp", "ps", "pres_sfc"],
        }
    }
}

/// Where a variable of the combined dataset lives: (source, its time
/// indices in that source) in time order.
#[derive(Debug, Clone)]
struct Entry {
    info: VariableInfo,
    parts: Vec<(usize, Vec<usize>)>,
}

/// Several sources, combined.
pub struct Dataset {
    sources: Vec<Box<dyn DataSource>>,
    entries: Vec<Entry>,
    /// The files it was opened from (empty when built from sources), so
    /// that a program's below-ground setting can open them again.
    paths: Vec<std::path::PathBuf>,
}

impl std::fmt::Debug for Dataset {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Dataset").field("sources", &self.labels()).field("variables", &self.variable_names()).finish()
    }
}

fn same_grid(a: &VariableInfo, b: &VariableInfo) -> bool {
    let close = |x: &[f64], y: &[f64]| x.len() == y.len() && x.iter().zip(y).all(|(p, q)| (p - q).abs() < 1e-6);
    close(&a.grid.latitudes, &b.grid.latitudes) && close(&a.grid.longitudes, &b.grid.longitudes)
}

impl Dataset {
    /// Opens files read-only and combines them. Each file's kind is told by
    /// its content, not its name: GRIB edition 2 files (all of them
    /// together form one source, so messages split across files combine by
    /// variable, time and level), GRIB edition 1 refused by name, anything
    /// else read as NetCDF.
    pub fn open<P: AsRef<Path>>(paths: &[P]) -> Result<Self, DataError> {
        Self::open_with(paths, super::model_level_source::below_lowest_level())
    }

    /// As `open` (which takes the front end's choice, by default missing),
    /// choosing what model-level data give below their lowest
    /// level (`io::model_level_source`): missing, or extrapolated with the
    /// standard lapse rate (recorded in the metadata).
    pub fn open_with<P: AsRef<Path>>(paths: &[P], below: BelowLowestLevel) -> Result<Self, DataError> {
        let mut sources: Vec<Box<dyn DataSource>> = Vec::new();
        let mut grib_paths = Vec::new();
        for p in paths {
            match super::grib2::file_kind(p.as_ref()) {
                super::grib2::FileKind::Grib2 => grib_paths.push(p.as_ref().to_path_buf()),
                super::grib2::FileKind::Grib1 => {
                    return Err(DataError::Open {
                        path: p.as_ref().display().to_string(),
                        message: "it is GRIB edition 1, which Baroc does not read (it reads GRIB edition 2 and CF NetCDF)".into(),
                    })
                }
                super::grib2::FileKind::Other => {
                    let source = NetcdfSource::open(p)?;
                    match super::model_levels::NetcdfModelLevels::open(source)? {
                        Ok(store) => sources.push(Box::new(OnPressureLevels::new(Box::new(store), below)?)),
                        Err(source) => sources.push(Box::new(source)),
                    }
                }
            }
        }
        if !grib_paths.is_empty() {
            let source = super::grib2_source::GribSource::open(&grib_paths)?;
            if source.model_level_variables().is_empty() {
                sources.push(Box::new(source));
            } else {
                sources.push(Box::new(OnPressureLevels::new(Box::new(source), below)?));
            }
        }
        let mut dataset = Self::from_sources(sources)?;
        dataset.paths = paths.iter().map(|p| p.as_ref().to_path_buf()).collect();
        Ok(dataset)
    }

    /// What the dataset's model-level data give below their lowest level
    /// (None when it holds no model-level data).
    pub fn below_lowest_level(&self) -> Option<BelowLowestLevel> {
        self.sources.iter().find_map(|s| s.below_lowest_level())
    }

    /// The same files opened again with another below-ground choice; the
    /// dataset itself when it holds no model-level data or already makes
    /// that choice. Fails for a dataset not opened from files.
    pub fn reopened_with(self: &std::sync::Arc<Self>, below: BelowLowestLevel) -> Result<std::sync::Arc<Self>, DataError> {
        match self.below_lowest_level() {
            None => Ok(self.clone()),
            Some(b) if b == below => Ok(self.clone()),
            Some(_) if self.paths.is_empty() => Err(DataError::Invalid(format!(
                "{}: this dataset was not opened from files, so its model-level data cannot be opened again with another below-ground choice",
                self.labels().join(", ")
            ))),
            Some(_) => Ok(std::sync::Arc::new(Self::open_with(&self.paths, below)?)),
        }
    }

    /// Whether `name` (a variable or role) may be read at any pressure in
    /// its range straight from the data (model-level data), not only at its
    /// listed levels.
    pub fn reads_any_pressure(&self, name: &str) -> bool {
        let Ok(info) = self.resolve(name) else { return false };
        let Some(entry) = self.entries.iter().find(|e| e.info.name == info.name) else { return false };
        entry.parts.iter().all(|(s, _)| self.sources[*s].reads_any_pressure(&info.name))
    }

    /// Combines sources. Fails when two sources' grids disagree, or when a
    /// variable repeated across sources differs in levels or time units.
    pub fn from_sources(sources: Vec<Box<dyn DataSource>>) -> Result<Self, DataError> {
        let mut entries: Vec<Entry> = Vec::new();
        let mut reference: Option<(String, VariableInfo)> = None;
        for (s, source) in sources.iter().enumerate() {
            for info in source.variables() {
                match &reference {
                    None => reference = Some((format!("{} in {}", info.name, source.label()), info.clone())),
                    Some((label, first)) if !same_grid(first, info) => {
                        return Err(DataError::GridMismatch {
                            first: label.clone(),
                            first_grid: first.grid.describe(),
                            second: format!("{} in {}", info.name, source.label()),
                            second_grid: info.grid.describe(),
                        })
                    }
                    _ => {}
                }
                let time_count = info.times.as_ref().map_or(1, |t| t.values.len());
                match entries.iter_mut().find(|e| e.info.name == info.name) {
                    None => entries.push(Entry { info: info.clone(), parts: vec![(s, (0..time_count).collect())] }),
                    Some(entry) => {
                        if entry.info.levels != info.levels {
                            return Err(DataError::GridMismatch {
                                first: format!("{} in {}", entry.info.name, sources[entry.parts[0].0].label()),
                                first_grid: format!("levels {:?} Pa", entry.info.levels),
                                second: format!("{} in {}", info.name, source.label()),
                                second_grid: format!("levels {:?} Pa", info.levels),
                            });
                        }
                        let (Some(a), Some(b)) = (&entry.info.times, &info.times) else {
                            return Err(DataError::Invalid(format!(
                                "`{}` appears in several files but has no time dimension to join them along",
                                info.name
                            )));
                        };
                        if a.units != b.units || a.calendar != b.calendar {
                            return Err(DataError::Invalid(format!(
                                "`{}`: time units differ between files (`{}` and `{}`); Baroc joins files along time only when their time units agree",
                                info.name, a.units, b.units
                            )));
                        }
                        entry.parts.push((s, (0..time_count).collect()));
                        let mut values = a.values.clone();
                        values.extend_from_slice(&b.values);
                        entry.info.times = Some(TimeAxis { values, units: a.units.clone(), calendar: a.calendar.clone() });
                    }
                }
            }
        }
        // Keep time in order when files arrive out of order.
        for entry in &mut entries {
            if entry.parts.len() > 1 {
                let mut flat: Vec<(f64, usize, usize)> = Vec::new();
                for (s, idx) in &entry.parts {
                    let t = sources[*s].variables().iter().find(|v| v.name == entry.info.name).and_then(|v| v.times.clone());
                    for &i in idx {
                        flat.push((t.as_ref().map_or(0.0, |t| t.values[i]), *s, i));
                    }
                }
                flat.sort_by(|a, b| a.0.total_cmp(&b.0));
                let mut parts: Vec<(usize, Vec<usize>)> = Vec::new();
                for (_, s, i) in &flat {
                    match parts.last_mut() {
                        Some((ls, v)) if ls == s => v.push(*i),
                        _ => parts.push((*s, vec![*i])),
                    }
                }
                entry.parts = parts;
                if let Some(t) = &mut entry.info.times {
                    t.values = flat.iter().map(|x| x.0).collect();
                }
            }
        }
        Ok(Self { sources, entries, paths: Vec::new() })
    }

    /// The sources' labels, followed by what a source says of why `role`
    /// is absent (for the error of a role not found).
    pub fn labels_with_note(&self, role: &str) -> String {
        let mut text = self.labels().join(", ");
        for note in self.sources.iter().filter_map(|s| s.missing_note(role)) {
            text.push_str(&format!(" ({note})"));
        }
        text
    }

    pub fn labels(&self) -> Vec<String> {
        self.sources.iter().map(|s| s.label()).collect()
    }

    pub fn sources(&self) -> &[Box<dyn DataSource>] {
        &self.sources
    }

    pub fn variable_names(&self) -> Vec<String> {
        self.entries.iter().map(|e| e.info.name.clone()).collect()
    }

    pub fn variables(&self) -> impl Iterator<Item = &VariableInfo> {
        self.entries.iter().map(|e| &e.info)
    }

    pub fn variable(&self, name: &str) -> Option<&VariableInfo> {
        self.entries.iter().find(|e| e.info.name == name).map(|e| &e.info)
    }

    /// The variable that plays `role`: by standard_name first, then by the
    /// usual names with units of the right dimension.
    pub fn find_role(&self, role: Role) -> Option<&VariableInfo> {
        self.variables()
            .find(|v| v.standard_name.as_deref().is_some_and(|s| role.standard_names().contains(&s)))
            .or_else(|| {
                self.variables().find(|v| {
                    role.usual_names().contains(&v.name.to_ascii_lowercase().as_str())
                        && crate::units::Unit::parse(&v.units)
                            .ok()
                            .zip(crate::units::Unit::parse(role.units()).ok())
                            .is_some_and(|(a, b)| a.conversion_to(&b).is_ok())
                })
            })
    }

    /// The roles present, with the variable that carries each.
    pub fn roles(&self) -> Vec<(Role, String)> {
        Role::ALL.into_iter().filter_map(|r| self.find_role(r).map(|v| (r, v.name.clone()))).collect()
    }

    /// Resolves a name: a variable's own name first, then a role.
    pub fn resolve(&self, name: &str) -> Result<&VariableInfo, DataError> {
        if let Some(v) = self.variable(name) {
            return Ok(v);
        }
        if let Some(role) = Role::from_name(name) {
            return self.find_role(role).ok_or_else(|| DataError::MissingRole {
                role: name.into(),
                sources: self.labels_with_note(name),
                found: self.roles().iter().map(|(r, v)| format!("{} ({v})", r.name())).collect(),
            });
        }
        let mut candidates = self.variable_names();
        candidates.extend(self.roles().iter().map(|(r, _)| r.name().to_string()));
        let suggestion = nearest(name, &candidates).map(|s| format!(" (did you mean `{s}`?)")).unwrap_or_default();
        Err(DataError::MissingVariable { path: self.labels().join(", "), name: name.into(), available: candidates, suggestion })
    }

    /// Reads a selection of a variable (by name or role), joining the parts
    /// of a variable split across files along time.
    pub fn read(&self, name: &str, selection: &Selection) -> Result<Field, DataError> {
        self.read_with(name, selection, None)
    }

    /// As `read`, with the physical constants of the program asking (used
    /// where a source computes a variable, such as the hydrostatic integral
    /// on model levels; None: the default constants).
    pub fn read_with(&self, name: &str, selection: &Selection, constants: Option<&crate::constants::Constants>) -> Result<Field, DataError> {
        let started = std::time::Instant::now();
        let field = self.read_as_stored(name, selection, constants)?;
        let field = self.to_earth_relative(field, selection, constants)?;
        super::timings::record_read(name, selection, started.elapsed(), (field.data.len() * std::mem::size_of::<f32>()) as u64);
        Ok(field)
    }

    /// A grid-relative wind component (x_wind, y_wind, grid_eastward_wind,
    /// grid_northward_wind) on a projected grid becomes the eastward or
    /// northward component, using its partner; anything else is unchanged.
    fn to_earth_relative(&self, field: Field, selection: &Selection, constants: Option<&crate::constants::Constants>) -> Result<Field, DataError> {
        use super::projected::{rotate_component, GRID_RELATIVE_X, GRID_RELATIVE_Y};
        let Some(standard_name) = field.standard_name.clone() else { return Ok(field) };
        let along_x = match (GRID_RELATIVE_X.iter().position(|s| *s == standard_name), GRID_RELATIVE_Y.iter().position(|s| *s == standard_name)) {
            (Some(k), _) => (true, GRID_RELATIVE_Y[k]),
            (_, Some(k)) => (false, GRID_RELATIVE_X[k]),
            _ => return Ok(field),
        };
        if field.grid.projection.is_none() {
            return Ok(field);
        }
        let partner = self.variables().find(|v| v.standard_name.as_deref() == Some(along_x.1)).map(|v| v.name.clone()).ok_or_else(|| {
            DataError::Invalid(format!("{} is a grid-relative wind component ({standard_name}); turning it to earth-relative needs its partner ({}), which is not in the data", field.name, along_x.1))
        })?;
        let partner = self.read_as_stored(&partner, selection, constants)?;
        rotate_component(field, &partner, along_x.0).map_err(DataError::Invalid)
    }

    fn read_as_stored(&self, name: &str, selection: &Selection, constants: Option<&crate::constants::Constants>) -> Result<Field, DataError> {
        let info = self.resolve(name)?.clone();
        let read_source = |s: usize, selection: &Selection| match constants {
            Some(c) => self.sources[s].read_with_constants(&info.name, selection, c),
            None => self.sources[s].read(&info.name, selection),
        };
        let entry = self.entries.iter().find(|e| e.info.name == info.name).expect("resolved names exist");
        if entry.parts.len() == 1 {
            let (s, _) = &entry.parts[0];
            return read_source(*s, selection);
        }
        // Map global time indices onto (source, local index).
        let flat: Vec<(usize, usize)> = entry.parts.iter().flat_map(|(s, idx)| idx.iter().map(move |&i| (*s, i))).collect();
        let wanted: Vec<usize> = selection.times.clone().unwrap_or_else(|| (0..flat.len()).collect());
        let mut pieces: Vec<Field> = Vec::new();
        for &g in &wanted {
            let &(s, i) = flat.get(g).ok_or(DataError::TimeOutOfRange { variable: info.name.clone(), index: g, last: flat.len() - 1 })?;
            let local = Selection { times: Some(vec![i]), ..selection.clone() };
            pieces.push(read_source(s, &local)?);
        }
        let views: Vec<_> = pieces.iter().map(|p| p.data.view()).collect();
        let data = ndarray::concatenate(ndarray::Axis(0), &views).map_err(|e| DataError::Invalid(e.to_string()))?;
        let mut field = pieces[0].clone();
        let times = info.times.as_ref().map(|t| t.select(&wanted));
        field.data = data;
        field.times = times;
        Ok(field)
    }

    /// Global attributes of every source, for provenance.
    pub fn global_attributes(&self) -> Vec<(String, Vec<(String, String)>)> {
        self.sources.iter().map(|s| (s.label(), s.global_attributes())).collect()
    }
}

/// The candidate nearest to `name` by edit distance, if close enough to be a
/// plausible typo (at most a third of the name's length, and 3).
pub fn nearest(name: &str, candidates: &[String]) -> Option<String> {
    let limit = (name.chars().count() / 3).clamp(1, 3);
    candidates
        .iter()
        .map(|c| (edit_distance(&name.to_lowercase(), &c.to_lowercase()), c))
        .filter(|(d, _)| *d <= limit)
        .min_by_key(|(d, _)| *d)
        .map(|(_, c)| c.clone())
}

/// Levenshtein distance (Wagner-Fischer dynamic programme).
pub fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut previous = row[0];
        row[0] = i + 1;
        for (j, &cb) in b.iter().enumerate() {
            let current = row[j + 1];
            row[j + 1] = (previous + usize::from(ca != cb)).min(row[j] + 1).min(row[j + 1] + 1);
            previous = current;
        }
    }
    row[b.len()]
}
