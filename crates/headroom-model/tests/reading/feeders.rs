//! Feeder folders: discovery, a good feeder, and each kind of bad input.

use headroom_model::{BusIdx, Severity, discover_feeders, load_feeder, load_feeders};

use crate::support::{BRANCHES, Fixture, NODES};

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() < 1e-12
}

/// The good branches.csv with one more row (line 6).
fn branches_plus(row: &str) -> String {
    format!("{BRANCHES}{row}\n")
}

/// The good nodes.csv with one more row (line 6).
fn nodes_plus(row: &str) -> String {
    format!("{NODES}{row}\n")
}

#[test]
fn good_feeder_loads_in_depth_first_order_with_conductors_resolved() {
    let fixture = Fixture::good();
    let feeder = fixture.feeder();

    assert_eq!(feeder.id(), "f1");
    let header = feeder.header();
    assert_eq!(header.name, "Feeder one");
    assert_eq!(header.nominal_kv, 11.0);
    assert_eq!(header.head, "sub");
    assert_eq!(header.head_voltage_pu, 1.0);
    assert_eq!(header.substation.as_deref(), Some("North"));
    assert_eq!(header.region, None);
    assert_eq!(header.crs.as_deref(), Some("EPSG:32630"));
    assert!(feeder.warnings().is_empty(), "{:?}", feeder.warnings());

    let ids: Vec<&str> = feeder.nodes().iter().map(|n| n.id.as_str()).collect();
    assert_eq!(ids, ["sub", "a", "b", "c"]);
    let b = feeder.node(BusIdx::new(2));
    assert_eq!((b.load_kw, b.load_kvar, b.line), (50.0, 10.0, 4));
    assert_eq!((b.x, b.y), (Some(2.0), Some(0.0)));
    let c = feeder.node(BusIdx::new(3));
    assert_eq!((c.x, c.y, c.load_kw, c.gen_kw), (None, None, 20.0, 0.0));

    let branch_ids: Vec<&str> = feeder.branches().iter().map(|b| b.id.as_str()).collect();
    assert_eq!(branch_ids, ["b1", "b2", "b3"]);
    let b1 = &feeder.branches()[0];
    // Shared library: ACSR50 × 2 km, rating from the library.
    assert!(close(b1.r_ohm, 1.2) && close(b1.x_ohm, 0.7), "{b1:?}");
    assert_eq!(b1.rating_a, 200.0);
    assert_eq!(b1.conductor.as_deref(), Some("ACSR50"));
    assert_eq!((b1.length_km, b1.line), (Some(2.0), 2));
    let b2 = &feeder.branches()[1];
    // The feeder's own library overrides CU95; rating_a in the row overrides the library.
    assert!(
        close(b2.r_ohm, 0.19 * 0.5) && close(b2.x_ohm, 0.09 * 0.5),
        "{b2:?}"
    );
    assert_eq!(b2.rating_a, 250.0);
    let b3 = &feeder.branches()[2];
    // Given directly, written c → a, oriented a → c.
    assert_eq!((b3.r_ohm, b3.x_ohm, b3.rating_a), (0.3, 0.2, 150.0));
    assert_eq!((b3.from, b3.to), (BusIdx::new(1), BusIdx::new(3)));
    assert_eq!((b3.conductor.as_deref(), b3.length_km), (None, None));

    let open: Vec<(&str, &str, &str, usize)> = feeder
        .open_branches()
        .iter()
        .map(|b| (b.id.as_str(), b.from.as_str(), b.to.as_str(), b.line))
        .collect();
    assert_eq!(open, [("b4", "b", "c", 5)]);
}

#[test]
fn defaults_apply_when_optional_parts_are_left_out() {
    let fixture = Fixture::good();
    fixture.remove("feeders/f1/conductors.csv");
    fixture.write(
        "feeders/f1/feeder.toml",
        "nominal_kv = 20.5\nhead = \"sub\"\nhead_voltage_pu = 1.03\n",
    );
    let feeder = fixture.feeder();
    assert_eq!(feeder.header().name, "f1");
    assert_eq!(feeder.header().head_voltage_pu, 1.03);
    // Without the override CU95 comes from the shared library.
    let b2 = &feeder.branches()[1];
    assert!(close(b2.r_ohm, 0.1) && close(b2.x_ohm, 0.05), "{b2:?}");

    // No shared library either: branches given by impedance only.
    fixture.remove("feeders/conductors.csv");
    fixture.write(
        "feeders/f1/branches.csv",
        "id,from,to,r_ohm,x_ohm,rating_a\nb1,sub,a,1,1,100\nb2,a,b,1,1,100\nb3,a,c,1,1,100\n",
    );
    assert_eq!(fixture.feeder().n_branches(), 3);
}

#[test]
fn unknown_columns_and_keys_are_warnings_kept_on_the_feeder() {
    let fixture = Fixture::good();
    fixture.write(
        "feeders/f1/nodes.csv",
        "lod_kw, id ,x,y,load_kvar,owner\n0,sub,0,0,0,me\n100,a,1,0,30,\n 50 , b ,2,0,10,\n20,c,,,,\n",
    );
    let toml = format!("{}regoin = \"South\"\n", crate::support::FEEDER_TOML);
    fixture.write("feeders/f1/feeder.toml", toml);
    let feeder = fixture.feeder();
    assert!(
        feeder
            .warnings()
            .iter()
            .all(|w| w.severity == Severity::Warning)
    );
    assert_eq!(
        fixture.lines(feeder.warnings()),
        [
            "feeders/f1/feeder.toml: line 6: column regoin: unknown key, ignored (did you mean region?)",
            "feeders/f1/nodes.csv: line 1: column lod_kw: unknown column, ignored (did you mean load_kw?)",
            "feeders/f1/nodes.csv: line 1: column owner: unknown column, ignored (known columns: id, x, y, \
             load_kw, load_kvar, gen_kw, gen_kvar)",
        ]
    );
    // The misspelt column is not read: its loads are the default.
    assert_eq!(feeder.node(BusIdx::new(1)).load_kw, 0.0);
}

#[test]
fn loop_is_reported_at_the_closing_branch() {
    let fixture = Fixture::good();
    fixture.write(
        "feeders/f1/branches.csv",
        branches_plus("b5,sub,c,,,0.1,0.1,100,"),
    );
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/branches.csv: line 6: column id: value \"b5\": closed branch makes a loop \
             (node \"sub\" is already reached from head \"sub\"); open one branch of the loop \
             (closed = false)"
        ]
    );
    // Opening it makes a good feeder again.
    fixture.write(
        "feeders/f1/branches.csv",
        branches_plus("b5,sub,c,,,0.1,0.1,100,0"),
    );
    assert_eq!(fixture.feeder().open_branches().len(), 2);
}

#[test]
fn island_self_loop_and_unknown_node() {
    let fixture = Fixture::good();
    fixture.write("feeders/f1/nodes.csv", nodes_plus("0,d,,,"));
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/nodes.csv: line 6: column id: value \"d\": node is not connected to head \
             \"sub\" through closed branches (island)"
        ]
    );

    let fixture = Fixture::good();
    fixture.write(
        "feeders/f1/branches.csv",
        branches_plus("b5,c,c,,,0.1,0.1,100,"),
    );
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/branches.csv: line 6: column to: value \"c\": branch connects a node to itself"
        ]
    );

    let fixture = Fixture::good();
    fixture.write(
        "feeders/f1/branches.csv",
        branches_plus("b5,c,zz,,,0.1,0.1,100,"),
    );
    assert_eq!(
        fixture.errors(),
        ["feeders/f1/branches.csv: line 6: column to: value \"zz\": unknown node"]
    );
}

#[test]
fn duplicate_node_and_branch_ids() {
    let fixture = Fixture::good();
    fixture.write("feeders/f1/nodes.csv", nodes_plus("5,a,3,0,1"));
    // An open branch's id must be unique too.
    fixture.write(
        "feeders/f1/branches.csv",
        branches_plus("b1,b,c,,,0.1,0.1,100,false"),
    );
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/nodes.csv: line 6: column id: value \"a\": duplicate node id (first defined \
             on line 3)",
            "feeders/f1/branches.csv: line 6: column id: value \"b1\": duplicate branch id (first \
             defined on line 2)",
        ]
    );
}

#[test]
fn unknown_conductor_type_names_file_line_and_value() {
    let fixture = Fixture::good();
    fixture.write(
        "feeders/f1/branches.csv",
        BRANCHES.replace("b1,sub,a,ACSR50", "b1,sub,a,ACSR5"),
    );
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/branches.csv: line 2: column type: value \"ACSR5\": unknown conductor type \
             (not in feeders/conductors.csv nor in feeders/f1/conductors.csv); did you mean ACSR50?"
        ]
    );
}

#[test]
fn bad_numbers_are_reported_once_and_the_tree_still_checked() {
    let fixture = Fixture::good();
    fixture.write(
        "feeders/f1/nodes.csv",
        "load_kw, id ,x,y,load_kvar\n0,sub,0,0,0\nNaN,a,1,0,30\n 50 , b ,2,abc,10\n20,c,,,inf\n",
    );
    fixture.write(
        "feeders/f1/branches.csv",
        "id,from,to,type,length_km,r_ohm,x_ohm,rating_a,closed\n\
         b1,sub,a,ACSR50,-3,,,,\n\
         b2,a,b,CU95,0.5,,,0,TRUE\n\
         b3,c,a,,,-0.3,0.2,150,maybe\n\
         b4,b,c,,,0.1,0.1,100,False\n\
         b5,c,zz,,,0,1e400,1,\n",
    );
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/nodes.csv: line 3: column load_kw: value \"NaN\": must be a finite number",
            "feeders/f1/nodes.csv: line 4: column y: value \"abc\": not a number",
            "feeders/f1/nodes.csv: line 5: column load_kvar: value \"inf\": must be a finite number",
            "feeders/f1/branches.csv: line 2: column length_km: value \"-3\": must be greater than 0",
            "feeders/f1/branches.csv: line 3: column rating_a: value \"0\": must be greater than 0",
            "feeders/f1/branches.csv: line 4: column r_ohm: value \"-0.3\": must be 0 or more",
            "feeders/f1/branches.csv: line 4: column closed: value \"maybe\": must be true or false \
             (or 1 or 0)",
            "feeders/f1/branches.csv: line 6: column x_ohm: value \"1e400\": must be a finite number",
            "feeders/f1/branches.csv: line 6: column to: value \"zz\": unknown node",
        ]
    );
}

#[test]
fn zero_impedance_is_an_error() {
    let fixture = Fixture::good();
    fixture.write(
        "feeders/f1/branches.csv",
        BRANCHES.replace("b3,c,a,,,0.3,0.2,150,1", "b3,c,a,,,0,0.0,150,1"),
    );
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/branches.csv: line 4: column r_ohm: value \"0\": r_ohm and x_ohm are both \
             zero (a branch needs an impedance)"
        ]
    );
}

#[test]
fn type_and_impedance_alternatives() {
    let fixture = Fixture::good();
    fixture.write(
        "feeders/f1/branches.csv",
        "id,from,to,type,length_km,r_ohm,x_ohm,rating_a,closed\n\
         b1,sub,a,ACSR50,2,1.0,,,\n\
         b2,a,b,CU95,,,,250,TRUE\n\
         b3,c,a,,,,,150,1\n\
         b4,b,c,,,0.1,,,False\n",
    );
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/branches.csv: line 2: column type: value \"ACSR50\": give either a conductor \
             type or r_ohm and x_ohm, not both",
            "feeders/f1/branches.csv: line 3: column length_km: required with type",
            "feeders/f1/branches.csv: line 4: column type: give a conductor type (with length_km), \
             or r_ohm and x_ohm",
            "feeders/f1/branches.csv: line 5: column x_ohm: required without type",
            "feeders/f1/branches.csv: line 5: column rating_a: required without type",
        ]
    );
}

#[test]
fn a_column_some_rows_need_is_reported_once_when_absent() {
    let fixture = Fixture::good();
    fixture.write(
        "feeders/f1/branches.csv",
        "id,from,to,type,rating_a\nb1,sub,a,ACSR50,\nb2,a,b,CU95,\nb3,a,c,CU95,\n",
    );
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/branches.csv: line 1: column length_km: missing column (required with \
             type; first needed on line 2)"
        ]
    );
}

#[test]
fn missing_required_columns() {
    let fixture = Fixture::good();
    fixture.write("feeders/f1/nodes.csv", NODES.replace(" id ", "name"));
    fixture.write(
        "feeders/f1/branches.csv",
        BRANCHES.replace("id,from,to,", "id,from,too,"),
    );
    let result = load_feeder(&fixture.path("feeders/f1"));
    assert_eq!(
        fixture.errors_of(result),
        [
            "feeders/f1/nodes.csv: line 1: column id: missing required column",
            "feeders/f1/branches.csv: line 1: column to: missing required column",
        ]
    );

    fixture.write("feeders/f1/nodes.csv", NODES.replace(',', ";"));
    fixture.write("feeders/f1/branches.csv", BRANCHES);
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/nodes.csv: line 1: column id: missing required column (the cells seem to be \
          separated by ';': use commas)"
        ]
    );
}

#[test]
fn empty_header_only_and_missing_files() {
    let fixture = Fixture::good();
    fixture.write("feeders/f1/nodes.csv", " \n\n");
    fixture.write(
        "feeders/f1/branches.csv",
        "id,from,to,r_ohm,x_ohm,rating_a\n",
    );
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/nodes.csv: the file is empty; it needs a header row naming its columns (id)",
            "feeders/f1/branches.csv: line 1: the file has a header but no data rows",
        ]
    );

    let fixture = Fixture::good();
    fixture.remove("feeders/f1/feeder.toml");
    fixture.remove("feeders/f1/branches.csv");
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/feeder.toml: file not found",
            "feeders/f1/branches.csv: file not found",
        ]
    );
}

#[test]
fn non_utf8_file_names_file_and_line_and_reading_goes_on() {
    let fixture = Fixture::good();
    // Latin-1 "é": the same bytes in both files, so the tree still joins up.
    let mut nodes = NODES.as_bytes().to_vec();
    let at = NODES.find("100,a,").unwrap() + 5;
    nodes.insert(at, 0xE9);
    fixture.write("feeders/f1/nodes.csv", &nodes);
    let mut branches = BRANCHES.as_bytes().to_vec();
    // Positions in the original text, shifted by the bytes inserted before them.
    let at = BRANCHES.find("b1,sub,a").unwrap() + 8;
    branches.insert(at, 0xE9);
    let at = BRANCHES.find("b2,a").unwrap() + 4 + 1;
    branches.insert(at, 0xE9);
    let at = BRANCHES.find("b3,c,a").unwrap() + 6 + 2;
    branches.insert(at, 0xE9);
    fixture.write("feeders/f1/branches.csv", &branches);
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/nodes.csv: line 3: the file is not UTF-8 text (first bad byte on this \
             line); save it as UTF-8",
            "feeders/f1/branches.csv: line 2: the file is not UTF-8 text (first bad byte on this \
             line); save it as UTF-8",
        ]
    );
}

#[test]
fn ragged_rows_are_reported_once() {
    let fixture = Fixture::good();
    fixture.write(
        "feeders/f1/nodes.csv",
        NODES
            .replace(" 50 , b ,2,0,10", " 50 , b ,2")
            .replace("20,c,,,", "20,c,,,,,\n"),
    );
    fixture.write(
        "feeders/f1/branches.csv",
        BRANCHES
            .replace("b3,c,a,,,0.3,0.2,150,1", "b3,c,a,,,0.3,0.2,150,1,7")
            .replace("b4,b,c,,,0.1,0.1,100,False", "b4,b,c,,,0.1,0.1,100,False,,"),
    );
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/nodes.csv: line 4: the row has 3 cells but the header has 5 columns",
            "feeders/f1/branches.csv: line 4: the row has 10 cells but the header has 9 columns (a \
             comma inside a value needs quotes)",
        ]
    );
}

#[test]
fn line_numbers_count_blank_lines_and_quoted_cells() {
    let fixture = Fixture::good();
    fixture.write(
        "feeders/f1/nodes.csv",
        "\r\nload_kw,id,x,y,load_kvar,note\r\n0,sub,0,0,0,\"two\nlines\"\r\n\n\r\n100,\"a\",1,0,30,\n   \n 50 , b ,2,0,-,\n20,c,,,,\n",
    );
    assert_eq!(
        fixture.errors(),
        ["feeders/f1/nodes.csv: line 9: column load_kvar: value \"-\": not a number"]
    );
    fixture.write(
        "feeders/f1/branches.csv",
        BRANCHES
            .replace("id,from", "\n\nid,from")
            .replace("b1,sub,a,ACSR50,2", "b1,sub,a,ACSR50,0"),
    );
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/nodes.csv: line 9: column load_kvar: value \"-\": not a number",
            "feeders/f1/branches.csv: line 4: column length_km: value \"0\": must be greater than 0",
        ]
    );
}

#[test]
fn feeder_toml_problems_name_the_line_and_key() {
    let fixture = Fixture::good();
    fixture.write("feeders/f1/feeder.toml", "name = \"x\"\nhead = \"subx\"\n");
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/feeder.toml: column nominal_kv: missing required key",
            "feeders/f1/feeder.toml: line 2: column head: value \"subx\": head is not a node of \
             nodes.csv",
        ]
    );

    fixture.write(
        "feeders/f1/feeder.toml",
        "nominal_kv = \"11\"\nhead = \"sub\"\n\nhead_voltage_pu = 11\n",
    );
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/feeder.toml: line 1: column nominal_kv: value \"\\\"11\\\"\": must be a \
             number",
            "feeders/f1/feeder.toml: line 4: column head_voltage_pu: value \"11\": must be a \
             per-unit value between 0.5 and 1.5",
        ]
    );

    fixture.write("feeders/f1/feeder.toml", "nominal_kv = -11.0\nhead = 7\n");
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/feeder.toml: line 1: column nominal_kv: value \"-11.0\": must be a finite \
             number greater than 0",
            "feeders/f1/feeder.toml: line 2: column head: value \"7\": must be a string (in double \
             quotes)",
        ]
    );

    fixture.write("feeders/f1/feeder.toml", "head = \"sub\"\nnominal_kv = \n");
    let errors = fixture.errors();
    assert_eq!(errors.len(), 1, "{errors:?}");
    assert!(
        errors[0].starts_with("feeders/f1/feeder.toml: line 2: TOML syntax error: "),
        "{errors:?}"
    );
}

#[test]
fn bad_conductor_libraries() {
    let fixture = Fixture::good();
    fixture.write(
        "feeders/conductors.csv",
        "type,r_ohm_per_km,x_ohm_per_km,rating_a\nACSR50,-0.6,0.35,200\nCU95,0,0,300\nACSR50,1,1,1\n,1,1,1\n",
    );
    assert_eq!(
        fixture.errors(),
        [
            "feeders/conductors.csv: line 2: column r_ohm_per_km: value \"-0.6\": must be 0 or more",
            "feeders/conductors.csv: line 3: column r_ohm_per_km: value \"0\": r_ohm_per_km and \
             x_ohm_per_km are both zero (a conductor needs an impedance)",
            "feeders/conductors.csv: line 4: column type: value \"ACSR50\": duplicate conductor \
             type (first defined on line 2)",
            "feeders/conductors.csv: line 5: column type: conductor type name is empty",
        ]
    );

    // A library missing a column is reported once; branches using it are not reported too.
    fixture.write(
        "feeders/f1/conductors.csv",
        "type,r_ohm_per_km,x_ohm_per_km\nCU95,0.19,0.09\n",
    );
    fixture.write("feeders/conductors.csv", "");
    assert_eq!(
        fixture.errors(),
        [
            "feeders/conductors.csv: the file is empty; it needs a header row naming its columns \
             (type, r_ohm_per_km, x_ohm_per_km, rating_a)",
            "feeders/f1/conductors.csv: line 1: column rating_a: missing required column",
        ]
    );
}

#[test]
fn every_error_of_a_feeder_is_reported_in_file_then_line_order() {
    let fixture = Fixture::good();
    fixture.write("feeders/f1/feeder.toml", "nominal_kv = 0\nhead = \"sub\"\n");
    fixture.write("feeders/f1/nodes.csv", nodes_plus("1,a,,,"));
    fixture.write(
        "feeders/f1/branches.csv",
        BRANCHES.replace("b1,sub,a,ACSR50,2", "b1,sub,a,ACSR99,x")
            + "b5,b,c,,,0.1,0.1,100,\nb6,c,q,,,0.1,0.1,100,\n",
    );
    assert_eq!(
        fixture.errors(),
        [
            "feeders/f1/feeder.toml: line 1: column nominal_kv: value \"0\": must be a finite \
             number greater than 0",
            "feeders/f1/nodes.csv: line 6: column id: value \"a\": duplicate node id (first \
             defined on line 3)",
            "feeders/f1/branches.csv: line 2: column length_km: value \"x\": not a number",
            "feeders/f1/branches.csv: line 2: column type: value \"ACSR99\": unknown conductor type \
             (not in feeders/conductors.csv nor in feeders/f1/conductors.csv); did you mean ACSR50?",
            // The walk reaches c through b5 first: b3 closes the loop.
            "feeders/f1/branches.csv: line 4: column id: value \"b3\": closed branch makes a loop \
             (node \"a\" is already reached from head \"sub\"); open one branch of the loop \
             (closed = false)",
            "feeders/f1/branches.csv: line 7: column to: value \"q\": unknown node",
        ]
    );
}

#[test]
fn discovery_finds_a_feeder_or_the_feeders_below_sorted() {
    let fixture = Fixture::good();
    fixture.write_feeder("a0");
    fixture.write("feeders/notes/readme.txt", "not a feeder");
    let found = discover_feeders(&fixture.path("feeders")).unwrap();
    assert_eq!(
        found,
        [fixture.path("feeders/a0"), fixture.path("feeders/f1")]
    );
    let found = discover_feeders(&fixture.path("feeders/f1")).unwrap();
    assert_eq!(found, [fixture.path("feeders/f1")]);

    assert_eq!(
        fixture.errors_of(discover_feeders(&fixture.path("nowhere"))),
        ["nowhere: no such folder"]
    );
    assert_eq!(
        fixture.errors_of(discover_feeders(&fixture.path("feeders/notes"))),
        [
            "feeders/notes: no feeder here: neither this folder nor any of its sub-folders holds a \
          feeder.toml"
        ]
    );
    assert_eq!(
        fixture.errors_of(discover_feeders(&fixture.path("feeders/notes/readme.txt"))),
        [
            "feeders/notes/readme.txt: this is a file; give a feeder folder (holding feeder.toml) or \
          a folder of feeder folders"
        ]
    );
    assert_eq!(
        fixture.errors_of(load_feeder(&fixture.path("feeders/missing"))),
        ["feeders/missing: no such folder"]
    );
}

#[test]
fn load_feeders_reads_all_and_reports_all_errors_together() {
    let fixture = Fixture::good();
    fixture.write_feeder("f2");
    let feeders = load_feeders(&fixture.path("feeders")).unwrap();
    let ids: Vec<&str> = feeders.iter().map(|f| f.id()).collect();
    assert_eq!(ids, ["f1", "f2"]);
    // f2 has no own library: CU95 comes from the shared one.
    assert!(close(feeders[1].branches()[1].r_ohm, 0.1));
    // One feeder given directly still uses its parent's library.
    assert_eq!(load_feeders(&fixture.path("feeders/f2")).unwrap().len(), 1);

    fixture.write(
        "feeders/conductors.csv",
        "type,r_ohm_per_km,x_ohm_per_km,rating_a,colour\nACSR50,0.6,0.35,-1,red\nCU95,0.2,0.1,300,\n",
    );
    fixture.write("feeders/f2/nodes.csv", nodes_plus("1,d,,,"));
    fixture.write("feeders/f3/feeder.toml", "nominal_kv = 11\n");
    assert_eq!(
        fixture.errors_of(load_feeders(&fixture.path("feeders"))),
        [
            // The shared library's error is reported once, not once per feeder.
            "feeders/conductors.csv: line 2: column rating_a: value \"-1\": must be greater than 0",
            "feeders/f2/nodes.csv: line 6: column id: value \"d\": node is not connected to head \
             \"sub\" through closed branches (island)",
            "feeders/f3/feeder.toml: column head: missing required key",
            "feeders/f3/nodes.csv: file not found",
            "feeders/f3/branches.csv: file not found",
        ]
    );
}
