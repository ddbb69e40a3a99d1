//! The scenario file (TOML): which robot, which gait, how long, the plant settings, the law
//! settings, and the axes of the matrix. Parsed with serde (unknown fields rejected with the
//! allowed names), then validated field by field before anything runs; every message names the
//! file and the field. The default scenario is compiled into the binary.

use crate::limits::{
    AXIS_TOLERANCE, MAX_AXIS_VALUES, MAX_CELLS, MAX_DELAY_S, MAX_DELAY_STEPS, MAX_SEEDS,
    MAX_STEPS_PER_CELL, MIN_DT, MIN_DURATION_S, same_axis_value,
};
use crate::planner::Gait;
use crate::plant::PlantSettings;
use crate::plant::actuator::ActuatorKind;
use crate::robot::LoadedRobot;
use crate::run_format::{AXES, AxisContext, AxisKind, AxisValue, axis};
use gripsweep_controllers::laws::{LawField, LawSettings, law_names, registry};
use serde::Deserialize;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Largest gait length (m) or period (s) accepted.
const MAX_GAIT_NUMBER: f64 = 1000.0;
/// Largest sensor noise standard deviation accepted (at `sensor_noise = 1`).
const MAX_NOISE_STD: f64 = 1000.0;

/// The default scenario's text, embedded so `gripsweep run` works with no argument.
pub const DEFAULT_SCENARIO: &str = include_str!("../../scenarios/default.toml");
pub const DEFAULT_SCENARIO_NAME: &str = "scenarios/default.toml";

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ScenarioFile {
    /// A short name for reports.
    pub name: String,
    /// Robot facts TOML, relative to the scenario file (`"embedded:brindle"`: the demo robot
    /// compiled into the binary).
    #[serde(default = "default_robot")]
    pub robot: String,
    /// With a bare URDF as `robot`: the foot links (default: inferred, see `crate::infer`).
    #[serde(default)]
    pub feet: Option<Vec<String>>,
    /// Simulated seconds per cell.
    #[serde(default = "default_duration")]
    pub duration: f64,
    /// Seeds per axis combination (noise and initial-posture jitter differ per seed).
    #[serde(default = "default_seeds")]
    pub seeds: u32,
    #[serde(default)]
    pub gait: GaitFile,
    #[serde(default)]
    pub plant: PlantFile,
    #[serde(default)]
    pub laws: LawsFile,
    #[serde(default)]
    pub axes: AxesFile,
    #[serde(default)]
    pub noise: NoiseFile,
    #[serde(default)]
    pub falls: FallsFile,
    #[serde(default)]
    pub onset: Option<OnsetFile>,
    /// Piped laws declared by the user (`[external.<name>]`, see [`crate::pipe_law`]).
    #[serde(default)]
    pub external: toml::Table,
    /// The world axes' named tables (issue 14; crate::scenario_world).
    #[serde(default)]
    pub terrain: BTreeMap<String, crate::scenario_world::TerrainFile>,
    #[serde(default)]
    pub patch: BTreeMap<String, crate::scenario_world::PatchFile>,
    #[serde(default)]
    pub push: BTreeMap<String, crate::scenario_world::PushFile>,
}

fn default_robot() -> String {
    "embedded:brindle".into()
}
fn default_duration() -> f64 {
    8.0
}
fn default_seeds() -> u32 {
    1
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct GaitFile {
    /// `stand`, `crawl`, `weight-shift` or `trot`.
    #[serde(default = "default_gait_kind")]
    pub kind: String,
    pub step_length: Option<f64>,
    pub swing_height: Option<f64>,
    pub cycle_period: Option<f64>,
    pub body_height: Option<f64>,
    pub margin: Option<f64>,
    /// Crawl: `paced` (shifts as long as `shift_accel` needs) or `even` (the even slot grid).
    pub shifts: Option<String>,
    /// Crawl, paced shifts: peak base acceleration, m/s².
    pub shift_accel: Option<f64>,
    pub amplitude: Option<f64>,
    pub period: Option<f64>,
}

fn default_gait_kind() -> String {
    "crawl".into()
}

impl Default for GaitFile {
    fn default() -> Self {
        GaitFile {
            kind: default_gait_kind(),
            step_length: None,
            swing_height: None,
            cycle_period: None,
            body_height: None,
            margin: None,
            shifts: None,
            shift_accel: None,
            amplitude: None,
            period: None,
        }
    }
}

#[derive(Clone, Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PlantFile {
    pub dt: Option<f64>,
    pub substeps: Option<usize>,
    pub contact_hz: Option<f64>,
    pub contact_damping: Option<f64>,
    pub joint_limits: Option<bool>,
}

/// `[laws]`: `mu_estimate_scale` and one table per registered law (`[laws.<name>]`) with only
/// that law's fields (see [`law_fields`]), optionally per control rate
/// (`[laws.<name>.at_rate.<Hz>]`). Kept as a raw table so that every unknown name is reported
/// with the law's own allowed fields.
pub type LawsFile = toml::Table;

/// The fields `[laws.<name>]` accepts for a law, as the law registry declares them (empty for
/// an unknown law).
pub fn law_fields(law: &str) -> Vec<LawField> {
    registry::with(|r| r.get(law).map(|e| e.fields.clone()).unwrap_or_default())
}

/// Set one validated `[laws.<name>]` field on a law's settings.
fn apply_law_field(fields: &[LawField], set: &mut LawSettings, field: &str, v: f64) {
    if let Some(f) = fields.iter().find(|f| f.name == field) {
        f.apply(set, v);
    }
}

/// One validated `[laws.<name>]` (or `[laws.<name>.at_rate.<Hz>]`) table.
#[derive(Clone, Debug, PartialEq)]
pub struct LawTable {
    pub law: String,
    /// `None`: every rate; `Some(hz)`: that control rate only (applied after the general one).
    pub rate_hz: Option<f64>,
    pub fields: Vec<(String, f64)>,
}

/// The `[axes]` table as written: one field per axis of [`crate::run_format::AXES`] (each
/// optional; an unknown name is refused, naming the axes there are).
pub type AxesFile = toml::Table;

/// Sensor noise standard deviations at `sensor_noise = 1` (scaled by the axis value), and the
/// observation delay.
#[derive(Clone, Debug, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct NoiseFile {
    pub joint_angle: f64,
    pub joint_rate: f64,
    pub base_position: f64,
    pub base_orientation: f64,
    pub base_linear_velocity: f64,
    pub base_angular_velocity: f64,
    /// Observation delay, s (rounded to plant steps).
    pub delay: f64,
}

impl Default for NoiseFile {
    fn default() -> Self {
        NoiseFile {
            joint_angle: 1e-3,
            joint_rate: 0.02,
            base_position: 2e-3,
            base_orientation: 5e-3,
            base_linear_velocity: 0.02,
            base_angular_velocity: 0.02,
            delay: 0.0,
        }
    }
}

#[derive(Clone, Debug, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct FallsFile {
    /// The trunk is down when its height above the ground drops below this share of the
    /// planned body height.
    pub min_height_share: f64,
    /// … or it tilts more than this from the ground normal, degrees.
    pub max_tilt_deg: f64,
}

impl Default for FallsFile {
    fn default() -> Self {
        FallsFile {
            min_height_share: 0.5,
            max_tilt_deg: 45.0,
        }
    }
}

/// The slip-onset study: per group, bisection on the slope angle for the steepest slope held.
#[derive(Clone, Debug, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct OnsetFile {
    pub lo_deg: f64,
    pub hi_deg: f64,
    /// Bisection steps per group.
    pub steps: u32,
    /// Sustained slip: mean stance-phase slip above the floor plus this, mm.
    pub threshold_mm: f64,
}

/// A validated scenario, with defaults filled in.
#[derive(Clone, Debug)]
pub struct Scenario {
    pub source: String,
    pub text: String,
    pub name: String,
    pub robot_path: Option<PathBuf>,
    /// The scenario's `feet` (only with a bare URDF as the robot).
    pub robot_feet: Option<Vec<String>>,
    pub duration: f64,
    pub seeds: u32,
    pub gait: Gait,
    pub body_height: f64,
    pub plant: PlantSettings,
    /// The laws' default settings; a cell's are [`Scenario::law_settings_for`].
    pub laws: LawSettings,
    pub mu_estimate_scale: f64,
    /// The validated `[laws.<name>]` tables, in file order (general before per-rate).
    pub law_tables: Vec<LawTable>,
    /// Gains found by the tuner (or read from a tuning table), by [`gain_key`]; a cell whose
    /// key is here runs with these settings.
    pub tuned: BTreeMap<String, LawSettings>,
    /// True when `gait.body_height` was derived from the robot's nominal posture.
    pub body_height_derived: bool,
    pub axes: Axes,
    pub noise: NoiseFile,
    pub falls: FallsFile,
    pub onset: Option<OnsetFile>,
    /// Piped laws declared in `[external.<name>]`, each with its pool of child processes
    /// (shared by clones; the children leave when the last clone is dropped).
    pub external: Vec<std::sync::Arc<crate::pipe_law::ExternalLaw>>,
    /// The `[terrain.<name>]`, `[patch.<name>]`, `[push.<name>]` tables.
    pub world: crate::scenario_world::WorldTables,
}

/// The resolved axes: per axis of [`crate::run_format::AXES`], in table order, its values.
#[derive(Clone, Debug, PartialEq)]
pub struct Axes {
    pub values: Vec<Vec<AxisValue>>,
}

/// A scenario problem: message names the file and field.
#[derive(Clone, Debug, PartialEq)]
pub struct ScenarioError(pub String);

impl std::fmt::Display for ScenarioError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

impl Scenario {
    /// Read and validate a scenario file.
    pub fn from_file(path: &Path) -> Result<Scenario, ScenarioError> {
        let text = crate::limits::read_text_bounded(
            path,
            crate::limits::MAX_SCENARIO_BYTES,
            "the scenario file",
        )
        .map_err(ScenarioError)?;
        Self::from_text(&path.display().to_string(), &text, path.parent())
    }

    /// The embedded default scenario.
    pub fn default_embedded() -> Result<Scenario, ScenarioError> {
        let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("scenarios");
        Self::from_text(DEFAULT_SCENARIO_NAME, DEFAULT_SCENARIO, Some(&dir))
    }

    pub fn from_text(
        source: &str,
        text: &str,
        dir: Option<&Path>,
    ) -> Result<Scenario, ScenarioError> {
        crate::limits::check_toml_depth(text)
            .map_err(|e| ScenarioError(format!("{source}: {e}")))?;
        let file: ScenarioFile = toml::from_str(text)
            .map_err(|e| ScenarioError(format!("{source}: {}", e.to_string().trim_end())))?;
        let fail =
            |field: &str, msg: String| ScenarioError(format!("{source}: field `{field}`: {msg}"));
        if file.name.trim().is_empty() {
            return Err(fail("name", "must not be empty".into()));
        }
        let robot_path = if file.robot == "embedded:brindle" {
            None
        } else {
            let p = dir.unwrap_or(Path::new(".")).join(&file.robot);
            if !p.is_file() {
                return Err(fail(
                    "robot",
                    format!(
                        "robot file {} does not exist (a robot facts .toml or a bare .urdf, relative to the scenario file, or \"embedded:brindle\")",
                        p.display()
                    ),
                ));
            }
            Some(p)
        };
        if file.feet.is_some()
            && !robot_path
                .as_deref()
                .is_some_and(crate::infer::is_urdf_path)
        {
            return Err(fail(
                "feet",
                "names foot links only when `robot` is a bare URDF (.urdf); a robot facts file names its feet in `feet.frames`".into(),
            ));
        }
        if !(file.duration.is_finite() && file.duration > 0.0 && file.duration <= 600.0) {
            return Err(fail(
                "duration",
                format!("{} s: allowed: 0 < duration ≤ 600 s", file.duration),
            ));
        }
        if file.seeds == 0 || file.seeds > MAX_SEEDS {
            return Err(fail(
                "seeds",
                format!("{}: allowed: 1 to {MAX_SEEDS}", file.seeds),
            ));
        }

        let mut plant = PlantSettings::default();
        let p = &file.plant;
        if let Some(dt) = p.dt {
            if !(dt.is_finite() && (MIN_DT..=1e-3).contains(&dt)) {
                return Err(fail(
                    "plant.dt",
                    format!("{dt} s: allowed: {MIN_DT} s ≤ dt ≤ 0.001 s"),
                ));
            }
            plant.dt = dt;
        }
        if let Some(s) = p.substeps {
            if !(1..=32).contains(&s) {
                return Err(fail("plant.substeps", format!("{s}: allowed: 1 to 32")));
            }
            plant.substeps = s;
        }
        if let Some(hz) = p.contact_hz {
            if !(hz.is_finite() && hz > 0.0 && hz <= 1e5) {
                return Err(fail(
                    "plant.contact_hz",
                    format!("{hz}: allowed: a frequency > 0 and ≤ 100000 Hz"),
                ));
            }
            plant.contact_hz = hz;
        }
        if let Some(z) = p.contact_damping {
            if !(z.is_finite() && z > 0.0 && z <= 100.0) {
                return Err(fail(
                    "plant.contact_damping",
                    format!("{z}: allowed: a damping ratio > 0 and ≤ 100"),
                ));
            }
            plant.contact_damping = z;
        }
        if let Some(l) = p.joint_limits {
            plant.joint_limits = l;
        }

        let g = &file.gait;
        // Gait lengths (m) and periods (s): > 0 and at most MAX_GAIT_NUMBER, far beyond any
        // legged robot, so the planner's arithmetic stays finite.
        let positive_gait =
            |field: &str, v: Option<f64>, default: f64| -> Result<f64, ScenarioError> {
                let v = v.unwrap_or(default);
                if v.is_finite() && v > 0.0 && v <= MAX_GAIT_NUMBER {
                    Ok(v)
                } else {
                    Err(fail(
                        field,
                        format!("{v}: allowed: a number > 0 and ≤ {MAX_GAIT_NUMBER}"),
                    ))
                }
            };
        // Geometry defaults come from the robot's nominal stance height h, never from the demo
        // robot: body height h; step h/5, swing height h/6, weight-shift amplitude h/10 (for a
        // 0.30 m stance these are the values the demo study was built with: 0.06, 0.05,
        // 0.03 m). The crawl's margin, when not given, the planner derives from the robot's
        // support triangles (planner::CRAWL_MARGIN_SHARE).
        let needs_robot = g.body_height.is_none()
            || g.step_length.is_none()
            || g.swing_height.is_none()
            || g.amplitude.is_none();
        let h_nom = if needs_robot {
            let robot = match &robot_path {
                None => LoadedRobot::demo(),
                Some(p) => LoadedRobot::from_file(p, file.feet.as_deref()),
            }
            .map_err(|e| fail("robot", e))?;
            let h = robot.nominal_stance().height;
            if !(h.is_finite() && h > 0.0) {
                return Err(fail(
                    "gait.body_height",
                    format!(
                        "not given, and the robot's nominal posture puts the feet {:.3} m above the base frame, so no stance height can be derived; set it",
                        -h
                    ),
                ));
            }
            h
        } else {
            f64::NAN
        };
        let body_height_derived = g.body_height.is_none();
        let body_height = positive_gait("gait.body_height", g.body_height, h_nom)?;
        let gait = match g.kind.as_str() {
            "stand" => Gait::Stand,
            "crawl" => Gait::Crawl {
                step_length: positive_gait("gait.step_length", g.step_length, h_nom / 5.0)?,
                swing_height: positive_gait("gait.swing_height", g.swing_height, h_nom / 6.0)?,
                cycle_period: positive_gait("gait.cycle_period", g.cycle_period, 3.2)?,
                body_height,
                margin: match g.margin {
                    Some(m) => Some(positive_gait("gait.margin", Some(m), m)?),
                    None => None,
                },
                shift_accel: match g.shifts.as_deref().unwrap_or("paced") {
                    "paced" => Some(positive_gait(
                        "gait.shift_accel",
                        g.shift_accel,
                        crate::planner::DEFAULT_SHIFT_ACCEL,
                    )?),
                    "even" => {
                        if g.shift_accel.is_some() {
                            return Err(fail(
                                "gait.shift_accel",
                                "given with shifts = \"even\": allowed only with shifts = \"paced\"".into(),
                            ));
                        }
                        None
                    }
                    other => {
                        return Err(fail(
                            "gait.shifts",
                            format!("'{other}': allowed: paced, even"),
                        ));
                    }
                },
            },
            "weight-shift" => Gait::WeightShift {
                amplitude: positive_gait("gait.amplitude", g.amplitude, h_nom / 10.0)?,
                period: positive_gait("gait.period", g.period, 2.0)?,
                body_height,
            },
            "trot" => Gait::Trot {
                step_length: positive_gait("gait.step_length", g.step_length, h_nom / 5.0)?,
                swing_height: positive_gait("gait.swing_height", g.swing_height, h_nom / 6.0)?,
                cycle_period: positive_gait("gait.cycle_period", g.cycle_period, 0.6)?,
                body_height,
            },
            other => {
                return Err(fail(
                    "gait.kind",
                    format!("'{other}': allowed: stand, crawl, weight-shift, trot"),
                ));
            }
        };

        // Piped laws (`[external.<name>]`) join the built-in names for `axes.controller`.
        let external = crate::pipe_law::parse_external(
            &file.external,
            dir.unwrap_or(Path::new(".")),
            &law_names().iter().map(String::as_str).collect::<Vec<_>>(),
        )
        .map_err(|(field, msg)| fail(&field, msg))?;
        let registered = law_names();
        let mut law_list: Vec<&str> = registered.iter().map(String::as_str).collect();
        law_list.extend(external.iter().map(|e| e.name));
        // Former law names are accepted (with a notice) and stand for the law's current name;
        // a name neither registered nor declared says how to bring one.
        let mut axes_table = file.axes.clone();
        if let Some(toml::Value::Array(items)) = axes_table.get_mut("controller") {
            for item in items.iter_mut() {
                let toml::Value::String(c) = item else {
                    continue;
                };
                if external.iter().any(|e| e.name == c.as_str()) {
                    continue;
                }
                match registry::resolve(c) {
                    Some(canonical) => *c = canonical,
                    None => {
                        return Err(fail(
                            "axes.controller",
                            format!(
                                "unknown controller '{c}'; allowed: {}. To bring your own, implement the ControlLaw trait in a crate that depends on gripsweep and register it (README, \"Bringing your own controller\"), or serve a program in any language over a pipe: declare it in an [external.<name>] table",
                                law_list.join(", ")
                            ),
                        ));
                    }
                }
            }
        }
        let actuator_list: Vec<&str> = ActuatorKind::ALL.iter().map(|k| k.name()).collect();
        let world = crate::scenario_world::parse_tables(&file.terrain, &file.patch, &file.push)
            .map_err(|(field, msg)| fail(&field, msg))?;
        let [terrains, patches, pushes] = world.names();
        let axis_ctx = AxisContext {
            plant_rate_hz: 1.0 / plant.dt,
            laws: &law_list,
            actuators: &actuator_list,
            terrains: &terrains,
            patches: &patches,
            pushes: &pushes,
        };
        let mut axes =
            parse_axes(&axes_table, &axis_ctx).map_err(|(field, msg)| fail(&field, msg))?;
        world
            .check_axes(&axes.names("terrain"), &axes.names("patch"))
            .map_err(|(field, msg)| fail(&field, msg))?;
        let rate_hz = axes.numbers("rate_hz");
        let controller = axes.names("controller");
        // The shortest cell: control steps at the slowest rate and stance phases to average.
        let slowest = rate_hz.iter().copied().fold(f64::INFINITY, f64::min);
        let min_duration = MIN_DURATION_S.max(10.0 / slowest);
        if file.duration < min_duration {
            return Err(fail(
                "duration",
                format!(
                    "{} s: allowed: at least {min_duration} s (the larger of {MIN_DURATION_S} s and ten control periods at the slowest rate of `axes.rate_hz`, {slowest} Hz)",
                    file.duration
                ),
            ));
        }
        if file.duration / plant.dt > MAX_STEPS_PER_CELL {
            return Err(fail(
                "duration",
                format!(
                    "{} s at plant.dt = {} s is {:.0} plant steps per cell: allowed: at most {MAX_STEPS_PER_CELL} (shorten the duration or lengthen plant.dt)",
                    file.duration,
                    plant.dt,
                    file.duration / plant.dt
                ),
            ));
        }
        let laws = LawSettings::default();
        let (mu_estimate_scale, law_tables) = parse_law_tables(&file.laws, &controller, &rate_hz)
            .map_err(|(field, msg)| fail(&field, msg))?;
        // `laws.mu_estimate_scale` (one value for the whole run) is the default of the
        // `mu_estimate_scale` axis; giving both is ambiguous.
        if mu_estimate_scale != 1.0 {
            if file.axes.contains_key("mu_estimate_scale") {
                return Err(fail(
                    "axes.mu_estimate_scale",
                    "given both here and as `laws.mu_estimate_scale`; give it in one place".into(),
                ));
            }
            axes.values[axis("mu_estimate_scale")] = vec![AxisValue::Number(mu_estimate_scale)];
        }
        let n = &file.noise;
        for (field, v) in [
            ("noise.joint_angle", n.joint_angle),
            ("noise.joint_rate", n.joint_rate),
            ("noise.base_position", n.base_position),
            ("noise.base_orientation", n.base_orientation),
            ("noise.base_linear_velocity", n.base_linear_velocity),
            ("noise.base_angular_velocity", n.base_angular_velocity),
        ] {
            if !(v.is_finite() && (0.0..=MAX_NOISE_STD).contains(&v)) {
                return Err(fail(
                    field,
                    format!("{v}: allowed: a number from 0 to {MAX_NOISE_STD}"),
                ));
            }
        }
        // The observation delay keeps one past state per plant step in a ring.
        if !(n.delay.is_finite()
            && (0.0..=MAX_DELAY_S).contains(&n.delay)
            && n.delay / plant.dt <= MAX_DELAY_STEPS)
        {
            return Err(fail(
                "noise.delay",
                format!(
                    "{} s: allowed: 0 to {MAX_DELAY_S} s and at most {MAX_DELAY_STEPS} plant steps of plant.dt = {} s",
                    n.delay, plant.dt
                ),
            ));
        }
        let f = &file.falls;
        if !(f.min_height_share.is_finite() && f.min_height_share > 0.0 && f.min_height_share < 1.0)
        {
            return Err(fail(
                "falls.min_height_share",
                format!("{}: allowed: 0 < share < 1", f.min_height_share),
            ));
        }
        if !(f.max_tilt_deg.is_finite() && f.max_tilt_deg > 0.0 && f.max_tilt_deg <= 90.0) {
            return Err(fail(
                "falls.max_tilt_deg",
                format!("{}: allowed: 0 < tilt ≤ 90", f.max_tilt_deg),
            ));
        }
        if let Some(o) = &file.onset {
            if !(o.lo_deg.is_finite()
                && o.hi_deg.is_finite()
                && 0.0 <= o.lo_deg
                && o.lo_deg < o.hi_deg
                && o.hi_deg < 60.0)
            {
                return Err(fail(
                    "onset.lo_deg",
                    format!(
                        "[{}, {}]: allowed: 0 ≤ lo_deg < hi_deg < 60",
                        o.lo_deg, o.hi_deg
                    ),
                ));
            }
            if !(1..=12).contains(&o.steps) {
                return Err(fail(
                    "onset.steps",
                    format!("{}: allowed: 1 to 12", o.steps),
                ));
            }
            if !(o.threshold_mm.is_finite() && o.threshold_mm > 0.0 && o.threshold_mm <= 1e6) {
                return Err(fail(
                    "onset.threshold_mm",
                    format!("{}: allowed: > 0 and ≤ 1000000 mm", o.threshold_mm),
                ));
            }
        }
        // The matrix size, with overflow checks: a product that wraps would give 0 cells.
        let lens: Vec<(&str, usize)> = AXES
            .iter()
            .zip(&axes.values)
            .map(|(ax, v)| (ax.name, v.len()))
            .chain([("seeds", file.seeds as usize)])
            .collect();
        let count = lens
            .iter()
            .try_fold(1usize, |n, (_, l)| n.checked_mul(*l))
            .filter(|n| *n <= MAX_CELLS);
        if count.is_none() {
            let product: f64 = lens.iter().map(|(_, l)| *l as f64).product();
            return Err(fail(
                "axes",
                format!(
                    "the matrix has {product:.0} cells ({}): allowed: at most {MAX_CELLS}",
                    lens.iter()
                        .map(|(n, l)| format!("{l} {n}"))
                        .collect::<Vec<_>>()
                        .join(" × ")
                ),
            ));
        }
        Ok(Scenario {
            source: source.to_string(),
            text: text.to_string(),
            name: file.name.clone(),
            robot_path,
            robot_feet: file.feet.clone(),
            duration: file.duration,
            seeds: file.seeds,
            gait,
            body_height,
            plant,
            laws,
            mu_estimate_scale,
            law_tables,
            tuned: BTreeMap::new(),
            body_height_derived,
            axes,
            noise: file.noise.clone(),
            falls: file.falls.clone(),
            onset: file.onset.clone(),
            external,
            world,
        })
    }

    /// Load the scenario's robot. Says once on stderr what a user must know about it: collision
    /// meshes left out, facts inferred from a bare URDF.
    pub fn load_robot(&self) -> Result<LoadedRobot, String> {
        let robot = self.load_robot_quietly()?;
        if let Some(w) = robot.mesh_warning() {
            eprintln!("gripsweep: warning: {w}");
        }
        if robot.inferred_facts {
            eprintln!(
                "gripsweep: {}: a bare URDF; its robot facts are inferred (`gripsweep robot {} --draft-facts` prints them to save and edit)",
                robot.urdf_source, robot.urdf_source
            );
        }
        Ok(robot)
    }

    /// [`Scenario::load_robot`] without the messages.
    pub fn load_robot_quietly(&self) -> Result<LoadedRobot, String> {
        match &self.robot_path {
            None => LoadedRobot::demo(),
            Some(p) => LoadedRobot::from_file(p, self.robot_feet.as_deref())
                .map_err(|e| format!("{}: field `robot`: {e}", self.source)),
        }
    }

    /// Build the plan on every slope of the matrix, so a gait that does not fit (too short a
    /// duration, a step out of reach on a steep slope) is reported before anything runs.
    pub fn check_plans(&self, robot: &LoadedRobot) -> Result<(), ScenarioError> {
        for deg in self.axes.numbers("slope_deg") {
            let slope = crate::plant::terrain::Slope::degrees(deg);
            crate::planner::Plan::build(
                &robot.model,
                &robot.facts,
                &slope,
                &self.gait,
                self.duration,
            )
            .map_err(|e| {
                // The planner's message names the cause (a gait field, or the robot's foot,
                // instant and joint) and the setting that would help; the robot file is named
                // here so a cause in the robot is not taken for one in the scenario.
                ScenarioError(format!(
                    "{}: the plan for robot {} on the {deg}° slope of `axes.slope_deg`: {e}",
                    self.source, robot.source
                ))
            })?;
            // Every heading of `axes.heading_deg` too (the plan walks across the slope).
            for psi in self
                .axes
                .numbers("heading_deg")
                .into_iter()
                .filter(|&h| h != 0.0)
            {
                let ground = crate::plant::world::Ground::plane(deg, psi);
                crate::planner::Plan::build(
                    &robot.model,
                    &robot.facts,
                    &ground,
                    &self.gait,
                    self.duration,
                )
                .map_err(|e| {
                    ScenarioError(format!(
                        "{}: fields `gait` and `duration` on the {deg}° slope at heading {psi}° of `axes.heading_deg`: {e}",
                        self.source
                    ))
                })?;
            }
        }
        Ok(())
    }

    /// Number of cells of the matrix (validation bounds it by [`crate::limits::MAX_CELLS`]).
    pub fn cell_count(&self) -> usize {
        self.axes.len_product(self.seeds).unwrap_or(usize::MAX)
    }
}

impl Axes {
    /// The values of a number axis, by its table name.
    pub fn numbers(&self, name: &str) -> Vec<f64> {
        self.values[axis(name)]
            .iter()
            .filter_map(AxisValue::number)
            .collect()
    }

    /// The values of a name axis, by its table name.
    pub fn names(&self, name: &str) -> Vec<String> {
        self.values[axis(name)]
            .iter()
            .filter_map(|v| v.name().map(String::from))
            .collect()
    }

    /// The actuator models of the matrix (names validated against [`ActuatorKind`]).
    pub fn actuators(&self) -> Vec<ActuatorKind> {
        self.names("actuator")
            .iter()
            .filter_map(|n| ActuatorKind::parse(n))
            .collect()
    }

    /// The same axes with one axis's values replaced (by its table name).
    pub fn with(mut self, name: &str, values: Vec<AxisValue>) -> Axes {
        self.values[axis(name)] = values;
        self
    }

    /// The number of cells these axes give with `seeds` seeds; `None` on overflow.
    pub fn len_product(&self, seeds: u32) -> Option<usize> {
        self.values
            .iter()
            .map(Vec::len)
            .chain([seeds as usize])
            .try_fold(1usize, |n, l| n.checked_mul(l))
    }
}

/// Read and validate `[axes]` against the axis table: every field a known axis, every value of
/// the axis's kind and allowed by its check, at most [`MAX_AXIS_VALUES`] values, none twice;
/// a field left out takes the axis's default. Errors are (field, message).
pub fn parse_axes(table: &AxesFile, ctx: &AxisContext) -> Result<Axes, (String, String)> {
    for name in table.keys() {
        if !AXES.iter().any(|a| a.name == name) {
            let known: Vec<&str> = AXES.iter().map(|a| a.name).collect();
            return Err((
                format!("axes.{name}"),
                format!("unknown axis; allowed: {}", known.join(", ")),
            ));
        }
    }
    let mut values = Vec::with_capacity(AXES.len());
    for a in AXES {
        let field = a.field();
        let fail = |msg: String| (field.clone(), msg);
        let v: Vec<AxisValue> = match table.get(a.name) {
            None => (a.default)(ctx),
            Some(toml::Value::Array(items)) => items
                .iter()
                .enumerate()
                .map(|(i, x)| match (a.kind, x) {
                    (AxisKind::Number, toml::Value::Float(f)) => Ok(AxisValue::Number(*f)),
                    (AxisKind::Number, toml::Value::Integer(n)) => Ok(AxisValue::Number(*n as f64)),
                    (AxisKind::Name, toml::Value::String(n)) => Ok(AxisValue::Name(n.clone())),
                    // A yes/no axis (`patch_known`) is a name axis whose names are the
                    // booleans' text.
                    (AxisKind::Name, toml::Value::Boolean(b)) => Ok(AxisValue::Name(b.to_string())),
                    (AxisKind::Number, _) => {
                        Err(fail(format!("entry {}: expected a number", i + 1)))
                    }
                    (AxisKind::Name, _) => Err(fail(format!("entry {}: expected a name", i + 1))),
                })
                .collect::<Result<_, _>>()?,
            Some(_) => {
                return Err(fail(match a.kind {
                    AxisKind::Number => "expected an array of numbers".into(),
                    AxisKind::Name => "expected an array of names".into(),
                }));
            }
        };
        if v.is_empty() {
            return Err(fail(
                "the axis is empty; give at least one value or leave the field out for its default"
                    .into(),
            ));
        }
        if v.len() > MAX_AXIS_VALUES {
            return Err(fail(format!(
                "{} values: allowed: at most {MAX_AXIS_VALUES}",
                v.len()
            )));
        }
        for (i, x) in v.iter().enumerate() {
            if let Err(allowed) = (a.check)(x, ctx) {
                return Err(fail(match x {
                    AxisValue::Number(n) => {
                        format!("value {n} (entry {}): allowed: {allowed}", i + 1)
                    }
                    AxisValue::Name(n) => format!("unknown {} '{n}'; {allowed}", a.name),
                }));
            }
        }
        match a.kind {
            AxisKind::Number => {
                // Values equal within AXIS_TOLERANCE would run every cell twice. Sorted, so the
                // check is O(n log n); each value is compared with its neighbour.
                let nums: Vec<f64> = v.iter().filter_map(AxisValue::number).collect();
                let mut sorted: Vec<(f64, usize)> = nums.iter().copied().zip(0..).collect();
                sorted.sort_by(|a, b| a.0.total_cmp(&b.0));
                for w in sorted.windows(2) {
                    if same_axis_value(w[0].0, w[1].0) {
                        let (p, q) = (w[0].1.min(w[1].1), w[0].1.max(w[1].1));
                        return Err(fail(format!(
                            "values {} (entry {}) and {} (entry {}) are the same value (equal within a relative {AXIS_TOLERANCE}); give each value once",
                            nums[p],
                            p + 1,
                            nums[q],
                            q + 1
                        )));
                    }
                }
            }
            AxisKind::Name => {
                for (i, x) in v.iter().enumerate() {
                    if v[..i].contains(x) {
                        return Err(fail(format!("'{}' appears twice", x.text())));
                    }
                }
            }
        }
        values.push(v);
    }
    Ok(Axes { values })
}

/// The key of one (law, control rate, actuator) combination in [`Scenario::tuned`].
pub fn gain_key(law: &str, rate_hz: f64, actuator: ActuatorKind) -> String {
    format!("{law}|{rate_hz}|{}", actuator.name())
}

/// Validate `[laws]`: `mu_estimate_scale` and `[laws.<name>]` tables. Errors are (field, message).
fn parse_law_tables(
    table: &toml::Table,
    controllers: &[String],
    rates: &[f64],
) -> Result<(f64, Vec<LawTable>), (String, String)> {
    let mut mu_scale = 1.0;
    let mut out = Vec::new();
    let number = |field: &str, v: &toml::Value| -> Result<f64, (String, String)> {
        match v {
            toml::Value::Float(x) => Ok(*x),
            toml::Value::Integer(i) => Ok(*i as f64),
            _ => Err((field.to_string(), format!("{v}: allowed: a number"))),
        }
    };
    let names = law_names();
    for (key, value) in table {
        // A former law name stands for the law's current name (with a notice).
        let key = &match registry::resolve(key) {
            Some(c) if names.contains(&c) => c,
            _ => key.clone(),
        };
        if key == "mu_estimate_scale" {
            let v = number("laws.mu_estimate_scale", value)?;
            if !(v.is_finite() && v > 0.0) {
                return Err((
                    "laws.mu_estimate_scale".into(),
                    format!("{v}: allowed: a number > 0"),
                ));
            }
            mu_scale = v;
            continue;
        }
        let field = format!("laws.{key}");
        if !names.contains(key) {
            return Err((
                field,
                format!(
                    "unknown field; allowed: mu_estimate_scale and one table per law: {} (a law of your own: README, \"Bringing your own controller\")",
                    names.join(", ")
                ),
            ));
        }
        if !controllers.iter().any(|c| c == key) {
            return Err((
                field,
                format!(
                    "settings for '{key}', which `axes.controller` does not list ({})",
                    controllers.join(", ")
                ),
            ));
        }
        let toml::Value::Table(t) = value else {
            return Err((field, "must be a table ([laws.<name>])".into()));
        };
        let allowed = law_fields(key);
        let fields_of = |prefix: &str, t: &toml::Table, nested: bool| {
            let mut fields = Vec::new();
            for (f, v) in t {
                let fname = format!("{prefix}.{f}");
                if nested && f == "at_rate" {
                    continue;
                }
                let Some(decl) = allowed.iter().find(|d| &d.name == f) else {
                    let mut list: Vec<&str> = allowed.iter().map(|d| d.name.as_str()).collect();
                    if nested {
                        list.push("at_rate");
                    }
                    return Err((
                        fname,
                        format!("unknown field for {key}; allowed: {}", list.join(", ")),
                    ));
                };
                let x = number(&fname, v)?;
                decl.check(x).map_err(|m| (fname.clone(), m))?;
                fields.push((f.clone(), x));
            }
            Ok(fields)
        };
        out.push(LawTable {
            law: key.clone(),
            rate_hz: None,
            fields: fields_of(&field, t, true)?,
        });
        if let Some(at) = t.get("at_rate") {
            let afield = format!("{field}.at_rate");
            let toml::Value::Table(at) = at else {
                return Err((
                    afield,
                    "must be a table of rates ([laws.<name>.at_rate.<Hz>])".into(),
                ));
            };
            for (hz, sub) in at {
                let rfield = format!("{afield}.{hz}");
                let rate: f64 = hz
                    .parse()
                    .map_err(|_| (rfield.clone(), "not a control rate in Hz".to_string()))?;
                if !rates.contains(&rate) {
                    return Err((
                        rfield,
                        format!(
                            "{rate} Hz is not in `axes.rate_hz` ({})",
                            rates
                                .iter()
                                .map(|r| r.to_string())
                                .collect::<Vec<_>>()
                                .join(", ")
                        ),
                    ));
                }
                let toml::Value::Table(sub) = sub else {
                    return Err((rfield, "must be a table".into()));
                };
                out.push(LawTable {
                    law: key.clone(),
                    rate_hz: Some(rate),
                    fields: fields_of(&rfield, sub, false)?,
                });
            }
        }
    }
    Ok((mu_scale, out))
}

impl Scenario {
    /// A law's settings at a control rate before tuning: the defaults, then the law's
    /// `[laws.<name>]` fields, then its `at_rate` fields for this rate.
    pub fn law_base(&self, law: &str, rate_hz: f64) -> LawSettings {
        let (mut set, fields) = registry::with(|r| match r.get(law) {
            Some(e) => (e.with_defaults(&self.laws), e.fields.clone()),
            None => (self.laws.clone(), Vec::new()),
        });
        for pass_rate in [None, Some(rate_hz)] {
            for t in &self.law_tables {
                if t.law == law && t.rate_hz == pass_rate {
                    for (f, v) in &t.fields {
                        apply_law_field(&fields, &mut set, f, *v);
                    }
                }
            }
        }
        set
    }

    /// Whether the scenario pins any feedback gain of this law at this rate (tuning is then
    /// off for it).
    pub fn gains_pinned(&self, law: &str, rate_hz: f64) -> bool {
        // A piped law's gains are its program's own (its `[external.<name>.settings]`).
        if self.external_law(law).is_some() {
            return true;
        }
        let fields = law_fields(law);
        let gains: Vec<&str> = fields
            .iter()
            .filter(|d| d.kind.is_gain())
            .map(|d| d.name.as_str())
            .collect();
        self.law_tables.iter().any(|t| {
            t.law == law
                && t.rate_hz.is_none_or(|r| r == rate_hz)
                && t.fields.iter().any(|(f, _)| gains.contains(&f.as_str()))
        })
    }

    /// The piped law declared under this name, if any.
    pub fn external_law(&self, law: &str) -> Option<&std::sync::Arc<crate::pipe_law::ExternalLaw>> {
        self.external.iter().find(|e| e.name == law)
    }

    /// The settings a cell of this law, rate and actuator runs with: tuned gains when the
    /// tuner (or a reused tuning table) set them, otherwise [`Scenario::law_base`].
    pub fn law_settings_for(&self, law: &str, rate_hz: f64, actuator: ActuatorKind) -> LawSettings {
        self.tuned
            .get(&gain_key(law, rate_hz, actuator))
            .cloned()
            .unwrap_or_else(|| self.law_base(law, rate_hz))
    }
}
