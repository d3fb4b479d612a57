//! Gate syntax, baselines and verdicts.

use super::*;

fn run(id: u128, status: &str, pinned: bool, rmse: f64) -> StoredRun {
    StoredRun {
        run_id: Uuid::from_u128(id),
        job: "j".into(),
        primary_run_id: None,
        status: status.into(),
        started_at: String::new(),
        finished_at: None,
        scheme: "grid".into(),
        model: "ols".into(),
        units_used: None,
        input_fingerprint: None,
        parameters: serde_json::Value::Null,
        error_message: None,
        pinned,
        scores: vec![
            ("rmse".into(), "pooled".into(), Some(rmse)),
            ("rmse".into(), "fold_mean".into(), Some(99.0)),
            ("r2".into(), "pooled".into(), Some(0.5)),
        ],
    }
}

#[test]
fn gates_parse_in_both_forms_and_print_back() {
    let gate = Gate::parse(" rmse <= 1.25 ").unwrap();
    assert_eq!(gate.limit, Limit::Absolute(1.25));
    assert_eq!(gate.op, Op::AtMost);
    assert_eq!(gate.to_string(), "rmse<=1.25");
    let gate = Gate::parse("RMSE<=+10%").unwrap();
    assert_eq!(gate.limit, Limit::Relative(10.0));
    assert_eq!(gate.to_string(), "rmse<=+10%");
    assert_eq!(Gate::parse("r2>=-5%").unwrap().limit, Limit::Relative(-5.0));
    assert_eq!(Gate::parse("bias>=-0.5").unwrap().op, Op::AtLeast);
    let json = serde_json::to_string(&gate).unwrap();
    assert_eq!(serde_json::from_str::<Gate>(&json).unwrap(), gate);
}

#[test]
fn bad_gates_say_what_is_wrong() {
    let message = |text: &str| Gate::parse(text).unwrap_err().to_string();
    assert!(message("rmse 1.25").contains("no comparison"));
    assert!(message("rmse=1").contains("must be <="));
    assert!(message("rsme<=1").contains("unknown score \"rsme\""));
    assert!(message("rmse<=10%").contains("has a sign"));
    assert!(message("rmse<=abc").contains("neither a number"));
    assert!(message("rmse>=1").contains("from above"));
    assert!(message("r2<=0.9").contains("from below"));
    assert!(message("bias<=+5%").contains("absolute limit"));
    assert!(message("rmse<=inf").contains("finite"));
    assert_eq!(
        Gate::parse("rmse 1").unwrap_err().exit_code(),
        crate::error::exit::USAGE
    );
}

#[test]
fn the_median_of_an_even_count_is_the_mean_of_the_middle_two() {
    // Definition of the sample median (common practice, no source).
    assert_eq!(median(&mut [3.0, 1.0, 2.0]), Some(2.0));
    assert_eq!(median(&mut [4.0, 1.0, 3.0, 2.0]), Some(2.5));
    assert_eq!(median(&mut []), None);
}

#[test]
fn a_pinned_run_beats_the_median_and_the_current_run_never_counts() {
    let history = vec![
        run(9, "succeeded", false, 100.0), // the current run
        run(8, "failed", false, 50.0),
        run(7, "succeeded", false, 1.0),
        run(6, "succeeded", false, 3.0),
        run(5, "succeeded", false, 2.0),
        run(4, "succeeded", false, 10.0),
    ];
    let current = Uuid::from_u128(9);
    let median3 = choose_baseline(&history, current, 3).unwrap();
    assert_eq!(median3.get("rmse"), Some(2.0));
    match &median3.source {
        BaselineSource::Median { run_ids, .. } => assert_eq!(
            run_ids,
            &vec![Uuid::from_u128(7), Uuid::from_u128(6), Uuid::from_u128(5)]
        ),
        other => panic!("{other:?}"),
    }
    let mut pinned = history.clone();
    pinned[4].pinned = true;
    let baseline = choose_baseline(&pinned, current, 3).unwrap();
    assert_eq!(
        baseline.source,
        BaselineSource::Pinned {
            run_id: Uuid::from_u128(5)
        }
    );
    assert_eq!(baseline.get("rmse"), Some(2.0));
    assert!(choose_baseline(&history[..2], current, 3).is_none());
}

#[test]
fn relative_and_absolute_limits_in_both_directions() {
    let baseline = Baseline {
        source: BaselineSource::Pinned {
            run_id: Uuid::nil(),
        },
        scores: vec![("rmse".into(), Some(2.0)), ("r2".into(), Some(-0.4))],
    };
    let scores = vec![
        ("rmse".to_string(), "pooled".to_string(), Some(2.2)),
        ("r2".to_string(), "pooled".to_string(), Some(-0.42)),
    ];
    let gates = parse_all(&[
        "rmse<=+10%".into(),
        "rmse<+10%".into(),
        "rmse<=2.1".into(),
        "r2>=-10%".into(),
        "r2>=-0.41".into(),
        "mae<=1".into(),
    ])
    .unwrap();
    let results = evaluate(&gates, &scores, Some(&baseline));
    let verdicts: Vec<Verdict> = results.iter().map(|r| r.verdict).collect();
    use Verdict::*;
    // 2.2 ≤ 2.2 passes, 2.2 < 2.2 does not; r2 limit −0.4 − 0.04 = −0.44.
    assert_eq!(
        verdicts,
        vec![Passed, Breached, Breached, Passed, Breached, Breached]
    );
    assert!((results[0].limit.unwrap() - 2.2).abs() < 1e-12);
    assert!((results[3].limit.unwrap() + 0.44).abs() < 1e-12);
    assert_eq!(results[5].value, None, "mae was not stored: undefined");
    assert!(results[1].describe().contains("BREACHED"));
    assert!(results[1].describe().contains("baseline 2 (pinned run"));
    let none = evaluate(&gates[..1], &scores, None);
    assert_eq!(none[0].verdict, NoBaseline);
    assert!(!any_breached(&none));
}

#[test]
fn a_gate_on_a_score_the_family_produces_is_accepted() {
    assert!(Gate::parse("rmse<=1")
        .unwrap()
        .check(Family::Regression)
        .is_ok());
}
