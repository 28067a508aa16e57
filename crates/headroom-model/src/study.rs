//! Study settings: limits, search, the new generation, scenarios (study.toml).

use std::path::Path;

use crate::diagnostic::{Diagnostic, ModelErrors};

/// Whether power may flow out of the feeder at the head.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum ReverseFlow {
    /// Export through the substation is acceptable.
    #[default]
    Allow,
    /// Active power at the head may not flow out of the feeder.
    Forbid,
}

/// Network limits every injection is judged against.
#[derive(Debug, Clone, PartialEq)]
pub struct Limits {
    /// Upper voltage limit at any node, pu.
    pub v_max_pu: f64,
    /// Lower voltage limit at any node, pu.
    pub v_min_pu: f64,
    /// Branch current limit, percent of rating.
    pub thermal_pct: f64,
    /// Largest voltage change at any node when the new generation trips, percent; 0 = off.
    pub voltage_change_pct: f64,
    /// Whether reverse power at the head is allowed.
    pub reverse_flow: ReverseFlow,
}

impl Default for Limits {
    fn default() -> Limits {
        Limits {
            v_max_pu: 1.05,
            v_min_pu: 0.95,
            thermal_pct: 100.0,
            voltage_change_pct: 3.0,
            reverse_flow: ReverseFlow::Allow,
        }
    }
}

/// How the capacity search steps.
#[derive(Debug, Clone, PartialEq)]
pub struct SearchSettings {
    /// Size of the generation steps, kW.
    pub step_kw: f64,
    /// The reported capacity is a multiple of this, kW.
    pub resolution_kw: f64,
    /// Stop searching here, kW.
    pub max_kw: f64,
}

impl Default for SearchSettings {
    fn default() -> SearchSettings {
        SearchSettings {
            step_kw: 50.0,
            resolution_kw: 1.0,
            max_kw: 20000.0,
        }
    }
}

/// The new generation being sized.
#[derive(Debug, Clone, PartialEq)]
pub struct GenerationSettings {
    /// Power factor in (0, 1]; 1.0 is unity.
    pub power_factor: f64,
    /// True: the plant draws reactive power (lowers voltage); false: it injects.
    pub absorbing: bool,
}

impl Default for GenerationSettings {
    fn default() -> GenerationSettings {
        GenerationSettings {
            power_factor: 1.0,
            absorbing: true,
        }
    }
}

impl GenerationSettings {
    /// Reactive power injected per unit of active power injected: `−tan(acos pf)` when
    /// absorbing, `+tan(acos pf)` when injecting, 0 at unity.
    pub fn q_per_p(&self) -> f64 {
        let pf = self.power_factor;
        let tan_phi = (1.0 - pf * pf).max(0.0).sqrt() / pf;
        if self.absorbing { -tan_phi } else { tan_phi }
    }
}

/// One operating case: how loads and existing generation are scaled.
#[derive(Debug, Clone, PartialEq)]
pub struct Scenario {
    /// Name used in outputs.
    pub name: String,
    /// Multiplies every `load_kw` and `load_kvar`.
    pub load_scale: f64,
    /// Multiplies every existing `gen_kw` and `gen_kvar`.
    pub gen_scale: f64,
}

impl Scenario {
    /// A scenario with the given name and scales.
    pub fn new(name: impl Into<String>, load_scale: f64, gen_scale: f64) -> Scenario {
        Scenario {
            name: name.into(),
            load_scale,
            gen_scale,
        }
    }
}

/// All study settings; every key of study.toml is optional.
#[derive(Debug, Clone, PartialEq)]
pub struct Study {
    /// Network limits.
    pub limits: Limits,
    /// Search steps.
    pub search: SearchSettings,
    /// The new generation.
    pub generation: GenerationSettings,
    /// Operating cases, in file order (default: `min-load` then `peak-load`).
    pub scenarios: Vec<Scenario>,
}

impl Default for Study {
    /// The defaults of the feeder format: limits 0.95–1.05 pu, 100 % thermal, 3 % voltage change,
    /// reverse flow allowed; steps of 50 kW to 1 kW resolution up to 20 MW; unity power factor;
    /// scenarios `min-load` (loads × 0.3, generation × 1.0) and `peak-load` (loads × 1.0,
    /// generation × 0.0).
    fn default() -> Study {
        Study {
            limits: Limits::default(),
            search: SearchSettings::default(),
            generation: GenerationSettings::default(),
            scenarios: vec![
                Scenario::new("min-load", 0.3, 1.0),
                Scenario::new("peak-load", 1.0, 0.0),
            ],
        }
    }
}

impl Study {
    /// Reads study.toml; `None` gives the defaults. Every problem is reported with file, line,
    /// key and value.
    pub fn load(path: Option<&Path>) -> Result<Study, ModelErrors> {
        match path {
            None => Ok(Study::default()),
            Some(path) => crate::read::read_study(path),
        }
    }

    /// The scenario with this name.
    pub fn scenario(&self, name: &str) -> Option<&Scenario> {
        self.scenarios.iter().find(|s| s.name == name)
    }

    /// Checks value ranges; problems are reported against `file` (no line numbers).
    pub fn check(&self, file: &Path) -> Vec<Diagnostic> {
        let mut errors = Vec::new();
        let mut require = |ok: bool, key: &str, value: f64, what: &str| {
            if !ok {
                errors.push(
                    Diagnostic::error(file, what.to_string())
                        .at_column(key)
                        .with_value(value.to_string()),
                );
            }
        };
        let l = &self.limits;
        require(
            l.v_max_pu.is_finite() && l.v_max_pu > 0.0,
            "limits.v_max_pu",
            l.v_max_pu,
            "must be a finite number greater than 0",
        );
        require(
            l.v_min_pu.is_finite() && l.v_min_pu >= 0.0 && l.v_min_pu < l.v_max_pu,
            "limits.v_min_pu",
            l.v_min_pu,
            "must be a finite number, 0 or more and below v_max_pu",
        );
        require(
            l.thermal_pct.is_finite() && l.thermal_pct > 0.0,
            "limits.thermal_pct",
            l.thermal_pct,
            "must be a finite number greater than 0",
        );
        require(
            l.voltage_change_pct.is_finite() && l.voltage_change_pct >= 0.0,
            "limits.voltage_change_pct",
            l.voltage_change_pct,
            "must be a finite number, 0 or more (0 = off)",
        );
        let s = &self.search;
        require(
            s.resolution_kw.is_finite() && s.resolution_kw > 0.0,
            "search.resolution_kw",
            s.resolution_kw,
            "must be a finite number greater than 0",
        );
        require(
            s.step_kw.is_finite() && s.step_kw >= s.resolution_kw,
            "search.step_kw",
            s.step_kw,
            "must be a finite number, at least resolution_kw",
        );
        require(
            s.max_kw.is_finite() && s.max_kw >= s.resolution_kw,
            "search.max_kw",
            s.max_kw,
            "must be a finite number, at least resolution_kw",
        );
        let g = &self.generation;
        require(
            g.power_factor.is_finite() && g.power_factor > 0.0 && g.power_factor <= 1.0,
            "generation.power_factor",
            g.power_factor,
            "must be in (0, 1]",
        );
        if self.scenarios.is_empty() {
            errors.push(
                Diagnostic::error(file, "at least one [[scenario]] is needed")
                    .at_column("scenario"),
            );
        }
        for (i, sc) in self.scenarios.iter().enumerate() {
            for (key, v) in [("load_scale", sc.load_scale), ("gen_scale", sc.gen_scale)] {
                if !(v.is_finite() && v >= 0.0) {
                    errors.push(
                        Diagnostic::error(file, "must be a finite number, 0 or more")
                            .at_column(format!("scenario[{}].{key}", i + 1))
                            .with_value(v.to_string()),
                    );
                }
            }
            if sc.name.trim().is_empty() {
                errors.push(
                    Diagnostic::error(file, "scenario name is empty")
                        .at_column(format!("scenario[{}].name", i + 1)),
                );
            }
            if self.scenarios[..i]
                .iter()
                .any(|other| other.name == sc.name)
            {
                errors.push(
                    Diagnostic::error(file, "duplicate scenario name")
                        .at_column(format!("scenario[{}].name", i + 1))
                        .with_value(&sc.name),
                );
            }
        }
        errors
    }
}
