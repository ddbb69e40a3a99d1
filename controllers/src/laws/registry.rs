//! The law registry: every law the harness can run, by name, with its builder and the fields its
//! `[laws.<name>]` settings table accepts. It starts as the built-in set ([`Registry::builtin`]);
//! a user's crate adds its own laws to a copy and hands it to the command-line front end
//! (`gripsweep::cli::main_with`), which installs it as the process's registry
//! ([`install`]); a law whose name only a scenario file knows (e.g. one served by another
//! program) is added at run time with [`register`] or [`register_or_replace`]. Names are unique
//! across laws and aliases; the check runs on every addition, so a clash is reported at
//! startup, naming both.

use super::{ControlLaw, LawSettings};
use crate::model::Model;
use std::collections::BTreeSet;
use std::sync::{Arc, Mutex, OnceLock, RwLock};

/// Builds a law: its own model of the robot (which may differ from the plant's), the frame
/// indices of the feet, the settings (the scenario's and the law's own `[laws.<name>]` fields,
/// see [`LawSettings::field`]). An `Err` ends the cell with status `error` and this message.
pub type LawBuilder = Arc<
    dyn Fn(Model, Vec<usize>, &LawSettings) -> Result<Box<dyn ControlLaw>, String> + Send + Sync,
>;

/// What a settings field is, for the tuner (which scales every feedback gain of a law by one
/// gain scale s: stiffnesses × s, dampings × √s) and for the scenario checker.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FieldKind {
    /// A position feedback gain (× s under tuning).
    Stiffness,
    /// A velocity feedback gain (× √s under tuning).
    Damping,
    /// Any other setting (weights, margins, limits): never tuned.
    Other,
}

impl FieldKind {
    pub fn is_gain(self) -> bool {
        self != FieldKind::Other
    }
}

/// Where a field's value goes.
#[derive(Clone, Copy)]
pub enum FieldSlot {
    /// A field of the shared [`LawSettings`] struct (the built-in laws' settings).
    Shared(fn(&mut LawSettings, f64)),
    /// The law's own field: stored in [`LawSettings::extra`] under its name, the default
    /// there until the scenario sets it.
    Own,
}

/// One field of a `[laws.<name>]` table.
#[derive(Clone)]
pub struct LawField {
    pub name: String,
    pub kind: FieldKind,
    /// Whether 0 is allowed (every value must be finite and > 0 otherwise).
    pub zero_ok: bool,
    /// An exclusive upper bound, if any.
    pub below: Option<f64>,
    /// The value when the scenario does not set it (own fields; shared fields take
    /// [`LawSettings::default`]'s).
    pub default: f64,
    pub slot: FieldSlot,
}

impl LawField {
    /// A law's own field with its default (> 0 required unless [`LawField::zero_ok`]).
    pub fn own(name: &str, kind: FieldKind, default: f64) -> Self {
        LawField {
            name: name.to_string(),
            kind,
            zero_ok: false,
            below: None,
            default,
            slot: FieldSlot::Own,
        }
    }
    /// Allow 0.
    pub fn zero_ok(mut self) -> Self {
        self.zero_ok = true;
        self
    }
    /// Values must stay below `bound`.
    pub fn below(mut self, bound: f64) -> Self {
        self.below = Some(bound);
        self
    }
    fn shared(name: &str, kind: FieldKind, zero_ok: bool, set: fn(&mut LawSettings, f64)) -> Self {
        LawField {
            name: name.to_string(),
            kind,
            zero_ok,
            below: None,
            default: f64::NAN,
            slot: FieldSlot::Shared(set),
        }
    }

    /// Whether `v` is an allowed value; `Err` says what is allowed.
    pub fn check(&self, v: f64) -> Result<(), String> {
        let ok = v.is_finite() && (v > 0.0 || (self.zero_ok && v == 0.0));
        if !ok {
            return Err(format!(
                "{v}: allowed: a number {}",
                if self.zero_ok { "≥ 0" } else { "> 0" }
            ));
        }
        if let Some(b) = self.below
            && v >= b
        {
            return Err(format!("{v}: allowed: 0 ≤ {} < {b}", self.name));
        }
        Ok(())
    }

    /// Set this field's value on a law's settings.
    pub fn apply(&self, set: &mut LawSettings, v: f64) {
        match self.slot {
            FieldSlot::Shared(f) => f(set, v),
            FieldSlot::Own => {
                set.extra.insert(self.name.clone(), v);
            }
        }
    }
}

/// One registered law.
#[derive(Clone)]
pub struct LawEntry {
    pub name: String,
    /// One line for `gripsweep check` and error messages.
    pub summary: String,
    pub fields: Vec<LawField>,
    pub builder: LawBuilder,
    /// Added at run time (e.g. from a scenario file): may be replaced by
    /// [`register_or_replace`].
    pub runtime: bool,
}

impl LawEntry {
    /// A law with no settings fields of its own.
    pub fn new<F>(name: &str, summary: &str, builder: F) -> Self
    where
        F: Fn(Model, Vec<usize>, &LawSettings) -> Result<Box<dyn ControlLaw>, String>
            + Send
            + Sync
            + 'static,
    {
        LawEntry {
            name: name.to_string(),
            summary: summary.to_string(),
            fields: Vec::new(),
            builder: Arc::new(builder),
            runtime: false,
        }
    }
    /// Add a `[laws.<name>]` field.
    pub fn field(mut self, f: LawField) -> Self {
        self.fields.push(f);
        self
    }
    /// Mark as registered at run time.
    pub fn at_run_time(mut self) -> Self {
        self.runtime = true;
        self
    }
    /// Settings with this law's own fields at their defaults (before the scenario's tables).
    pub fn with_defaults(&self, base: &LawSettings) -> LawSettings {
        let mut s = base.clone();
        for f in &self.fields {
            if matches!(f.slot, FieldSlot::Own) {
                s.extra.insert(f.name.clone(), f.default);
            }
        }
        s
    }
}

/// The laws by name, plus the names the built-in laws had before (accepted for one release,
/// with a notice).
#[derive(Clone)]
pub struct Registry {
    laws: Vec<LawEntry>,
    aliases: Vec<(String, String)>,
}

/// A name is a short lowercase word of letters, digits and dashes (it appears in cell ids,
/// file names and command lines).
fn valid_name(name: &str) -> bool {
    !name.is_empty()
        && name.len() <= 40
        && name
            .chars()
            .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '-')
        && name.starts_with(|c: char| c.is_ascii_lowercase())
}

impl Registry {
    /// No laws at all.
    pub fn empty() -> Self {
        Registry {
            laws: Vec::new(),
            aliases: Vec::new(),
        }
    }

    /// The built-in laws and their former names.
    pub fn builtin() -> Self {
        use super::cone_program::ConeProgram;
        use super::force_cost_id::ForceCostId;
        use super::min_torque_id::MinTorqueId;
        use super::stiff_pd::StiffPd;
        use FieldKind::{Damping, Other, Stiffness};
        let sh = LawField::shared;
        let id_gains = || {
            vec![
                sh("task_kp", Stiffness, true, |s, v| {
                    s.base_kp = v;
                    s.orient_kp = v;
                    s.posture_kp = v;
                }),
                sh("task_kd", Damping, true, |s, v| {
                    s.base_kd = v;
                    s.orient_kd = v;
                    s.posture_kd = v;
                }),
                sh("joint_kp", Stiffness, true, |s, v| s.joint_kp = v),
                sh("joint_kd", Damping, true, |s, v| s.joint_kd = v),
            ]
        };
        let weights = || {
            vec![
                sh("tangent_weight", Other, false, |s, v| s.tangent_weight = v),
                sh("normal_weight", Other, true, |s, v| s.normal_weight = v),
                sh("torque_weight", Other, false, |s, v| s.torque_weight = v),
            ]
        };
        let load = || {
            sh("load_floor_share", Other, false, |s, v| {
                s.load_floor_share = v
            })
        };
        let entry = |name: &str,
                     summary: &str,
                     b: fn(Model, Vec<usize>, &LawSettings) -> Box<dyn ControlLaw>,
                     fields: Vec<LawField>| {
            let mut e = LawEntry::new(name, summary, move |m, f, s| Ok(b(m, f, s)));
            e.fields = fields;
            e
        };
        let mut reg = Registry::empty();
        let laws = [
            entry(
                StiffPd::NAME,
                "high-gain joint PD on the planned joint trajectory (no model)",
                StiffPd::boxed,
                vec![
                    sh("kp", Stiffness, false, |s, v| s.stiff_kp = v),
                    sh("kd", Damping, true, |s, v| s.stiff_kd = v),
                ],
            ),
            entry(
                MinTorqueId::NAME,
                "minimum-torque inverse dynamics (orthogonal decomposition)",
                MinTorqueId::boxed,
                id_gains(),
            ),
            entry(
                ForceCostId::NAME,
                "contact-force-cost inverse dynamics, the same weights at every foot",
                ForceCostId::boxed_published,
                [id_gains(), weights()].concat(),
            ),
            entry(
                ForceCostId::NAME_LOAD,
                "contact-force-cost inverse dynamics, tangential weights normalised by each foot's load",
                ForceCostId::boxed_load_normalised,
                [id_gains(), weights(), vec![load()]].concat(),
            ),
            entry(
                ConeProgram::NAME,
                "friction-cone program: forces as deep inside the cones as the motion allows",
                ConeProgram::boxed,
                [
                    id_gains(),
                    weights(),
                    vec![
                        load(),
                        sh("cone_margin", Other, true, |s, v| s.cone_margin = v).below(1.0),
                        sh("min_normal_force", Other, true, |s, v| {
                            s.min_normal_force = v
                        }),
                    ],
                ]
                .concat(),
            ),
        ];
        for l in laws {
            reg.add(l).expect("built-in names are unique");
        }
        for (old, new) in [
            ("id-lean", MinTorqueId::NAME),
            ("id-grip", ForceCostId::NAME),
            ("id-grip-load", ForceCostId::NAME_LOAD),
            ("cone-margin", ConeProgram::NAME),
        ] {
            reg.alias(old, new).expect("built-in aliases are unique");
        }
        reg
    }

    /// Add a law; its name must be new (not a law's, not an alias) and a valid name, and its
    /// field names unique.
    pub fn add(&mut self, entry: LawEntry) -> Result<(), String> {
        self.check_new(&entry)?;
        self.laws.push(entry);
        Ok(())
    }

    /// Add a law, or replace one added at run time under the same name.
    pub fn add_or_replace(&mut self, entry: LawEntry) -> Result<(), String> {
        if let Some(i) = self.laws.iter().position(|l| l.name == entry.name) {
            if !self.laws[i].runtime {
                return Err(format!(
                    "controller name '{}' is taken by a built-in or registered law",
                    entry.name
                ));
            }
            self.laws.remove(i);
        }
        self.add(entry)
    }

    fn check_new(&self, entry: &LawEntry) -> Result<(), String> {
        let name = &entry.name;
        if !valid_name(name) {
            return Err(format!(
                "controller name '{name}': allowed: lowercase letters, digits and '-', starting with a letter, at most 40 characters"
            ));
        }
        if self.laws.iter().any(|l| &l.name == name) {
            return Err(format!("controller name '{name}' is registered twice"));
        }
        if let Some((_, new)) = self.aliases.iter().find(|(old, _)| old == name) {
            return Err(format!(
                "controller name '{name}' is the former name of '{new}' (still accepted for it); choose another"
            ));
        }
        let mut seen = BTreeSet::new();
        for f in &entry.fields {
            if !seen.insert(f.name.as_str()) || f.name == "at_rate" {
                return Err(format!(
                    "controller '{name}': settings field '{}' is declared twice or reserved",
                    f.name
                ));
            }
            if matches!(f.slot, FieldSlot::Own)
                && let Err(e) = f.check(f.default)
            {
                return Err(format!(
                    "controller '{name}': the default of field '{}' is not allowed: {e}",
                    f.name
                ));
            }
        }
        Ok(())
    }

    /// Accept `old` as another name of the law `new`.
    pub fn alias(&mut self, old: &str, new: &str) -> Result<(), String> {
        if self.laws.iter().any(|l| l.name == old) || self.aliases.iter().any(|(o, _)| o == old) {
            return Err(format!("controller name '{old}' is registered twice"));
        }
        if !self.laws.iter().any(|l| l.name == new) {
            return Err(format!("alias '{old}' names an unknown controller '{new}'"));
        }
        self.aliases.push((old.to_string(), new.to_string()));
        Ok(())
    }

    pub fn names(&self) -> Vec<String> {
        self.laws.iter().map(|l| l.name.clone()).collect()
    }

    pub fn entries(&self) -> &[LawEntry] {
        &self.laws
    }

    /// The law of this name (not an alias).
    pub fn get(&self, name: &str) -> Option<&LawEntry> {
        self.laws.iter().find(|l| l.name == name)
    }

    /// The current name for `name`: itself if a law has it, the new name if it is an alias.
    pub fn canonical(&self, name: &str) -> Option<&str> {
        if let Some(l) = self.get(name) {
            return Some(&l.name);
        }
        self.aliases
            .iter()
            .find(|(o, _)| o == name)
            .map(|(_, n)| n.as_str())
    }

    /// The former names, (old, new).
    pub fn aliases(&self) -> &[(String, String)] {
        &self.aliases
    }

    /// The message for a name no law has.
    pub fn unknown(&self, name: &str) -> String {
        format!(
            "unknown controller '{name}'; allowed: {}. To bring your own, implement the \
             ControlLaw trait in a crate that depends on gripsweep and register it \
             (README, \"Bringing your own controller\")",
            self.names().join(", ")
        )
    }

    /// Build a law by its name (or a former name).
    pub fn build(
        &self,
        name: &str,
        model: Model,
        feet: Vec<usize>,
        settings: &LawSettings,
    ) -> Result<Box<dyn ControlLaw>, String> {
        let canonical = self.canonical(name).ok_or_else(|| self.unknown(name))?;
        let entry = self.get(canonical).ok_or_else(|| self.unknown(name))?;
        (entry.builder)(model, feet, settings)
    }
}

fn active() -> &'static RwLock<Registry> {
    static ACTIVE: OnceLock<RwLock<Registry>> = OnceLock::new();
    ACTIVE.get_or_init(|| RwLock::new(Registry::builtin()))
}

/// Read the process's registry.
pub fn with<R>(f: impl FnOnce(&Registry) -> R) -> R {
    let guard = active().read().unwrap_or_else(|e| e.into_inner());
    f(&guard)
}

/// Make `registry` the process's registry (the command-line front end does this once at
/// startup).
pub fn install(registry: Registry) {
    let mut guard = active().write().unwrap_or_else(|e| e.into_inner());
    *guard = registry;
}

/// Add a law to the process's registry at run time (names unique).
pub fn register(entry: LawEntry) -> Result<(), String> {
    let mut guard = active().write().unwrap_or_else(|e| e.into_inner());
    guard.add(entry)
}

/// Add a law at run time, replacing one registered at run time under the same name (e.g. the
/// same scenario read twice); never replaces a built-in or user law.
pub fn register_or_replace(entry: LawEntry) -> Result<(), String> {
    let mut guard = active().write().unwrap_or_else(|e| e.into_inner());
    guard.add_or_replace(entry.at_run_time())
}

/// The current name of a law given by `name` (itself, or the new name of a former one). A
/// former name prints a one-line notice on stderr, once per name and process.
pub fn resolve(name: &str) -> Option<String> {
    let (canonical, renamed) = with(|r| {
        let c = r.canonical(name).map(str::to_string);
        let renamed = c.as_deref().is_some_and(|c| c != name);
        (c, renamed)
    });
    if renamed {
        static NOTICED: Mutex<BTreeSet<String>> = Mutex::new(BTreeSet::new());
        let mut seen = NOTICED.lock().unwrap_or_else(|e| e.into_inner());
        if seen.insert(name.to_string())
            && let Some(c) = &canonical
        {
            eprintln!(
                "gripsweep: notice: controller '{name}' is now called '{c}'; the old name is accepted for one more release"
            );
        }
    }
    canonical
}
