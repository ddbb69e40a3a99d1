//! The named tables of the world axes (issue 14): `[terrain.<name>]`, `[patch.<name>]`,
//! `[push.<name>]`, their scenario fields and validation. The axes themselves (`heading_deg`,
//! `terrain`, `patch`, `patch_mu`, `patch_known`, `push`, `mu_estimate_scale`) are entries of
//! the run format's axis table ([`crate::run_format::AXES`]); `axes.terrain`, `axes.patch` and
//! `axes.push` name these tables (or the neutral `plane` / `none`).

use crate::plant::world::{PatchShape, PushVariant, TerrainVariant};
use serde::Deserialize;
use std::collections::BTreeMap;

pub use crate::run_format::{NONE as NO_PATCH, NONE as NO_PUSH, PLANE};

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

/// Validate the `[terrain.*]`, `[patch.*]`, `[push.*]` tables. Errors are (field, message).
pub fn parse_tables(
    terrain: &BTreeMap<String, TerrainFile>,
    patch: &BTreeMap<String, PatchFile>,
    push: &BTreeMap<String, PushFile>,
) -> Result<WorldTables, Fail> {
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

    Ok(t)
}

impl WorldTables {
    /// The table names, for the axis table's checks.
    pub fn names(&self) -> [Vec<&str>; 3] {
        [
            self.terrain.keys().map(String::as_str).collect(),
            self.patch.keys().map(String::as_str).collect(),
            self.push.keys().map(String::as_str).collect(),
        ]
    }

    /// What the axis table cannot check value by value: a friction patch on a bump field (one
    /// height field, one μ) is not supported.
    pub fn check_axes(&self, terrains: &[String], patches: &[String]) -> Result<(), Fail> {
        let bumpy = terrains.iter().any(|n| self.terrain(n).bump_rms > 0.0);
        if bumpy && patches.iter().any(|p| p != NO_PATCH) {
            return Err((
                "axes.patch".into(),
                "a friction patch on a bump field is not supported (one height field, one μ); use a patch with plane or step terrains".into(),
            ));
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_neutral_names_cannot_name_a_table() {
        let mut terrain = BTreeMap::new();
        terrain.insert(PLANE.to_string(), TerrainFile::default());
        let e = parse_tables(&terrain, &BTreeMap::new(), &BTreeMap::new()).unwrap_err();
        assert_eq!(e.0, "terrain.plane");
    }
}
