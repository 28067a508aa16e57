//! Reading study.toml: every key optional, unknown keys are errors (typo protection), and every
//! problem names the line, the key and the value as written.

use std::collections::HashMap;
use std::path::Path;

use toml::de::{DeTable, DeValue};

use crate::diagnostic::{Diagnostic, ModelErrors};
use crate::source::closest;
use crate::study::{ReverseFlow, Scenario, Study};
use crate::toml_doc::{TomlText, Value, entries};

const LIMITS_KEYS: &[&str] = &[
    "v_max_pu",
    "v_min_pu",
    "thermal_pct",
    "voltage_change_pct",
    "reverse_flow",
];
const SEARCH_KEYS: &[&str] = &["step_kw", "resolution_kw", "max_kw"];
const GENERATION_KEYS: &[&str] = &["power_factor", "absorbing"];
const SCENARIO_KEYS: &[&str] = &["name", "load_scale", "gen_scale"];
const SECTIONS: &[(&str, &[&str])] = &[
    ("limits", LIMITS_KEYS),
    ("search", SEARCH_KEYS),
    ("generation", GENERATION_KEYS),
    ("scenario", SCENARIO_KEYS),
];

/// Reads and checks study.toml. Keys left out keep the defaults of [`Study::default`]; scenarios,
/// when given, replace the default ones, and a scenario's `load_scale` and `gen_scale` default
/// to 1.0.
pub(crate) fn read_study(path: &Path) -> Result<Study, ModelErrors> {
    let text = TomlText::read(path).map_err(ModelErrors::single)?;
    let document = text.parse().map_err(ModelErrors::single)?;
    let mut reader = StudyReader {
        text: &text,
        study: Study::default(),
        errors: Vec::new(),
        key_lines: HashMap::new(),
    };
    reader.document(document.get_ref());
    let StudyReader {
        study,
        mut errors,
        key_lines,
        ..
    } = reader;
    for mut error in study.check(path) {
        error.line = error
            .column
            .as_deref()
            .and_then(|key| line_of_key(&key_lines, key));
        errors.push(error);
    }
    if errors.is_empty() {
        Ok(study)
    } else {
        errors.sort_by_key(|e| e.line.unwrap_or(0));
        Err(ModelErrors::new(errors))
    }
}

/// The line of `key` (as [`Study::check`] names it, e.g. `scenario[2].load_scale`), or of its
/// section or scenario when the key itself was left out.
fn line_of_key(key_lines: &HashMap<String, usize>, key: &str) -> Option<usize> {
    let mut key = key;
    loop {
        if let Some(&line) = key_lines.get(key) {
            return Some(line);
        }
        key = &key[..key.rfind(['.', '['])?];
    }
}

struct StudyReader<'t> {
    text: &'t TomlText,
    study: Study,
    errors: Vec<Diagnostic>,
    /// Line of every key written, named as in [`Study::check`] (`limits.v_max_pu`,
    /// `scenario[1]`, `scenario[1].name`).
    key_lines: HashMap<String, usize>,
}

impl StudyReader<'_> {
    fn document(&mut self, document: &DeTable<'_>) {
        for entry in entries(document) {
            let line = self.text.line(entry.key_start);
            self.key_lines.insert(entry.key.to_string(), line);
            let value = entry.value;
            match entry.key {
                section @ ("limits" | "search" | "generation") => match value.get_ref() {
                    DeValue::Table(table) => self.section(section, table),
                    _ => self.errors.push(self.text.error_at(
                        section,
                        value,
                        &format!("must be a section: write [{section}] with its keys below"),
                    )),
                },
                "scenario" => self.scenarios(value),
                key => {
                    let hint = match SECTIONS.iter().find(|(_, keys)| keys.contains(&key)) {
                        Some((section, _)) => format!("; it belongs in [{section}]"),
                        None => {
                            let names: Vec<&str> = SECTIONS.iter().map(|(name, _)| *name).collect();
                            match closest(key, &names) {
                                Some(near) => format!("; did you mean [{near}]?"),
                                None => "; the sections are [limits], [search], [generation] \
                                         and [[scenario]]"
                                    .to_string(),
                            }
                        }
                    };
                    self.errors.push(
                        Diagnostic::error(&self.text.file, format!("unknown section or key{hint}"))
                            .at_line(line)
                            .at_column(key),
                    );
                }
            }
        }
    }

    fn section(&mut self, section: &str, table: &DeTable<'_>) {
        for entry in entries(table) {
            let column = format!("{section}.{}", entry.key);
            self.key_lines
                .insert(column.clone(), self.text.line(entry.key_start));
            let text = self.text;
            let value = entry.value;
            let study = &mut self.study;
            let result = match (section, entry.key) {
                ("limits", "v_max_pu") => {
                    set_number(text, &column, value, &mut study.limits.v_max_pu)
                }
                ("limits", "v_min_pu") => {
                    set_number(text, &column, value, &mut study.limits.v_min_pu)
                }
                ("limits", "thermal_pct") => {
                    set_number(text, &column, value, &mut study.limits.thermal_pct)
                }
                ("limits", "voltage_change_pct") => {
                    set_number(text, &column, value, &mut study.limits.voltage_change_pct)
                }
                ("limits", "reverse_flow") => text.string(&column, value).and_then(|word| {
                    study.limits.reverse_flow = match word.trim().to_ascii_lowercase().as_str() {
                        "allow" => ReverseFlow::Allow,
                        "forbid" => ReverseFlow::Forbid,
                        _ => {
                            return Err(text.error_at(
                                &column,
                                value,
                                "must be \"allow\" or \"forbid\"",
                            ));
                        }
                    };
                    Ok(())
                }),
                ("search", "step_kw") => {
                    set_number(text, &column, value, &mut study.search.step_kw)
                }
                ("search", "resolution_kw") => {
                    set_number(text, &column, value, &mut study.search.resolution_kw)
                }
                ("search", "max_kw") => set_number(text, &column, value, &mut study.search.max_kw),
                ("generation", "power_factor") => {
                    set_number(text, &column, value, &mut study.generation.power_factor)
                }
                ("generation", "absorbing") => text
                    .boolean(&column, value)
                    .map(|flag| study.generation.absorbing = flag),
                _ => Err(self.unknown_key(section, entry.key, &column, value)),
            };
            if let Err(error) = result {
                self.errors.push(error);
            }
        }
    }

    fn unknown_key(&self, section: &str, key: &str, column: &str, value: &Value<'_>) -> Diagnostic {
        let own_keys = SECTIONS
            .iter()
            .find(|(name, _)| *name == section)
            .map_or(&[][..], |(_, keys)| *keys);
        let hint = match closest(key, own_keys) {
            Some(near) => format!("; did you mean {near}?"),
            None => match SECTIONS.iter().find(|(_, keys)| keys.contains(&key)) {
                Some((other, _)) => format!("; it belongs in [{other}]"),
                None => format!("; the keys of [{section}] are {}", own_keys.join(", ")),
            },
        };
        let mut error =
            self.text
                .error_at(column, value, &format!("unknown key in [{section}]{hint}"));
        // Point at the key's own line even when the value is a table spanning several.
        error.value = None;
        error
    }

    fn scenarios(&mut self, value: &Value<'_>) {
        let items = match value.get_ref() {
            DeValue::Array(items) => items,
            DeValue::Table(_) => {
                self.errors.push(self.text.error_at(
                    "scenario",
                    value,
                    "write [[scenario]] with double brackets (there may be several)",
                ));
                return;
            }
            _ => {
                self.errors.push(self.text.error_at(
                    "scenario",
                    value,
                    "must be a list of [[scenario]] sections",
                ));
                return;
            }
        };
        self.study.scenarios.clear();
        for (i, item) in items.iter().enumerate() {
            let prefix = format!("scenario[{}]", i + 1);
            self.key_lines
                .insert(prefix.clone(), self.text.line(item.span().start));
            let DeValue::Table(table) = item.get_ref() else {
                self.errors.push(self.text.error_at(
                    &prefix,
                    item,
                    "must be a [[scenario]] section with name, load_scale and gen_scale",
                ));
                continue;
            };
            let mut scenario = Scenario::new("", 1.0, 1.0);
            let mut named = false;
            for entry in entries(table) {
                let column = format!("{prefix}.{}", entry.key);
                self.key_lines
                    .insert(column.clone(), self.text.line(entry.key_start));
                let value = entry.value;
                let result = match entry.key {
                    "name" => self.text.string(&column, value).map(|name| {
                        named = true;
                        scenario.name = name;
                    }),
                    "load_scale" => set_number(self.text, &column, value, &mut scenario.load_scale),
                    "gen_scale" => set_number(self.text, &column, value, &mut scenario.gen_scale),
                    key => Err(self.unknown_key("scenario", key, &column, value)),
                };
                if let Err(error) = result {
                    // A bad name is reported here; a stand-in keeps it from being reported again.
                    if entry.key == "name" {
                        named = true;
                        scenario.name = prefix.clone();
                    }
                    self.errors.push(error);
                }
            }
            if !named {
                self.errors.push(
                    Diagnostic::error(&self.text.file, "the scenario needs a name")
                        .at_line(self.text.line(item.span().start))
                        .at_column(format!("{prefix}.name")),
                );
                scenario.name = prefix;
            }
            self.study.scenarios.push(scenario);
        }
    }
}

/// Reads a number into `target`, which keeps its value when the number is bad.
fn set_number(
    text: &TomlText,
    column: &str,
    value: &Value<'_>,
    target: &mut f64,
) -> Result<(), Diagnostic> {
    *target = text.number(column, value)?;
    Ok(())
}
