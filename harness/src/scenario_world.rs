//! The world axes of issue 14 (heading on the slope, unperceived terrain, friction patches,
//! pushes, the friction-estimate error) and their named tables `[terrain.<name>]`,
//! `[patch.<name>]`, `[push.<name>]`: scenario fields, validation, the cell's values, its key
//! text and `cells.csv` columns. Kept in one place so the axes can move into a shared axis
//! table as one block.
//!
//! Every axis has a default that reproduces the world before these axes existed; a cell whose
//! world axes are all at their defaults has the same key (id and seed) as before.

use crate::plant::world::{PatchShape, PushVariant, TerrainVariant};
use serde::Deserialize;
use std::collections::BTreeMap;

/// The world axes as users name them (scenario fields under `[axes]`, `cells.csv` columns,
/// in this order at the end of each row).
pub const WORLD_AXIS_NAMES: [&str; 7] = [
    "heading_deg",
    "terrain",
    "patch",
    "patch_mu",
    "patch_known",
    "push",
    "mu_estimate_scale",
];

/// Defaults: what a cell without these axes had.
pub const DEFAULT_HEADING_DEG: f64 = 0.0;
pub const PLANE: &str = "plane";
pub const NO_PATCH: &str = "none";
pub const NO_PUSH: &str = "none";
/// The patch's μ when `axes.patch_mu` is not given (only used where `patch` ≠ none).
pub const DEFAULT_PATCH_MU: f64 = 0.1;
pub const DEFAULT_MU_ESTIMATE_SCALE: f64 = 1.0;

/// `[terrain.<name>]`.
#[derive(Clone, Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TerrainFile {
    pub step_height: Option<f64>,
    pub step_at: Option<f64>,
    pub bump_rms: Option<f64>,
    pub bump_wavelength: Option<f64>,
    pub bump_at: Option<f64>,
    pub bump_seed: Option<u64>,
}

/// `[patch.<name>]`.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PatchFile {
    /// `strip` (across the path) or `track` (under one foot's track).
    pub kind: String,
    pub at: Option<f64>,
    pub width: Option<f64>,
    pub foot: Option<String>,
}

/// `[push.<name>]`.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PushFile {
    /// `impulse` (N·s) or `force` (N).
    pub kind: String,
    pub magnitude: f64,
    #[serde(default)]
    pub direction_deg: f64,
    pub duration_s: Option<f64>,
    #[serde(default = "one")]
    pub cycle: u32,
    #[serde(default)]
    pub phase: f64,
}

fn one() -> u32 {
    1
}

/// The world axes' values as given in `[axes]`.
#[derive(Clone, Debug)]
pub struct WorldAxesFile<'a> {
    pub heading_deg: &'a Option<Vec<f64>>,
    pub terrain: &'a Option<Vec<String>>,
    pub patch: &'a Option<Vec<String>>,
    pub patch_mu: &'a Option<Vec<f64>>,
    pub patch_known: &'a Option<Vec<bool>>,
    pub push: &'a Option<Vec<String>>,
    pub mu_estimate_scale: &'a Option<Vec<f64>>,
}

/// The resolved world axes of a matrix.
#[derive(Clone, Debug, PartialEq)]
pub struct WorldAxes {
    pub heading_deg: Vec<f64>,
    pub terrain: Vec<String>,
    pub patch: Vec<String>,
    pub patch_mu: Vec<f64>,
    pub patch_known: Vec<bool>,
    pub push: Vec<String>,
    pub mu_estimate_scale: Vec<f64>,
}

impl Default for WorldAxes {
    fn default() -> Self {
        WorldAxes {
            heading_deg: vec![DEFAULT_HEADING_DEG],
            terrain: vec![PLANE.into()],
            patch: vec![NO_PATCH.into()],
            patch_mu: vec![DEFAULT_PATCH_MU],
            patch_known: vec![false],
            push: vec![NO_PUSH.into()],
            mu_estimate_scale: vec![DEFAULT_MU_ESTIMATE_SCALE],
        }
    }
}

/// One cell's world.
#[derive(Clone, Debug, PartialEq)]
pub struct WorldCell {
    pub heading_deg: f64,
    pub terrain: String,
    pub patch: String,
    pub patch_mu: f64,
    pub patch_known: bool,
    pub push: String,
    pub mu_estimate_scale: f64,
}

impl Default for WorldCell {
    fn default() -> Self {
        WorldCell {
            heading_deg: DEFAULT_HEADING_DEG,
            terrain: PLANE.into(),
            patch: NO_PATCH.into(),
            patch_mu: DEFAULT_PATCH_MU,
            patch_known: false,
            push: NO_PUSH.into(),
            mu_estimate_scale: DEFAULT_MU_ESTIMATE_SCALE,
        }
    }
}

impl WorldAxes {
    pub fn lens(&self) -> [usize; 7] {
        [
            self.heading_deg.len(),
            self.terrain.len(),
            self.patch.len(),
            self.patch_mu.len(),
            self.patch_known.len(),
            self.push.len(),
            self.mu_estimate_scale.len(),
        ]
    }

    /// Every combination, in axis order (the last varies fastest).
    pub fn combos(&self) -> Vec<WorldCell> {
        let mut out = Vec::new();
        for &heading_deg in &self.heading_deg {
            for terrain in &self.terrain {
                for patch in &self.patch {
                    for &patch_mu in &self.patch_mu {
                        for &patch_known in &self.patch_known {
                            for push in &self.push {
                                for &mu_estimate_scale in &self.mu_estimate_scale {
                                    out.push(WorldCell {
                                        heading_deg,
                                        terrain: terrain.clone(),
                                        patch: patch.clone(),
                                        patch_mu,
                                        patch_known,
                                        push: push.clone(),
                                        mu_estimate_scale,
                                    });
                                }
                            }
                        }
                    }
                }
            }
        }
        out
    }

    /// The manifest's record of these axes (merged into its `axes` object).
    pub fn to_json(&self) -> serde_json::Map<String, serde_json::Value> {
        let mut m = serde_json::Map::new();
        m.insert("heading_deg".into(), self.heading_deg.clone().into());
        m.insert("terrain".into(), self.terrain.clone().into());
        m.insert("patch".into(), self.patch.clone().into());
        m.insert("patch_mu".into(), self.patch_mu.clone().into());
        m.insert("patch_known".into(), self.patch_known.clone().into());
        m.insert("push".into(), self.push.clone().into());
        m.insert(
            "mu_estimate_scale".into(),
            self.mu_estimate_scale.clone().into(),
        );
        m
    }

    /// Read back from a manifest's `axes`; a manifest made before these axes had none of them
    /// (each missing one is its default).
    pub fn from_json(a: &serde_json::Value) -> Result<WorldAxes, String> {
        let d = WorldAxes::default();
        let nums = |k: &str, def: &Vec<f64>| -> Result<Vec<f64>, String> {
            match a.get(k) {
                None => Ok(def.clone()),
                Some(v) => v
                    .as_array()
                    .ok_or_else(|| format!("field `axes.{k}`: not a list"))?
                    .iter()
                    .map(|x| {
                        x.as_f64()
                            .ok_or_else(|| format!("field `axes.{k}`: not a number"))
                    })
                    .collect(),
            }
        };
        let strs = |k: &str, def: &Vec<String>| -> Result<Vec<String>, String> {
            match a.get(k) {
                None => Ok(def.clone()),
                Some(v) => v
                    .as_array()
                    .ok_or_else(|| format!("field `axes.{k}`: not a list"))?
                    .iter()
                    .map(|x| {
                        x.as_str()
                            .map(String::from)
                            .ok_or_else(|| format!("field `axes.{k}`: not a name"))
                    })
                    .collect(),
            }
        };
        let patch_known = match a.get("patch_known") {
            None => d.patch_known.clone(),
            Some(v) => v
                .as_array()
                .ok_or("field `axes.patch_known`: not a list")?
                .iter()
                .map(|x| {
                    x.as_bool()
                        .ok_or("field `axes.patch_known`: not true/false")
                })
                .collect::<Result<_, _>>()?,
        };
        let w = WorldAxes {
            heading_deg: nums("heading_deg", &d.heading_deg)?,
            terrain: strs("terrain", &d.terrain)?,
            patch: strs("patch", &d.patch)?,
            patch_mu: nums("patch_mu", &d.patch_mu)?,
            patch_known,
            push: strs("push", &d.push)?,
            mu_estimate_scale: nums("mu_estimate_scale", &d.mu_estimate_scale)?,
        };
        if let Some((name, _)) = WORLD_AXIS_NAMES
            .iter()
            .zip(w.lens())
            .find(|(_, l)| *l == 0 || *l > crate::limits::MAX_CELLS)
        {
            return Err(format!("field `axes.{name}`: empty or too long"));
        }
        Ok(w)
    }
}

impl WorldCell {
    /// The key text these axes add to [`crate::matrix::Cell::key`]: each axis that is not at
    /// its default as `;name=value`, in [`WORLD_AXIS_NAMES`] order (empty at the defaults, so
    /// existing cells keep their ids and seeds).
    pub fn key_suffix(&self) -> String {
        let d = WorldCell::default();
        let mut s = String::new();
        if self.heading_deg != d.heading_deg {
            s += &format!(";heading_deg={}", self.heading_deg);
        }
        if self.terrain != d.terrain {
            s += &format!(";terrain={}", self.terrain);
        }
        if self.patch != d.patch {
            s += &format!(";patch={}", self.patch);
        }
        if self.patch_mu != d.patch_mu {
            s += &format!(";patch_mu={}", self.patch_mu);
        }
        if self.patch_known != d.patch_known {
            s += &format!(";patch_known={}", self.patch_known);
        }
        if self.push != d.push {
            s += &format!(";push={}", self.push);
        }
        if self.mu_estimate_scale != d.mu_estimate_scale {
            s += &format!(";mu_estimate_scale={}", self.mu_estimate_scale);
        }
        s
    }

    /// The `cells.csv` values, in [`WORLD_AXIS_NAMES`] order.
    pub fn columns(&self) -> [String; 7] {
        [
            format!("{}", self.heading_deg),
            self.terrain.clone(),
            self.patch.clone(),
            format!("{}", self.patch_mu),
            self.patch_known.to_string(),
            self.push.clone(),
            format!("{}", self.mu_estimate_scale),
        ]
    }
}

/// The validated `[terrain.<name>]`, `[patch.<name>]`, `[push.<name>]` tables.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct WorldTables {
    pub terrain: BTreeMap<String, TerrainVariant>,
    pub patch: BTreeMap<String, PatchShape>,
    pub push: BTreeMap<String, PushVariant>,
}

impl WorldTables {
    /// The terrain variant of a name (`plane`: the nominal plane).
    pub fn terrain(&self, name: &str) -> TerrainVariant {
        self.terrain
            .get(name)
            .cloned()
            .unwrap_or(TerrainVariant::PLANE)
    }
}

type Fail = (String, String);

fn finite_in(field: &str, v: f64, ok: bool, allowed: &str) -> Result<f64, Fail> {
    if v.is_finite() && ok {
        Ok(v)
    } else {
        Err((field.into(), format!("{v}: allowed: {allowed}")))
    }
}

fn check_name(field: &str, name: &str) -> Result<(), Fail> {
    if name.is_empty()
        || name.len() > 40
        || !name
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_')
    {
        return Err((
            field.into(),
            format!("name '{name}': allowed: 1 to 40 letters, digits, '-' or '_'"),
        ));
    }
    Ok(())
}

/// Validate the tables and the world axes. `feet`: the robot's foot frame names (a track patch
/// names one). Errors are (field, message).
pub fn parse(
    axes: &WorldAxesFile,
    terrain: &BTreeMap<String, TerrainFile>,
    patch: &BTreeMap<String, PatchFile>,
    push: &BTreeMap<String, PushFile>,
    laws_mu_estimate_scale: f64,
    max_values: usize,
) -> Result<(WorldAxes, WorldTables), Fail> {
    let mut t = WorldTables::default();
    for (name, f) in terrain {
        let field = |k: &str| format!("terrain.{name}.{k}");
        check_name(&format!("terrain.{name}"), name)?;
        if name == PLANE {
            return Err((
                format!("terrain.{name}"),
                "the name 'plane' is the nominal plane; choose another".into(),
            ));
        }
        let d = TerrainVariant::PLANE;
        let step_height = f.step_height.unwrap_or(d.step_height);
        finite_in(
            &field("step_height"),
            step_height,
            step_height.abs() <= 0.2,
            "|height| ≤ 0.2 m",
        )?;
        let step_at = f.step_at.unwrap_or(d.step_at);
        finite_in(
            &field("step_at"),
            step_at,
            (0.0..=100.0).contains(&step_at),
            "0 to 100 m",
        )?;
        let bump_rms = f.bump_rms.unwrap_or(d.bump_rms);
        finite_in(
            &field("bump_rms"),
            bump_rms,
            (0.0..=0.1).contains(&bump_rms),
            "0 to 0.1 m",
        )?;
        let bump_wavelength = f.bump_wavelength.unwrap_or(d.bump_wavelength);
        finite_in(
            &field("bump_wavelength"),
            bump_wavelength,
            (0.05..=5.0).contains(&bump_wavelength),
            "0.05 to 5 m",
        )?;
        let bump_at = f.bump_at.unwrap_or(d.bump_at);
        finite_in(
            &field("bump_at"),
            bump_at,
            (0.0..=5.0).contains(&bump_at),
            "0 to 5 m (the bump field's height field ends 6 m along the path)",
        )?;
        if bump_rms > 0.0 && step_height != 0.0 {
            return Err((
                field("bump_rms"),
                "a terrain has a step or a bump field, not both".into(),
            ));
        }
        t.terrain.insert(
            name.clone(),
            TerrainVariant {
                step_height,
                step_at,
                bump_rms,
                bump_wavelength,
                bump_at,
                bump_seed: f.bump_seed.unwrap_or(d.bump_seed),
            },
        );
    }
    for (name, f) in patch {
        let field = |k: &str| format!("patch.{name}.{k}");
        check_name(&format!("patch.{name}"), name)?;
        if name == NO_PATCH {
            return Err((
                format!("patch.{name}"),
                "the name 'none' means no patch; choose another".into(),
            ));
        }
        let width = f.width.unwrap_or(0.1);
        finite_in(
            &field("width"),
            width,
            width > 0.0 && width <= 10.0,
            "0 < width ≤ 10 m",
        )?;
        let shape = match f.kind.as_str() {
            "strip" => {
                let at = f.at.ok_or((
                    field("at"),
                    "missing: a strip needs `at` (m along the path)".to_string(),
                ))?;
                finite_in(
                    &field("at"),
                    at,
                    (-1.0..=100.0).contains(&at),
                    "−1 to 100 m",
                )?;
                PatchShape::Strip { at, width }
            }
            "track" => {
                let foot = f.foot.clone().ok_or((
                    field("foot"),
                    "missing: a track needs `foot` (a foot frame of the robot)".to_string(),
                ))?;
                PatchShape::Track { foot, width }
            }
            other => {
                return Err((field("kind"), format!("'{other}': allowed: strip, track")));
            }
        };
        t.patch.insert(name.clone(), shape);
    }
    for (name, f) in push {
        let field = |k: &str| format!("push.{name}.{k}");
        check_name(&format!("push.{name}"), name)?;
        if name == NO_PUSH {
            return Err((
                format!("push.{name}"),
                "the name 'none' means no push; choose another".into(),
            ));
        }
        let impulse = match f.kind.as_str() {
            "impulse" => true,
            "force" => false,
            other => {
                return Err((field("kind"), format!("'{other}': allowed: impulse, force")));
            }
        };
        finite_in(
            &field("magnitude"),
            f.magnitude,
            f.magnitude >= 0.0 && f.magnitude <= 1e4,
            "0 to 10000 (N·s for an impulse, N for a force)",
        )?;
        finite_in(
            &field("direction_deg"),
            f.direction_deg,
            f.direction_deg.abs() <= 360.0,
            "−360 to 360",
        )?;
        let duration_s = match (impulse, f.duration_s) {
            (true, Some(_)) => {
                return Err((
                    field("duration_s"),
                    "an impulse has no duration (it acts over one plant step)".into(),
                ));
            }
            (true, None) => 0.0,
            (false, None) => {
                return Err((field("duration_s"), "missing: a force needs it".into()));
            }
            (false, Some(d)) => finite_in(
                &field("duration_s"),
                d,
                d > 0.0 && d <= 10.0,
                "0 < duration ≤ 10 s",
            )?,
        };
        if f.cycle > 1000 {
            return Err((field("cycle"), format!("{}: allowed: 0 to 1000", f.cycle)));
        }
        finite_in(
            &field("phase"),
            f.phase,
            (0.0..1.0).contains(&f.phase),
            "0 ≤ phase < 1",
        )?;
        t.push.insert(
            name.clone(),
            PushVariant {
                impulse,
                magnitude: f.magnitude,
                direction_deg: f.direction_deg,
                duration_s,
                cycle: f.cycle,
                phase: f.phase,
            },
        );
    }

    let d = WorldAxes::default();
    let len_ok = |field: &str, n: usize| -> Result<(), Fail> {
        if n == 0 || n > max_values {
            Err((
                field.into(),
                format!("{n} values: allowed: 1 to {max_values}"),
            ))
        } else {
            Ok(())
        }
    };
    let nums = |field: &str,
                given: &Option<Vec<f64>>,
                def: &Vec<f64>,
                ok: &dyn Fn(f64) -> bool,
                allowed: &str|
     -> Result<Vec<f64>, Fail> {
        let v = given.clone().unwrap_or_else(|| def.clone());
        len_ok(field, v.len())?;
        for (i, &x) in v.iter().enumerate() {
            if !(x.is_finite() && ok(x)) {
                return Err((
                    field.into(),
                    format!("entry {}: {x}: allowed: {allowed}", i + 1),
                ));
            }
            if v[..i].contains(&x) {
                return Err((field.into(), format!("{x} appears twice")));
            }
        }
        Ok(v)
    };
    let names = |field: &str,
                 given: &Option<Vec<String>>,
                 default: &str,
                 known: &dyn Fn(&str) -> bool,
                 table: &str|
     -> Result<Vec<String>, Fail> {
        let v = given.clone().unwrap_or_else(|| vec![default.to_string()]);
        len_ok(field, v.len())?;
        for (i, x) in v.iter().enumerate() {
            if x != default && !known(x) {
                return Err((
                    field.into(),
                    format!("'{x}': allowed: {default} or the name of a [{table}.<name>] table"),
                ));
            }
            if v[..i].contains(x) {
                return Err((field.into(), format!("'{x}' appears twice")));
            }
        }
        Ok(v)
    };
    let heading_deg = nums(
        "axes.heading_deg",
        axes.heading_deg,
        &d.heading_deg,
        &|x| x.abs() <= 180.0,
        "−180 to 180 (0: straight uphill, 90: across, uphill on the right)",
    )?;
    let terrain = names(
        "axes.terrain",
        axes.terrain,
        PLANE,
        &|n| t.terrain.contains_key(n),
        "terrain",
    )?;
    let patch = names(
        "axes.patch",
        axes.patch,
        NO_PATCH,
        &|n| t.patch.contains_key(n),
        "patch",
    )?;
    let patch_mu = nums(
        "axes.patch_mu",
        axes.patch_mu,
        &d.patch_mu,
        &|x| x > 0.0 && x <= 5.0,
        "0 < μ ≤ 5",
    )?;
    let patch_known = axes.patch_known.clone().unwrap_or(d.patch_known);
    len_ok("axes.patch_known", patch_known.len())?;
    if patch_known.len() == 2 && patch_known[0] == patch_known[1] {
        return Err(("axes.patch_known".into(), "a value appears twice".into()));
    }
    let push_axis = names(
        "axes.push",
        axes.push,
        NO_PUSH,
        &|n| t.push.contains_key(n),
        "push",
    )?;
    let mu_estimate_scale = match axes.mu_estimate_scale {
        Some(_) if laws_mu_estimate_scale != DEFAULT_MU_ESTIMATE_SCALE => {
            return Err((
                "axes.mu_estimate_scale".into(),
                "given both here and as `laws.mu_estimate_scale`; give it in one place".into(),
            ));
        }
        given => nums(
            "axes.mu_estimate_scale",
            given,
            &vec![laws_mu_estimate_scale],
            &|x| x > 0.0 && x <= 10.0,
            "0 < scale ≤ 10",
        )?,
    };
    let bumpy = terrain.iter().any(|n| t.terrain(n).bump_rms > 0.0);
    if bumpy && patch.iter().any(|p| p != NO_PATCH) {
        return Err((
            "axes.patch".into(),
            "a friction patch on a bump field is not supported (one height field, one μ); use a patch with plane or step terrains".into(),
        ));
    }
    Ok((
        WorldAxes {
            heading_deg,
            terrain,
            patch,
            patch_mu,
            patch_known,
            push: push_axis,
            mu_estimate_scale,
        },
        t,
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_add_nothing_to_the_key() {
        assert_eq!(WorldCell::default().key_suffix(), "");
        let c = WorldCell {
            heading_deg: 45.0,
            push: "shove".into(),
            ..WorldCell::default()
        };
        assert_eq!(c.key_suffix(), ";heading_deg=45;push=shove");
    }
}
