//! The error catalogue of the study loader: every failure class names the
//! file and the line and column (or key) the user must fix.
//!
//! Expected positions are counted by hand in the texts of
//! `study_common::STUDY` (lines listed there) and `study_common::CSV`
//! (line 1 comment, line 2 header, lines 3-7 data). The contract checked is
//! the study-file description in src/study/mod.rs.

mod study_common;

use fitaudit::data::Dataset;
use fitaudit::study::{ParamEntry, Shadow, Study, StudyError, StudySpec};
use study_common::*;

fn csv_line(line: usize, new: &str) -> String {
    let mut l: Vec<&str> = CSV.lines().collect();
    l[line - 1] = new;
    l.join("\n") + "\n"
}

// ---------------------------------------------------------------- study file

#[test]
fn unknown_keys_are_errors_naming_key_line_and_column() {
    let e = err(&format!("ttle = 'x'\n{STUDY}"), CSV);
    has(&e, &["study.toml, line 1, column 1", "unknown field `ttle`"]);

    let e = err(&STUDY.replace("min = 0 }", "mni = 0 }"), CSV);
    has(
        &e,
        &[
            "study.toml, line 11, column 22",
            "unknown field `mni`",
            "(in `parameters.dT`)",
        ],
    );

    let e = err(&STUDY.replace("sigma = \"u\"", "sigam = \"u\""), CSV);
    has(&e, &["line 6, column 1", "unknown field `sigam`", "(in `data`)"]);

    let e = err(&format!("{STUDY}colour = 1\n"), CSV);
    has(
        &e,
        &["line 15, column 1", "unknown field `colour`", "(in `audit`)"],
    );

    let text = format!("{STUDY}bootstrap = {{ replicates = 100, schem = \"case\" }}\n");
    let e = err(&text, CSV);
    has(
        &e,
        &[
            "line 15, column 33",
            "unknown field `schem`",
            "(in `audit.bootstrap`)",
        ],
    );

    let e = err(&format!("{STUDY}[fit]\nmetod = \"lm\"\n"), CSV);
    has(&e, &["line 16, column 1", "unknown field `metod`", "(in `fit`)"]);
}

#[test]
fn toml_syntax_and_type_errors_name_line_and_column() {
    let e = err(&STUDY.replace("[model]", "[model"), CSV);
    has(&e, &["study.toml, line 7"]);

    let e = err(&STUDY.replace("sigma = \"u\"", "sigma = true"), CSV);
    has(&e, &["line 6, column 9", "expected a column name or one number"]);

    let e = err(&format!("{STUDY}[fit]\nmethod = \"newton\"\n"), CSV);
    has(
        &e,
        &[
            "line 16, column 10",
            "unknown variant `newton`",
            "`lm`",
            "`steepest`",
        ],
    );

    let e = err(&STUDY.replace("y = \"temp\"\n", ""), CSV);
    has(&e, &["study.toml", "missing field `y`"]);
}

#[test]
fn a_parameter_without_start_is_named() {
    let e = err(
        &STUDY.replace("T_env = { start = 20.0 }", "T_env = { min = 0 }"),
        CSV,
    );
    has(
        &e,
        &[
            "study.toml, line 10, column 9",
            "parameter `T_env` has no start",
            "parameters.T_env.start",
        ],
    );
}

#[test]
fn positions_hold_for_tables_given_only_by_dotted_headers() {
    // No `[parameters]` header: the parameters table exists only through
    // `[parameters.X]` headers (valid TOML, and such a table has no span).
    let params = "[parameters]\nT_env = { start = 20.0 }\ndT = { start = 50.0, min = 0 }\ntau = { start = 300, min = 1, max = 1e5 }\n";
    let dotted =
        "[parameters.T_env]\nstart = 20.0\n[parameters.dT]\nmin = 0\n[parameters.tau]\nstart = 300\n";
    let e = err(&STUDY.replace(params, dotted), CSV);
    has(
        &e,
        &["study.toml, line 11, column 1", "parameter `dT` has no start"],
    );
}

#[test]
fn a_start_outside_its_bounds_is_named() {
    let (_c, r) = load(&STUDY.replace("start = 300,", "start = 0,"), CSV);
    let e = r.unwrap_err();
    assert!(
        matches!(&e, StudyError::StartOutsideBounds { name, start, min, .. }
        if name == "tau" && *start == 0.0 && *min == 1.0)
    );
    has(
        &e.to_string(),
        &[
            "line 12, column 17",
            "`tau`",
            "(0) lies outside its bounds [1, 100000]",
        ],
    );
}

#[test]
fn min_not_below_max_is_named() {
    let e = err(&STUDY.replace("min = 1, max", "min = 1e6, max"), CSV);
    has(
        &e,
        &[
            "line 12, column 28",
            "`tau` has min = 1000000 not below max = 100000",
        ],
    );
    let e = err(&STUDY.replace("min = 1, max = 1e5", "min = 7, max = 7"), CSV);
    has(&e, &["`tau` has min = 7 not below max = 7"]);
}

#[test]
fn non_finite_and_non_decimal_numbers_in_the_study_file() {
    let e = err(&STUDY.replace("start = 20.0", "start = 0x10"), CSV);
    has(
        &e,
        &[
            "line 10, column 19",
            "`parameters.T_env.start`",
            "`0x10`",
            "hexadecimal",
        ],
    );
    let e = err(&STUDY.replace("start = 20.0", "start = inf"), CSV);
    has(
        &e,
        &[
            "line 10, column 19",
            "`parameters.T_env.start` must be a finite number",
        ],
    );
    // 1e400 overflows a double: the TOML reader refuses it with its position.
    let e = err(&STUDY.replace("start = 20.0", "start = 1e400"), CSV);
    has(
        &e,
        &[
            "line 10, column 19",
            "invalid floating-point number",
            "range of a double",
        ],
    );
    let e = err(&STUDY.replace("[audit]", "[constants]\nk = nan\n[audit]"), CSV);
    has(
        &e,
        &["line 14, column 5", "`constants.k` must be a finite number"],
    );
}

#[test]
fn audit_settings_are_validated_with_their_key() {
    let e = err(&format!("{STUDY}level = 1.5\n"), CSV);
    has(
        &e,
        &[
            "line 15, column 9",
            "`audit.level` must lie between 0.001 and 0.9999",
        ],
    );
    let e = err(&format!("{STUDY}profile = {{ points = 3 }}\n"), CSV);
    has(
        &e,
        &["line 15, column 22", "`audit.profile.points` must be at least 5"],
    );
}

#[test]
fn contour_pairs_must_name_free_parameters() {
    let text = format!("{STUDY}contours = {{ pairs = [[\"dT\", \"tau\"], [\"dT\", \"tua\"]] }}\n");
    let e = err(&text, CSV);
    has(
        &e,
        &[
            "line 15, column 38",
            "`audit.contours.pairs[1]` names `tua`, which is not a declared parameter",
        ],
    );
    let text = STUDY.replace(
        "T_env = { start = 20.0 }",
        "T_env = { start = 20.0, fixed = true }",
    );
    let e = err(
        &format!("{text}contours = {{ pairs = [[\"T_env\", \"tau\"]] }}\n"),
        CSV,
    );
    has(&e, &["`audit.contours.pairs[0]` names `T_env`, which is fixed"]);
}

#[test]
fn fit_settings_are_validated_with_their_key() {
    let e = err(&format!("{STUDY}[fit]\nmax_iterations = 0\n"), CSV);
    has(
        &e,
        &["line 16, column 18", "`fit.max_iterations` must be at least 1"],
    );
}

#[test]
fn no_parameters_is_an_error() {
    let text = STUDY.replace(
        "T_env = { start = 20.0 }\ndT = { start = 50.0, min = 0 }\ntau = { start = 300, min = 1, max = 1e5 }\n",
        "",
    );
    let e = err(&text, CSV);
    has(&e, &["study.toml, line 9", "declares no parameters"]);
}

#[test]
fn an_unknown_formula_name_names_key_position_and_suggestion() {
    let (_c, r) = load(&STUDY.replace("exp(-t/tau)", "exp(-t/tua)"), CSV);
    let e = r.unwrap_err();
    match &e {
        StudyError::UnknownName {
            name,
            column,
            suggestion,
            ..
        } => {
            assert_eq!(name, "tua");
            assert_eq!(*column, Some(19));
            assert_eq!(suggestion.as_deref(), Some("tau"));
        }
        other => panic!("{other}"),
    }
    // Column 19 of the formula is column 11 + 19 of line 8 (the formula
    // string opens with its quote at column 11).
    has(
        &e.to_string(),
        &[
            "study.toml, line 8, column 30",
            "`model.formula` uses `tua`",
            "did you mean `tau`?",
            "`T_env`, `dT`, `tau`, `t`",
        ],
    );
}

#[test]
fn a_formula_syntax_error_names_the_formula() {
    let e = err(&STUDY.replace("exp(-t/tau)", "exp(-t/tau"), CSV);
    has(&e, &["study.toml, line 8", "`model.formula`"]);
}

#[test]
fn an_unused_parameter_is_named() {
    let e = err(&STUDY.replace("[audit]", "k = { start = 1 }\n[audit]"), CSV);
    has(
        &e,
        &[
            "line 13, column 5",
            "parameter `k` is declared but `model.formula` does not use it",
        ],
    );
}

#[test]
fn names_that_shadow_say_which_wins() {
    let (_c, r) = load(&STUDY.replace("[audit]", "[constants]\nt = 5\n[audit]"), CSV);
    let e = r.unwrap_err();
    assert!(matches!(&e, StudyError::Shadowing { kind: Shadow::ConstantIsColumn, name, .. } if name == "t"));
    has(
        &e.to_string(),
        &[
            "line 14, column 5",
            "constant `t`",
            "x column `t`",
            "parameters first, then constants, then columns",
        ],
    );

    let text = STUDY.replace("[audit]", "[constants]\ntau = 5\n[audit]");
    let e = err(&text, CSV);
    has(
        &e,
        &[
            "line 14, column 7",
            "constant `tau`",
            "the parameter `tau`",
            "the constant would never be read",
        ],
    );

    let text = STUDY.replace("tau = {", "t = { start = 1 }\ntau = {");
    let e = err(&text, CSV);
    has(
        &e,
        &[
            "line 12, column 5",
            "parameter `t`",
            "x column `t`",
            "the column would never be read",
        ],
    );
}

#[test]
fn a_study_file_that_is_not_utf8_names_the_position() {
    let c = case_bytes("", CSV.as_bytes());
    let mut bytes = STUDY.as_bytes().to_vec();
    bytes.insert(16, 0xff); // after `title = "Cooling`
    std::fs::write(&c.study, bytes).unwrap();
    let e = fitaudit::study::load(&c.study).unwrap_err().to_string();
    has(&e, &["study.toml, line 1, column 17", "not valid UTF-8"]);
}

#[test]
fn a_missing_or_unnamed_data_file() {
    let e = err(&STUDY.replace("cooling.csv", "nope.csv"), CSV);
    has(
        &e,
        &[
            "nope.csv",
            "cannot read the data file",
            "study.toml, line 3, column 8",
        ],
    );
    let e = err(&STUDY.replace("file = \"cooling.csv\"\n", ""), CSV);
    has(&e, &["study.toml", "`data.file` is missing or empty"]);
    let e = fitaudit::study::load(std::path::Path::new("/nonexistent/dir/s.toml")).unwrap_err();
    has(
        &e.to_string(),
        &["/nonexistent/dir/s.toml", "cannot read the study file"],
    );
}

#[test]
fn an_x_header_that_is_no_identifier_needs_an_alias() {
    let text = STUDY.replace("x = \"t\"", "x = \"time (s)\"");
    let e = err(&text, &CSV.replace("t,temp", "time (s),temp"));
    has(
        &e,
        &[
            "line 4, column 5",
            "`data.x` names `time (s)`",
            "columns = { time = \"time (s)\" }",
            "write `time` in `data.x`",
        ],
    );
}

#[test]
fn aliases_must_name_existing_headers_and_not_hide_others() {
    let text = STUDY.replace("y = \"temp\"", "y = \"T\"\ncolumns = { T = \"Temp\" }");
    let e = err(&text, CSV);
    has(
        &e,
        &[
            "line 6, column 17",
            "`data.columns.T` names column `Temp`",
            "`t`, `temp`, `u`",
            "did you mean `temp`?",
        ],
    );

    let text = STUDY.replace("y = \"temp\"", "y = \"T\"\ncolumns = { t = \"temp\" }");
    let e = err(&text, CSV);
    has(
        &e,
        &["line 6, column 17", "`data.columns.t`", "is also a column header"],
    );
}

// ---------------------------------------------------------------- data file

#[test]
fn a_non_numeric_cell_names_line_column_and_header() {
    let (_c, r) = load(STUDY, &csv_line(4, "100,abc,0.2"));
    let e = r.unwrap_err();
    assert!(matches!(&e, StudyError::NotANumber { at, .. } if at.line == Some(4) && at.column == Some(2)));
    has(
        &e.to_string(),
        &[
            "cooling.csv, line 4, column 2",
            "`abc` in column 2 (`temp`) is not a number",
        ],
    );
    let e = err(STUDY, &csv_line(5, "0x1A,49.9,0.3"));
    has(&e, &["line 5, column 1", "(`t`)", "hexadecimal"]);
}

#[test]
fn an_empty_cell_names_line_column_and_header() {
    let e = err(STUDY, &csv_line(4, "100,,0.2"));
    has(
        &e,
        &["cooling.csv, line 4, column 2", "empty cell in column 2 (`temp`)"],
    );
}

#[test]
fn nan_infinite_and_overflowing_cells() {
    for cell in ["NaN", "inf", "-Infinity"] {
        let e = err(STUDY, &csv_line(6, &format!("300,{cell},0.2")));
        has(
            &e,
            &[
                "cooling.csv, line 6, column 2",
                &format!("`{cell}`"),
                "is not a finite number",
            ],
        );
    }
    let e = err(STUDY, &csv_line(6, "300,1e400,0.2"));
    has(&e, &["line 6, column 2", "`1e400`", "too large for a double"]);
}

#[test]
fn a_ragged_row_names_its_line() {
    let e = err(STUDY, &csv_line(5, "200,49.9"));
    has(
        &e,
        &["cooling.csv, line 5", "2 fields but the header (line 2) has 3"],
    );
    // Decimal commas in a comma file split numbers: the hint says so.
    let e = err(STUDY, &csv_line(5, "200,49,9,0,3"));
    has(&e, &["line 5", "5 fields", "decimal commas are not read"]);
}

#[test]
fn non_utf8_bytes_name_line_and_column() {
    let mut bytes = CSV.as_bytes().to_vec();
    let pos = CSV.find("58.2").unwrap() + 4;
    bytes.insert(pos, 0xe9); // Latin-1 e-acute
    let e = err_bytes(STUDY, &bytes);
    has(
        &e,
        &[
            "cooling.csv, line 4, column 2",
            "column 2 (`temp`)",
            "not valid UTF-8",
        ],
    );
}

#[test]
fn sigma_must_be_positive() {
    let (_c, r) = load(STUDY, &csv_line(5, "200,49.9,0"));
    let e = r.unwrap_err();
    assert!(matches!(&e, StudyError::BadSigma { value, .. } if *value == 0.0));
    has(
        &e.to_string(),
        &[
            "cooling.csv, line 5, column 3",
            "sigma 0 in column 3 (`u`) is not positive",
        ],
    );
    let e = err(STUDY, &csv_line(7, "600,34.6,-0.25"));
    has(&e, &["line 7, column 3", "sigma -0.25"]);
    let e = err(&STUDY.replace("sigma = \"u\"", "sigma = 0"), CSV);
    has(
        &e,
        &[
            "study.toml, line 6, column 9",
            "`data.sigma` must be a positive finite number",
        ],
    );
    let e = err(&STUDY.replace("sigma = \"u\"", "sigma = \"0.2\""), CSV);
    has(
        &e,
        &[
            "`data.sigma` names column `0.2`",
            "write the number without quotes",
        ],
    );
}

#[test]
fn a_duplicate_header_is_an_error_only_when_used() {
    let csv = "t,temp,u,temp\n0,70.1,0.2,1\n100,58.2,0.2,1\n200,49.9,0.3,1\n300,44.3,0.2,1\n";
    let e = err(STUDY, csv);
    has(
        &e,
        &["cooling.csv, line 1", "header `temp` appears in columns 2 and 4"],
    );
    let csv = "t,temp,u,note,note\n0,70.1,0.2,a,b\n100,58.2,0.2,a,b\n200,49.9,0.3,a,b\n300,44.3,0.2,a,b\n";
    let (_c, r) = load(STUDY, csv);
    assert_eq!(r.unwrap().dataset.len(), 4);
}

#[test]
fn a_missing_column_lists_the_columns_that_exist() {
    let (_c, r) = load(&STUDY.replace("y = \"temp\"", "y = \"temperature\""), CSV);
    let e = r.unwrap_err();
    assert!(matches!(&e, StudyError::MissingColumn { available, .. } if available == &["t", "temp", "u"]));
    has(
        &e.to_string(),
        &[
            "study.toml, line 5, column 5",
            "`data.y` names column `temperature`",
            "cooling.csv",
            "`t`, `temp`, `u`",
        ],
    );
    let text = STUDY.replace("x = \"t\"", "x = [\"t\", \"p\"]");
    let e = err(&text, CSV);
    has(&e, &["line 4, column 11", "`data.x[1]` names column `p`"]);
}

#[test]
fn no_header_and_no_data_rows() {
    let e = err(STUDY, "# nothing here\n\n");
    has(&e, &["cooling.csv", "the data file is empty"]);
    let e = err(STUDY, "# header only\nt,temp,u\n");
    has(&e, &["cooling.csv", "no data rows"]);
}

#[test]
fn fewer_points_than_free_parameters_plus_one() {
    let csv = "t,temp,u\n0,70.1,0.2\n100,58.2,0.2\n200,49.9,0.3\n";
    let (_c, r) = load(STUDY, csv);
    let e = r.unwrap_err();
    assert!(matches!(
        &e,
        StudyError::TooFewPoints {
            points: 3,
            free: 3,
            needed: 4,
            ..
        }
    ));
    has(
        &e.to_string(),
        &[
            "cooling.csv",
            "3 data points cannot fit 3 free parameters",
            "at least 4",
        ],
    );
    let e = err(STUDY, "t,temp,u\n0,70.1,0.2\n");
    has(&e, &["1 data point cannot fit 3 free parameters"]);
    // Fixing one parameter makes three points enough.
    let text = STUDY.replace(
        "T_env = { start = 20.0 }",
        "T_env = { start = 20.0, fixed = true }",
    );
    let (_c, r) = load(&text, csv);
    assert_eq!(r.unwrap().free_parameters(), 2);
}

#[test]
fn a_decimal_comma_in_a_semicolon_file_says_use_a_point() {
    let csv = "t;temp;u\n0;70,1;0.2\n100;58.2;0.2\n200;49.9;0.3\n300;44.3;0.2\n";
    let (_c, r) = load(STUDY, csv);
    let e = r.unwrap_err();
    assert!(matches!(&e, StudyError::DecimalComma { .. }));
    has(
        &e.to_string(),
        &[
            "cooling.csv, line 2, column 2",
            "`70,1`",
            "(`temp`)",
            "decimal commas are not read",
            "use '.'",
            "`70.1`",
        ],
    );
}

#[test]
fn x_columns_that_are_all_constant_are_an_error() {
    let csv = "t,temp,u\n5,70.1,0.2\n5,58.2,0.2\n5,49.9,0.3\n5,44.3,0.2\n";
    let e = err(STUDY, csv);
    has(&e, &["cooling.csv", "every x column is constant (`t`)"]);
}

#[test]
fn a_model_not_finite_at_the_starts_names_the_data_line() {
    // log(0) = -inf at t = 0, which is the second data row (line 4); the
    // one x column `t` is the first field of the row (column 1).
    let text = STUDY.replace("dT*exp(-t/tau)", "dT*log(t/tau)");
    let csv = "t,temp,u\n# first\n100,58.2,0.2\n0,70.1,0.2\n200,49.9,0.3\n300,44.3,0.2\n";
    let (_c, r) = load(&text, csv);
    let e = r.unwrap_err();
    assert!(matches!(
        &e,
        StudyError::NotFiniteAtStart {
            point: 2,
            derivative: false,
            ..
        }
    ));
    has(
        &e.to_string(),
        &[
            "cooling.csv, line 4, column 1",
            "model value is not finite",
            "t = 0",
            "point 2",
            "study.toml",
        ],
    );
    // exp(-tau/t) is 0 at t = 0 but its tau-derivative -exp(-tau/t)/t is not finite.
    let text = STUDY.replace("dT*exp(-t/tau)", "dT*exp(-tau/t)");
    let (_c, r) = load(&text, csv);
    let e = r.unwrap_err();
    assert!(
        matches!(
            &e,
            StudyError::NotFiniteAtStart {
                point: 2,
                derivative: true,
                ..
            }
        ),
        "{e}"
    );
}

// ---------------------------------------------------------------- programmatic

#[test]
fn an_inconsistent_programmatic_data_set_is_named() {
    let spec = || StudySpec::new("a*x", vec![("a".into(), ParamEntry::start(1.0))]);
    let ds = Dataset::single("x", vec![1.0, 2.0], "y", vec![1.0, 2.0, 3.0], None);
    let e = Study::from_dataset(spec(), ds, "prog").unwrap_err().to_string();
    has(&e, &["prog", "x column `x` has 2 values but y has 3"]);
    let ds = Dataset::single("x", vec![1.0, 2.0, 3.0], "y", vec![1.0, f64::NAN, 3.0], None);
    let e = Study::from_dataset(spec(), ds, "prog").unwrap_err().to_string();
    has(&e, &["y is not finite at point 2"]);
    let ds = Dataset::single(
        "x",
        vec![1.0, 2.0, 3.0],
        "y",
        vec![1.0, 2.0, 3.0],
        Some(vec![1.0, 0.0, 1.0]),
    );
    let e = Study::from_dataset(spec(), ds, "prog").unwrap_err().to_string();
    has(&e, &["sigma 0 at point 2"]);
    // A spec built in code has no positions: errors name the key instead.
    let mut s = spec();
    s.parameters[0].1.min = Some(2.0);
    let ds = Dataset::single("x", vec![1.0, 2.0, 3.0], "y", vec![1.0, 2.0, 3.0], None);
    let e = Study::from_dataset(s, ds, "prog").unwrap_err().to_string();
    has(
        &e,
        &["prog: the start of parameter `a` (1)", "parameters.a.start"],
    );
}
