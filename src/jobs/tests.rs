//! Job files: keys become the same `run` options as on the command line,
//! and every error names the line and key at fault.

use super::*;
use crate::error::exit;
use crate::spec::{ResultsRef, SourceRef};

const TWO_JOBS: &str = r#"# nightly validation of two invented jobs
[job.nitrate]
db = "host=gis.example dbname=basin"
table = "hydro.subcatchments"
target = "nitrate_mg_l"
features = ["farmland_share", "rainfall_mm"]
block-size = 4000
folds = 5
gate = ["rmse<=+10%", "r2>=0.2"]
also-random = true
strict = false
lock-timeout = 12.5

[job.phosphate]
gpkg = "basin.gpkg"
layer = "subcatchments"
target = "phosphate_mg_l"
features = "farmland_share,elevation_m"
scheme = "random"
skip-unchanged = true
"#;

fn parse(text: &str) -> JobFile {
    JobFile::parse(Path::new("nightly.toml"), text).unwrap()
}

fn spec(text: &str, job: &str) -> Result<RunSpec, Error> {
    let file = parse(text);
    let job = file.job(job)?;
    file.spec(job, &Overrides::default())
}

/// The error of a job file, with its line and key.
fn fault(text: &str) -> (usize, Option<String>, String) {
    let outcome = JobFile::parse(Path::new("nightly.toml"), text)
        .and_then(|file| file.spec(&file.jobs[0], &Overrides::default()).map(|_| ()));
    match outcome {
        Err(error @ Error::JobFile { .. }) => {
            assert_eq!(error.exit_code(), exit::CONFIG);
            let text = error.to_string();
            match error {
                Error::JobFile { line, key, .. } => (line, key, text),
                _ => unreachable!(),
            }
        }
        other => panic!("expected a job-file error, got {other:?}"),
    }
}

fn overrides(args: &[&str]) -> Overrides {
    let matches = run_command().try_get_matches_from(args).unwrap();
    Overrides::from_matches(&matches)
}

#[test]
fn two_jobs_become_two_specs_in_file_order() {
    let file = parse(TWO_JOBS);
    let names: Vec<&str> = file.jobs.iter().map(|j| j.name.as_str()).collect();
    assert_eq!(names, ["nitrate", "phosphate"]);
    assert_eq!(file.jobs[0].line, 2);
    assert_eq!(file.jobs[1].line, 14);

    let nitrate = spec(TWO_JOBS, "nitrate").unwrap();
    assert_eq!(nitrate.job.as_deref(), Some("nitrate"));
    assert_eq!(
        nitrate.source,
        SourceRef::Postgis {
            db: Some("host=gis.example dbname=basin".into()),
            table: "hydro.subcatchments".into()
        }
    );
    assert_eq!(nitrate.columns.features, ["farmland_share", "rainfall_mm"]);
    assert_eq!(
        nitrate.scheme_options["block-size"],
        serde_json::json!(4000.0)
    );
    assert_eq!(nitrate.scheme_options["folds"], serde_json::json!(5));
    assert_eq!(
        nitrate
            .gates
            .iter()
            .map(|g| g.to_string())
            .collect::<Vec<_>>(),
        ["rmse<=+10%", "r2>=0.2"]
    );
    assert!(nitrate.compare_random && !nitrate.strict && !nitrate.skip_unchanged);
    assert_eq!(nitrate.limits.lock_timeout_s, 12.5);
    assert!(
        matches!(nitrate.results, ResultsRef::Postgis { ref schema, .. } if schema == "geofold")
    );

    let phosphate = spec(TWO_JOBS, "phosphate").unwrap();
    assert_eq!(
        phosphate.columns.features,
        ["farmland_share", "elevation_m"]
    );
    assert_eq!(phosphate.scheme, "random");
    assert!(phosphate.skip_unchanged);
    assert_eq!(
        phosphate.results,
        ResultsRef::Gpkg {
            file: "basin.gpkg".into()
        }
    );
}

#[test]
fn the_same_options_on_the_command_line_give_the_same_spec() {
    let from_file = spec(TWO_JOBS, "nitrate").unwrap();
    let matches = run_command()
        .try_get_matches_from([
            "--db=host=gis.example dbname=basin",
            "--table=hydro.subcatchments",
            "--target=nitrate_mg_l",
            "--features=farmland_share,rainfall_mm",
            "--block-size=4000",
            "--folds=5",
            "--gate=rmse<=+10%",
            "--gate=r2>=0.2",
            "--also-random",
            "--lock-timeout=12.5",
            "--job=nitrate",
        ])
        .unwrap();
    let from_options = RunArgs::from_arg_matches(&matches).unwrap().spec().unwrap();
    assert_eq!(from_file, from_options);
}

#[test]
fn command_line_options_replace_the_file_values_in_every_job() {
    let file = parse(TWO_JOBS);
    let given = overrides(&[
        "--config=nightly.toml",
        "--job=nitrate",
        "--block-size=2500",
        "--gate=mae<=3",
        "--wait=60",
    ]);
    let spec = file.spec(&file.jobs[0], &given).unwrap();
    assert_eq!(spec.scheme_options["block-size"], serde_json::json!(2500.0));
    assert_eq!(
        spec.gates.iter().map(|g| g.to_string()).collect::<Vec<_>>(),
        ["mae<=3"],
        "the command line's gates replace the file's"
    );
    assert_eq!(spec.limits.wait_s, 60.0);
    assert_eq!(
        spec.limits.lock_timeout_s, 12.5,
        "not given: the file's value"
    );
    assert_eq!(spec.job.as_deref(), Some("nitrate"));
}

#[test]
fn unknown_keys_are_errors_with_their_line_and_a_suggestion() {
    let (line, key, text) =
        fault("[job.a]\ntable = \"s.t\"\ntarget = \"y\"\nfeatures = [\"x\"]\nblock_size = 4000\n");
    assert_eq!((line, key.as_deref()), (5, Some("block_size")));
    assert!(text.contains("did you mean block-size"), "{text}");
    assert!(
        text.starts_with("nightly.toml:5: job a, key block_size: unknown key"),
        "{text}"
    );
    let (line, key, _) = fault("[job.a]\ntarget = \"y\"\n\n[defaults]\ndb = \"x\"\n");
    assert_eq!((line, key.as_deref()), (4, Some("defaults")));
    let (line, key, text) = fault("[job.a]\njob = \"b\"\n");
    assert_eq!((line, key.as_deref()), (2, Some("job")));
    assert!(text.contains("NAME of its [job.NAME] table"), "{text}");
}

#[test]
fn bad_values_point_at_their_key() {
    let base = "[job.a]\ntable = \"s.t\"\ntarget = \"y\"\nfeatures = [\"x\"]\n";
    let at = |extra: &str| fault(&format!("{base}{extra}"));
    let (line, key, text) = at("block-size = \"big\"\n");
    assert_eq!((line, key.as_deref()), (5, Some("block-size")));
    assert!(text.contains("invalid value 'big'"), "{text}");
    let (line, key, text) = at("block-size = 0\n");
    assert_eq!((line, key.as_deref()), (5, Some("block-size")));
    assert!(text.contains("--block-size"), "{text}");
    let (_, key, text) = at("strict = \"yes\"\n");
    assert_eq!(key.as_deref(), Some("strict"));
    assert!(text.contains("is a flag"), "{text}");
    let (_, key, text) = at("seed = [1, 2]\n");
    assert_eq!(key.as_deref(), Some("seed"));
    assert!(text.contains("one value, not a list"), "{text}");
    let (_, key, text) = at("folds = true\n");
    assert_eq!(key.as_deref(), Some("folds"));
    assert!(text.contains("not true or false"), "{text}");
    let (line, key, text) = at("\ngate = [\"rmse>=1\"]\n");
    assert_eq!((line, key.as_deref()), (6, Some("gate")));
    assert!(text.contains("from above"), "{text}");
    let (_, key, _) = at("gpkg = \"x.gpkg\"\n");
    assert!(
        matches!(key.as_deref(), Some("gpkg" | "table")),
        "a conflict names one of the two keys: {key:?}"
    );
}

#[test]
fn a_missing_option_points_at_the_job_header() {
    let (line, key, text) = fault("\n\n[job.late]\ntable = \"s.t\"\nfeatures = [\"x\"]\n");
    assert_eq!((line, key), (3, None));
    assert!(text.contains("--target"), "{text}");
}

#[test]
fn toml_that_does_not_parse_names_its_line() {
    let error = JobFile::parse(
        Path::new("nightly.toml"),
        "[job.a]\ntable = \"s.t\"\ntarget = \n",
    )
    .unwrap_err();
    match &error {
        Error::JobFile { line, .. } => assert_eq!(*line, 3, "{error}"),
        other => panic!("{other:?}"),
    }
    assert!(error.to_string().contains("not valid TOML"));
    assert!(JobFile::parse(Path::new("x.toml"), "# nothing\n")
        .unwrap_err()
        .to_string()
        .contains("no jobs"));
}

#[test]
fn a_job_name_must_be_a_job_label() {
    let (line, _, text) =
        fault("[job.Bad-Name]\ntable = \"s.t\"\ntarget = \"y\"\nfeatures = [\"x\"]\n");
    assert_eq!(line, 1);
    assert!(text.contains("a job label is lower-case"), "{text}");
}

#[test]
fn selecting_a_job_that_is_not_there_lists_the_jobs() {
    let file = parse(TWO_JOBS);
    let error = file.job("sulphate").unwrap_err();
    assert_eq!(error.exit_code(), exit::USAGE);
    assert!(error.to_string().contains("nitrate, phosphate"));
}
