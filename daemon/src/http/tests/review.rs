//! The engineer's review over HTTP: only an engineer adjusts or approves; every revision is stored and
//! journalled with the engineer's name and reason; the proposal stays beside the adjusted values; a
//! revision can be withdrawn; an approval freezes the values and a later revision withdraws it; every bad
//! input is refused by name and changes nothing.

use super::*;

/// Seating 5 kPa, then these stresses, each a Terzaghi curve of this much primary settlement (mm) over a
/// 10 mm drainage path with cv = 1 mm²/min (invented test data): a stiff start, a bend, a steep part.
const STEPS: [(f64, f64); 5] = [(25.0, 0.08), (50.0, 0.10), (100.0, 0.45), (200.0, 0.80), (400.0, 0.80)];

/// A test on F1 with the load steps of [`STEPS`], each 3000 min long; all but the last ended (the next
/// began), the last ready. Returns the test id.
async fn test_with_steps(b: &Bench) -> i64 {
    let (status, _, started) =
        send(&b.state, request("POST", "/api/frames/F1/tests", Some(specimen()), Who::Operator)).await;
    assert_eq!(status, StatusCode::CREATED, "{started}");
    let test_id: i64 = serde_json::from_str::<Value>(&started).unwrap()["test"]["test_id"].as_i64().unwrap();
    let key = b.state.lab.key(0);
    let reading = |at_us: i64, d: f64| {
        for (channel, value) in [(ChannelKind::Displacement, d), (ChannelKind::Load, 15.83)] {
            b.state.writer.reading(Reading { frame_key: key, channel, at_us, raw: value, value }).unwrap();
        }
    };
    let mut zero = 3.0;
    reading(START_US + 1_000_000, zero);
    let mut onset_us = START_US + 600_000_000;
    for (i, &(stress_kpa, primary)) in STEPS.iter().enumerate() {
        b.state.lab.arm(0, stress_kpa, onset_us - 60_000_000, Some("olga".into())).unwrap();
        b.state.lab.set_onset(0, onset_us, OnsetSource::LoadStep, format!("load step {}: t0 (test)", i + 1)).unwrap();
        reading(onset_us, zero);
        let mut d = zero;
        for k in 0..300 {
            let t_min = 0.05 * 10f64.powf(k as f64 * (60_000f64).log10() / 299.0);
            d = zero + primary * degree_of_consolidation(t_min / 100.0) + 0.004 * (1.0 + t_min / 300.0).log10();
            reading(onset_us + (t_min * 6e7) as i64, d);
        }
        b.state.lab.set_ready(0, onset_us + 2_000 * 60_000_000, format!("load step {}: ready (test)", i + 1)).unwrap();
        zero = d;
        onset_us += 3_100 * 60_000_000;
    }
    settle(b);
    b.clock.advance_us(onset_us - START_US);
    test_id
}

async fn post(b: &Bench, path: &str, body: Value, who: Who) -> (StatusCode, Value) {
    let (status, _, text) = send(&b.state, request("POST", path, Some(body), who)).await;
    (status, serde_json::from_str(&text).unwrap_or(Value::String(text)))
}

async fn get(b: &Bench, path: &str) -> Value {
    let (status, _, text) = send(&b.state, request("GET", path, None, Who::Viewer)).await;
    assert_eq!(status, StatusCode::OK, "{path}: {text}");
    serde_json::from_str(&text).unwrap()
}

#[tokio::test]
async fn only_an_engineer_adjusts_and_approves() {
    let b = bench(true);
    let id = test_with_steps(&b).await;
    let revise = json!({"choices": {"virgin_points_kpa": [100.0, 200.0]}, "reason": "the 400 kPa step crept"});
    for (path, body) in [
        (format!("/api/tests/{id}/revisions"), revise.clone()),
        (format!("/api/tests/{id}/preview"), json!({"choices": {"virgin_points_kpa": [100.0, 200.0]}})),
        (format!("/api/tests/{id}/approve"), json!({"note": "checked"})),
        (format!("/api/tests/{id}/revisions/1/withdraw"), json!({"reason": "no"})),
    ] {
        let (status, refused) = post(&b, &path, body.clone(), Who::Operator).await;
        assert_eq!(status, StatusCode::FORBIDDEN, "{path}: {refused}");
        assert!(refused["error"].as_str().unwrap().contains("only an engineer"), "{refused}");
        assert_eq!(post(&b, &path, body.clone(), Who::Viewer).await.0, StatusCode::FORBIDDEN, "{path}");
        assert_eq!(post(&b, &path, body, Who::Nobody).await.0, StatusCode::UNAUTHORIZED, "{path}");
    }
    assert_eq!(count(&b.state, Table::Revisions), 0, "nothing stored for the refused callers");
    // An engineer may do what an operator may.
    let (status, _) = post(&b, "/api/frames/F1/notes", json!({"text": "ring checked"}), Who::Engineer).await;
    assert_eq!(status, StatusCode::CREATED);
    let me = get(&b, "/api/me").await;
    assert_eq!(me["may_review"], false, "a viewer may not review");
    let (_, _, text) = send(&b.state, request("GET", "/api/me", None, Who::Engineer)).await;
    let me: Value = serde_json::from_str(&text).unwrap();
    assert_eq!(
        (me["role"].as_str(), me["may_act"].as_bool(), me["may_review"].as_bool()),
        (Some("engineer"), Some(true), Some(true))
    );
    // Without users nobody is named, so nobody may approve.
    let open = bench(false);
    let (status, _, text) = send(&open.state, request("POST", "/api/tests/1/approve", None, Who::Nobody)).await;
    assert_eq!(status, StatusCode::FORBIDDEN, "{text}");
    assert!(text.contains("signed-in engineer"), "{text}");
}

#[tokio::test]
async fn a_curve_revision_is_kept_beside_the_proposal_journalled_and_withdrawn() {
    let b = bench(true);
    let id = test_with_steps(&b).await;
    let before = get(&b, &format!("/api/tests/{id}/compression")).await;
    let auto_cc = before["compression"]["cc"]["index"].as_f64().unwrap();
    assert!(before["review"]["compression_adjusted"].as_array().unwrap().is_empty());

    // Preview first: the values under the choice, nothing stored.
    let (status, preview) = post(
        &b,
        &format!("/api/tests/{id}/preview"),
        json!({"choices": {"virgin_points_kpa": [50.0, 100.0]}}),
        Who::Engineer,
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{preview}");
    let preview_cc = preview["values"]["cc"].as_f64().unwrap();
    assert!((preview_cc - auto_cc).abs() > 1e-3, "the choice changes Cc: {preview_cc} vs {auto_cc}");
    assert_eq!(preview["proposal"]["cc"].as_f64(), Some(auto_cc));
    assert_eq!(count(&b.state, Table::Revisions), 0, "a preview stores nothing");

    let body = json!({"choices": {"virgin_points_kpa": [50.0, 100.0]}, "reason": "the steep part is 50–100 kPa"});
    let (status, saved) = post(&b, &format!("/api/tests/{id}/revisions"), body, Who::Engineer).await;
    assert_eq!(status, StatusCode::CREATED, "{saved}");
    assert_eq!(saved["adjusted"], json!(["virgin_points_kpa"]));
    assert_eq!(saved["before"]["cc"].as_f64(), Some(auto_cc));
    assert_eq!(saved["after"]["cc"].as_f64(), Some(preview_cc));
    let revision = saved["revision"].as_i64().unwrap();

    // Both values in the read; the stored points unchanged; the name and reason with them.
    let after = get(&b, &format!("/api/tests/{id}/compression")).await;
    assert_eq!(after["compression"]["cc"]["index"].as_f64(), Some(preview_cc));
    assert_eq!(after["review"]["compression_proposal"]["cc"].as_f64(), Some(auto_cc));
    assert_eq!(after["review"]["compression_adjusted"], json!(["virgin_points_kpa"]));
    assert_eq!(after["review"]["compression_revision"]["by"], "erik");
    assert_eq!(after["review"]["compression_revision"]["reason"], "the steep part is 50–100 kPa");
    let e = |v: &Value| {
        v["compression"]["points"]
            .as_array()
            .unwrap()
            .iter()
            .map(|p| (p["stress_kpa"].clone(), p["e"].clone()))
            .collect::<Vec<_>>()
    };
    assert_eq!(e(&after), e(&before), "the curve's points are the stored ones");
    let journal = testing::journal(&store::reader(&b.state.store_path).unwrap());
    let entry = journal.iter().find(|e| e.kind == EventKind::Revised).expect("a revised entry");
    assert_eq!(entry.actor.as_deref(), Some("erik"));
    assert!(
        entry.message.contains("virgin_points_kpa") && entry.message.contains("the steep part"),
        "{}",
        entry.message
    );

    // Withdrawn: a new revision, not a deletion; the proposal stands again.
    let (status, taken) = post(
        &b,
        &format!("/api/tests/{id}/revisions/{revision}/withdraw"),
        json!({"reason": "re-read the curve"}),
        Who::Engineer,
    )
    .await;
    assert_eq!(status, StatusCode::CREATED, "{taken}");
    assert_eq!(taken["after"]["cc"].as_f64(), Some(auto_cc));
    assert_eq!(count(&b.state, Table::Revisions), 2);
    let back = get(&b, &format!("/api/tests/{id}/compression")).await;
    assert_eq!(back["compression"]["cc"]["index"].as_f64(), Some(auto_cc));
    assert!(back["review"]["compression_adjusted"].as_array().unwrap().is_empty());
    let detail = get(&b, &format!("/api/tests/{id}")).await;
    let revisions = detail["revisions"].as_array().unwrap();
    assert_eq!(revisions.len(), 2);
    assert_eq!((revisions[0]["in_force"].as_bool(), revisions[1]["withdraws"].as_i64()), (Some(false), Some(revision)));
    // Twice is refused.
    let (status, again) =
        post(&b, &format!("/api/tests/{id}/revisions/{revision}/withdraw"), json!({"reason": "again"}), Who::Engineer)
            .await;
    assert_eq!(status, StatusCode::CONFLICT, "{again}");
}

#[tokio::test]
async fn an_approval_freezes_the_values_and_a_later_revision_withdraws_it() {
    let b = bench(true);
    let id = test_with_steps(&b).await;
    let detail = get(&b, &format!("/api/tests/{id}")).await;
    assert_eq!((detail["approved_by"].clone(), detail["approved_at"].clone()), (Value::Null, Value::Null));
    let (status, approved) =
        post(&b, &format!("/api/tests/{id}/approve"), json!({"note": "curve and cv checked"}), Who::Engineer).await;
    assert_eq!(status, StatusCode::CREATED, "{approved}");
    assert_eq!(approved["load_steps"], json!([1, 2, 3, 4, 5]));
    let detail = get(&b, &format!("/api/tests/{id}")).await;
    assert_eq!(detail["approved_by"], "erik");
    assert!(detail["approved_at"].as_str().unwrap().ends_with('Z'));
    let frozen = &detail["approvals"][0]["frozen"];
    let summary = get(&b, &format!("/api/tests/{id}/compression")).await;
    assert_eq!(frozen["curve"]["cc"], summary["compression"]["cc"]["index"], "the approved Cc is frozen");
    assert_eq!(frozen["load_steps"].as_array().unwrap().len(), 5);
    // A second approval while one is in force is refused.
    assert_eq!(post(&b, &format!("/api/tests/{id}/approve"), json!({}), Who::Engineer).await.0, StatusCode::CONFLICT);

    let body = json!({"choices": {"sigma_p_kpa": 80.0}, "reason": "σ′p from the site history"});
    let (status, saved) = post(&b, &format!("/api/tests/{id}/revisions"), body, Who::Engineer).await;
    assert_eq!(status, StatusCode::CREATED, "{saved}");
    assert_eq!(saved["withdrew_approval"].as_i64(), detail["approvals"][0]["id"].as_i64());
    let detail = get(&b, &format!("/api/tests/{id}")).await;
    assert_eq!(detail["approved_by"], Value::Null, "the change withdrew the approval");
    assert!(detail["approvals"][0]["withdrawn_at"].is_string());
    let journal = testing::journal(&store::reader(&b.state.store_path).unwrap());
    let kinds: Vec<&str> = journal
        .iter()
        .map(|e| e.kind.name())
        .filter(|k| ["approved", "revised", "approval-withdrawn"].contains(k))
        .collect();
    assert_eq!(kinds, ["approved", "revised", "approval-withdrawn"]);
    // Approved again over the adjusted value.
    let (status, _) =
        post(&b, &format!("/api/tests/{id}/approve"), json!({"note": "with σ′p 80 kPa"}), Who::Engineer).await;
    assert_eq!(status, StatusCode::CREATED);
    let detail = get(&b, &format!("/api/tests/{id}")).await;
    assert_eq!(detail["approvals"][1]["frozen"]["curve"]["sigma_p_chosen_kpa"], 80.0);
}

#[tokio::test]
async fn a_test_without_a_finished_load_step_cannot_be_approved() {
    let b = bench(true);
    let (status, started) = call_as(&b, "POST", "/api/frames/F1/tests", Some(specimen()), Who::Operator).await;
    assert_eq!(status, StatusCode::CREATED, "{started}");
    let id = started["test"]["test_id"].as_i64().unwrap();
    let (status, refused) =
        post(&b, &format!("/api/tests/{id}/approve"), json!({"note": "early"}), Who::Engineer).await;
    assert_eq!(status, StatusCode::CONFLICT, "{refused}");
    assert!(refused["error"].as_str().unwrap().contains("no finished load step"), "{refused}");
    assert_eq!(post(&b, "/api/tests/999/approve", json!({}), Who::Engineer).await.0, StatusCode::NOT_FOUND);
}

async fn call_as(b: &Bench, method: &str, path: &str, body: Option<Value>, who: Who) -> (StatusCode, Value) {
    let (status, _, text) = send(&b.state, request(method, path, body, who)).await;
    (status, serde_json::from_str(&text).unwrap_or(Value::String(text)))
}

#[tokio::test]
async fn bad_review_input_is_refused_by_name_and_changes_nothing() {
    let b = bench(true);
    let id = test_with_steps(&b).await;
    let path = format!("/api/tests/{id}/revisions");
    let cases: Vec<(Value, StatusCode, &str)> = vec![
        // Fewer than two points; a stress the test never applied; an unloading point on the virgin line.
        (
            json!({"choices": {"virgin_points_kpa": [100.0]}, "reason": "r"}),
            StatusCode::UNPROCESSABLE_ENTITY,
            "choices.virgin_points_kpa",
        ),
        (
            json!({"choices": {"virgin_points_kpa": [100.0, 150.0]}, "reason": "r"}),
            StatusCode::UNPROCESSABLE_ENTITY,
            "choices.virgin_points_kpa",
        ),
        (
            json!({"choices": {"unload_reload_points_kpa": [100.0, 200.0]}, "reason": "r"}),
            StatusCode::UNPROCESSABLE_ENTITY,
            "choices.unload_reload_points_kpa",
        ),
        (
            json!({"choices": {"max_curvature_kpa": 1.0}, "reason": "r"}),
            StatusCode::UNPROCESSABLE_ENTITY,
            "choices.max_curvature_kpa",
        ),
        // Unknown choice, nothing chosen, no reason, a control character in the reason.
        (json!({"choices": {"virgin": [1, 2]}, "reason": "r"}), StatusCode::UNPROCESSABLE_ENTITY, "choices"),
        (json!({"choices": {}, "reason": "r"}), StatusCode::UNPROCESSABLE_ENTITY, "choices"),
        (json!({"choices": {"sigma_p_kpa": 80.0}, "reason": ""}), StatusCode::UNPROCESSABLE_ENTITY, "reason"),
        (json!({"choices": {"sigma_p_kpa": 80.0}, "reason": "a\u{0007}"}), StatusCode::UNPROCESSABLE_ENTITY, "reason"),
        // A load step the test does not have; a step choice of the wrong shape.
        (json!({"seq": 9, "choices": {"t90_min": 5.0}, "reason": "r"}), StatusCode::UNPROCESSABLE_ENTITY, "seq"),
        (
            json!({"seq": 1, "choices": {"taylor_window_min": [1.0]}, "reason": "r"}),
            StatusCode::UNPROCESSABLE_ENTITY,
            "choices",
        ),
    ];
    for (body, status, field) in cases {
        let (got, answer) = post(&b, &path, body.clone(), Who::Engineer).await;
        assert_eq!(got, status, "{body}: {answer}");
        assert_eq!(answer["field"].as_str(), Some(field), "{body}: {answer}");
    }
    assert_eq!(count(&b.state, Table::Revisions), 0, "nothing stored");
    let journal = testing::journal(&store::reader(&b.state.store_path).unwrap());
    assert!(!journal.iter().any(|e| e.kind == EventKind::Revised));
}

#[tokio::test]
async fn a_step_revision_reaches_the_csv_and_the_report_with_the_proposal_and_the_approval() {
    let b = bench(true);
    let id = test_with_steps(&b).await;
    let report = |b: &Bench| {
        let state = b.state.clone();
        async move { send(&state, request("GET", &format!("/tests/{id}/report"), None, Who::Viewer)).await.2 }
    };
    assert!(report(&b).await.contains("Not yet reviewed by an engineer"));
    let proposed = get(&b, &format!("/api/tests/{id}/compression")).await["increments"][2].clone();
    let auto_t90 = proposed["t90_min"].as_f64().unwrap();
    let chosen = (auto_t90 * 1.5 * 100.0).round() / 100.0;
    let body = json!({"seq": 3, "choices": {"t90_min": chosen}, "reason": "t90 read by hand from the √t plot"});
    let (status, saved) = post(&b, &format!("/api/tests/{id}/revisions"), body, Who::Engineer).await;
    assert_eq!(status, StatusCode::CREATED, "{saved}");
    assert_eq!(saved["adjusted"], json!(["t90_min"]));
    let step = get(&b, &format!("/api/tests/{id}/compression")).await["increments"][2].clone();
    assert_eq!(step["t90_min"].as_f64(), Some(chosen));
    assert_eq!(step["proposal"]["t90_min"].as_f64(), Some(auto_t90));
    assert_eq!(step["revision"]["by"], "erik");
    // cv(√t) = 0.848·Hdr²/t90 [ref: cv-formula]: 1.5 × t90 gives cv / 1.5 (computed).
    let ratio = proposed["cv_taylor_mm2_per_min"].as_f64().unwrap() / step["cv_taylor_mm2_per_min"].as_f64().unwrap();
    assert!((ratio - chosen / auto_t90).abs() < 1e-9, "{ratio} vs {}", chosen / auto_t90);

    let (_, _, csv) =
        send(&b.state, request("GET", &format!("/api/tests/{id}/increments.csv"), None, Who::Viewer)).await;
    let rows: Vec<Vec<&str>> = csv.lines().map(|l| l.split(',').collect()).collect();
    let col =
        |name: &str| rows[0].iter().position(|h| *h == name).unwrap_or_else(|| panic!("no {name}: {:?}", rows[0]));
    assert!(rows[0].ends_with(&super::super::export::REVIEW_COLUMNS), "{:?}", rows[0]);
    assert_eq!((rows[3][col("adjusted")], rows[3][col("adjusted_by")]), ("t90_min", "erik"));
    assert_eq!(rows[3][col("t90_min")].parse::<f64>().unwrap(), chosen);
    let proposal: f64 = rows[3][col("proposal_t90_min")].parse().unwrap();
    assert!((proposal - auto_t90).abs() <= 1e-6 * auto_t90, "{proposal} vs {auto_t90}");
    assert_eq!((rows[1][col("adjusted")], rows[1][col("proposal_t90_min")]), ("", ""), "step 1 stands as proposed");
    // The e–σ′ table: the proposal's values beside each point (k = cv·mv·γw [ref: permeability]).
    let (_, _, csv) =
        send(&b.state, request("GET", &format!("/api/tests/{id}/compression.csv"), None, Who::Viewer)).await;
    let rows: Vec<Vec<&str>> = csv.lines().map(|l| l.split(',').collect()).collect();
    let col =
        |name: &str| rows[0].iter().position(|h| *h == name).unwrap_or_else(|| panic!("no {name}: {:?}", rows[0]));
    let (k, k0): (f64, f64) =
        (rows[3][col("k_m_per_s")].parse().unwrap(), rows[3][col("proposal_k_m_per_s")].parse().unwrap());
    // k takes the cv proposed for the step: moved by t90 only when that cv is √t's.
    let expected = if step["cv_method"] == "taylor" { chosen / auto_t90 } else { 1.0 };
    assert!((k0 / k - expected).abs() < 1e-5, "k {k} vs proposal {k0} ({})", step["cv_method"]);
    assert_eq!(rows[1][col("k_m_per_s")], rows[1][col("proposal_k_m_per_s")], "step 1's k is as proposed");

    let (status, _) =
        post(&b, &format!("/api/tests/{id}/approve"), json!({"note": "t90 of step 3 by hand"}), Who::Engineer).await;
    assert_eq!(status, StatusCode::CREATED);
    let html = report(&b).await;
    for needle in [
        "Reviewed and approved by erik on",
        "Adjustments by the engineer",
        "Load step 3",
        "t90 read by hand",
        "3 ✎",
        "Checked by</th><td>erik",
    ] {
        assert!(html.contains(needle), "the report lacks {needle:?}");
    }
    assert!(html.contains("qualified engineer"), "the cautions stay");
    // A later change withdraws the approval, and the report says so.
    let (status, _) = post(
        &b,
        &format!("/api/tests/{id}/revisions/{}/withdraw", saved["revision"]),
        json!({"reason": "the plot reading was wrong"}),
        Who::Engineer,
    )
    .await;
    assert_eq!(status, StatusCode::CREATED);
    let html = report(&b).await;
    assert!(
        html.contains("was withdrawn by revision") && !html.contains("Reviewed and approved by"),
        "the report still shows the approval"
    );
}
