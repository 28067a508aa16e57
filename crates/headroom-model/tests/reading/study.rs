//! study.toml: defaults, a full file, and each kind of mistake.

use headroom_model::{ReverseFlow, Scenario, Study};

use crate::support::Fixture;

fn load(fixture: &Fixture, text: &str) -> Result<Study, headroom_model::ModelErrors> {
    fixture.write("study.toml", text);
    Study::load(Some(&fixture.path("study.toml")))
}

fn errors(text: &str) -> Vec<String> {
    let fixture = Fixture::good();
    let result = load(&fixture, text);
    fixture.errors_of(result)
}

#[test]
fn no_file_and_an_empty_file_give_the_defaults() {
    assert_eq!(Study::load(None).unwrap(), Study::default());
    let fixture = Fixture::good();
    assert_eq!(load(&fixture, "").unwrap(), Study::default());
    assert_eq!(
        load(&fixture, "# nothing\n[limits]\n").unwrap(),
        Study::default()
    );
}

#[test]
fn every_key_is_read_and_scenarios_replace_the_defaults() {
    let fixture = Fixture::good();
    let study = load(
        &fixture,
        r#"
[limits]
v_max_pu = 1.1
v_min_pu = 0.9
thermal_pct = 120
voltage_change_pct = 0
reverse_flow = "forbid"

[search]
step_kw = 100
resolution_kw = 0.5
max_kw = 5_000

[generation]
power_factor = 0.95
absorbing = false

[[scenario]]
name = "night"
load_scale = 0.2

[[scenario]]
name = "noon"
gen_scale = 0.5
"#,
    )
    .unwrap();
    assert_eq!(study.limits.v_max_pu, 1.1);
    assert_eq!(study.limits.v_min_pu, 0.9);
    assert_eq!(study.limits.thermal_pct, 120.0);
    assert_eq!(study.limits.voltage_change_pct, 0.0);
    assert_eq!(study.limits.reverse_flow, ReverseFlow::Forbid);
    assert_eq!(study.search.step_kw, 100.0);
    assert_eq!(study.search.resolution_kw, 0.5);
    assert_eq!(study.search.max_kw, 5000.0);
    assert_eq!(study.generation.power_factor, 0.95);
    assert!(!study.generation.absorbing);
    assert_eq!(
        study.scenarios,
        [
            Scenario::new("night", 0.2, 1.0),
            Scenario::new("noon", 1.0, 0.5)
        ]
    );

    // Keys left out keep their defaults.
    let study = load(&fixture, "[search]\nmax_kw = 3000\n").unwrap();
    assert_eq!(study.search.max_kw, 3000.0);
    assert_eq!(study.search.step_kw, 50.0);
    assert_eq!(study.scenarios, Study::default().scenarios);
}

#[test]
fn unknown_sections_and_keys_are_errors_with_hints() {
    assert_eq!(
        errors("[limit]\nv_max_pu = 1.1\n\n[search]\nstep = 10\nv_min_pu = 0.9\nmax_kw = 1\n"),
        [
            "study.toml: line 1: column limit: unknown section or key; did you mean [limits]?",
            "study.toml: line 5: column search.step: unknown key in [search]; did you mean step_kw?",
            "study.toml: line 6: column search.v_min_pu: unknown key in [search]; it belongs in \
             [limits]",
        ]
    );
    assert_eq!(
        errors("thermal_pct = 90\n[[scenario]]\nname = \"a\"\nload = 1\ncolour = \"red\"\n"),
        [
            "study.toml: line 1: column thermal_pct: unknown section or key; it belongs in [limits]",
            "study.toml: line 4: column scenario[1].load: unknown key in [scenario]; did you mean \
             load_scale?",
            "study.toml: line 5: column scenario[1].colour: unknown key in [scenario]; the keys of \
             [scenario] are name, load_scale, gen_scale",
        ]
    );
}

#[test]
fn wrong_types_name_the_line_and_the_value() {
    assert_eq!(
        errors(
            "[limits]\nv_max_pu = \"1.05\"\nreverse_flow = \"never\"\n[generation]\nabsorbing = \
             \"yes\"\n[search]\nmax_kw = [1, 2]\n"
        ),
        [
            "study.toml: line 2: column limits.v_max_pu: value \"\\\"1.05\\\"\": must be a number",
            "study.toml: line 3: column limits.reverse_flow: value \"\\\"never\\\"\": must be \
             \"allow\" or \"forbid\"",
            "study.toml: line 5: column generation.absorbing: value \"\\\"yes\\\"\": must be true \
             or false",
            "study.toml: line 7: column search.max_kw: value \"[1, 2]\": must be a number",
        ]
    );
    assert_eq!(
        errors("limits = 3\n[scenario]\nname = \"x\"\n"),
        [
            "study.toml: line 1: column limits: value \"3\": must be a section: write [limits] with \
             its keys below",
            "study.toml: line 2: column scenario: value \"[scenario]\": write [[scenario]] with \
             double brackets (there may be several)",
        ]
    );
}

#[test]
fn range_errors_come_with_the_line_of_their_key() {
    assert_eq!(
        errors(
            "[limits]\nv_max_pu = -1.0\n\n[generation]\npower_factor = 1.5\n\n[[scenario]]\nname = \
             \"a\"\n\n[[scenario]]\nname = \"a\"\nload_scale = nan\n[[scenario]]\ngen_scale = 1\n"
        ),
        [
            // v_min_pu is not written: the line of its section.
            "study.toml: line 1: column limits.v_min_pu: value \"0.95\": must be a finite number, 0 \
             or more and below v_max_pu",
            "study.toml: line 2: column limits.v_max_pu: value \"-1\": must be a finite number \
             greater than 0",
            "study.toml: line 5: column generation.power_factor: value \"1.5\": must be in (0, 1]",
            "study.toml: line 11: column scenario[2].name: value \"a\": duplicate scenario name",
            "study.toml: line 12: column scenario[2].load_scale: value \"NaN\": must be a finite \
             number, 0 or more",
            "study.toml: line 13: column scenario[3].name: the scenario needs a name",
        ]
    );
    assert_eq!(
        errors("scenario = []\n"),
        ["study.toml: line 1: column scenario: at least one [[scenario]] is needed"]
    );
}

#[test]
fn syntax_errors_and_unreadable_files() {
    let found = errors("[limits]\nv_max_pu = = 1\n");
    assert_eq!(found.len(), 1, "{found:?}");
    assert!(
        found[0].starts_with("study.toml: line 2: TOML syntax error: "),
        "{found:?}"
    );

    let fixture = Fixture::good();
    let result = Study::load(Some(&fixture.path("nowhere.toml")));
    assert_eq!(fixture.errors_of(result), ["nowhere.toml: file not found"]);

    fixture.write("study.toml", b"[limits]\n# caf\xE9\n");
    let result = Study::load(Some(&fixture.path("study.toml")));
    assert_eq!(
        fixture.errors_of(result),
        [
            "study.toml: line 2: the file is not UTF-8 text (first bad byte on this line); save it as \
          UTF-8"
        ]
    );
}
