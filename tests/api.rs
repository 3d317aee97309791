//! The operation set through the HTTP API: round trips, refusals that write
//! nothing, the guard (Host, Origin, content type, LAN token) and durable
//! acknowledgements.

use std::sync::Arc;

use axum::body::Body;
use axum::http::{Request, StatusCode};
use fieldcage_ops::Service;
use fieldcage_server::{Guard, router};
use http_body_util::BodyExt;
use serde_json::{Value, json};
use tower::ServiceExt;

use crate::util::{Temp, store_with};

const PORT: u16 = 8088;

struct Api {
    app: axum::Router,
    db: std::path::PathBuf,
    _tmp: Temp,
}

/// A freshly initialised demo experiment (no field records), field day 14.
fn api_with(guard: Guard) -> Api {
    let tmp = Temp::new();
    let store = store_with(&tmp, &[], 5);
    let db = store.path().to_path_buf();
    let service =
        Service::new(store).with_today(chrono::NaiveDate::from_ymd_opt(2026, 5, 25).unwrap());
    Api {
        app: router(Arc::new(service), guard),
        db,
        _tmp: tmp,
    }
}

fn api() -> Api {
    api_with(Guard::loopback(PORT))
}

impl Api {
    async fn send(&self, request: Request<Body>) -> (StatusCode, Value) {
        let response = self.app.clone().oneshot(request).await.unwrap();
        let status = response.status();
        let bytes = response.into_body().collect().await.unwrap().to_bytes();
        let value = serde_json::from_slice(&bytes).unwrap_or(Value::Null);
        (status, value)
    }

    async fn call(&self, op: &str, args: Value) -> (StatusCode, Value) {
        self.send(post(op, &args.to_string())).await
    }

    async fn ok(&self, op: &str, args: Value) -> Value {
        let (status, body) = self.call(op, args).await;
        assert_eq!(status, StatusCode::OK, "{op}: {body}");
        body
    }

    /// Everything stored, read through a second connection.
    fn stored(&self) -> String {
        let store = fieldcage_core::Store::open(&self.db).unwrap();
        crate::util::snapshot(&store)
    }
}

fn post(op: &str, body: &str) -> Request<Body> {
    Request::post(format!("/api/{op}"))
        .header("Host", format!("127.0.0.1:{PORT}"))
        .header("Content-Type", "application/json")
        .body(Body::from(body.to_owned()))
        .unwrap()
}

fn taxon(sheet: &Value, code: &str) -> String {
    let all = sheet["animals"]
        .as_array()
        .unwrap()
        .iter()
        .map(|a| &a["taxon"]);
    let plants = sheet["plants"].as_array().unwrap().iter();
    all.chain(plants)
        .find(|t| t["code"] == code)
        .map(|t| t["id"].as_str().unwrap().to_owned())
        .unwrap()
}

async fn first_cage(api: &Api) -> (String, Value) {
    let route = api.ok("route", json!({})).await;
    let id = route["blocks"][0]["cages"][0]["enclosure_id"]
        .as_str()
        .unwrap()
        .to_owned();
    let sheet = api.ok("sheet", json!({ "enclosure_id": id })).await;
    (id, sheet)
}

#[tokio::test]
async fn every_operation_round_trips() {
    let api = api();
    let overview = api.ok("overview", json!({})).await;
    assert_eq!(overview["day"], 14);
    let listed: Vec<&str> = overview["operations"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_str().unwrap())
        .collect();
    assert_eq!(listed.len(), fieldcage_ops::OPERATIONS.len());

    let route = api.ok("route", json!({})).await;
    let cages: usize = route["blocks"]
        .as_array()
        .unwrap()
        .iter()
        .map(|b| b["cages"].as_array().unwrap().len())
        .sum();
    assert_eq!(cages, 24);
    // Day 14 of the demo schedule: cover and damage (demo_data/definition.toml).
    assert_eq!(
        route["blocks"][0]["cages"][0]["due"],
        json!(["cover", "damage"])
    );
    assert_eq!(route["blocks"][0]["cages"][0]["state"], "not_started");

    let (cage, sheet) = first_cage(&api).await;
    let slug = taxon(&sheet, "SLUG");
    let grass = taxon(&sheet, "GRA1");

    let stocked = api
        .ok(
            "save_stocking",
            json!({ "enclosure_id": cage, "taxon_id": slug, "kind": "restock", "count": 3 }),
        )
        .await;
    assert_eq!(stocked["record"]["count"], 3);
    let census = api.ok("save_census", json!({ "enclosure_id": cage, "taxon_id": slug, "alive": 4, "dead": 1, "missing": null, "observer": "crew-T" })).await;
    assert_eq!(
        (
            census["record"]["alive"].clone(),
            census["record"]["missing"].clone()
        ),
        (json!(4), Value::Null)
    );
    // Saving again replaces the values of the same census line.
    let again = api
        .ok(
            "save_census",
            json!({ "enclosure_id": cage, "taxon_id": slug, "alive": 5, "dead": 1, "missing": 0 }),
        )
        .await;
    assert_eq!(again["record"]["id"], census["record"]["id"]);
    let cover = api
        .ok(
            "save_cover",
            json!({ "enclosure_id": cage, "taxon_id": grass, "percent": 42.5 }),
        )
        .await;
    assert_eq!(cover["record"]["cover_pct"], 42.5);
    let ground = api
        .ok(
            "save_cover",
            json!({ "enclosure_id": cage, "category": "litter", "percent": 50 }),
        )
        .await;
    assert_eq!(ground["record"]["category"], "litter");
    let leaf = api
        .ok(
            "tag_leaf",
            json!({ "enclosure_id": cage, "taxon_id": grass, "tag_label": "C-T9" }),
        )
        .await;
    let damage = api
        .ok(
            "save_damage",
            json!({ "leaf_id": leaf["id"], "class_code": "3" }),
        )
        .await;
    // Dirzo & Dominguez class 3 midpoint 18.5 % (from memory; docs/methods.md section 3).
    assert_eq!(damage["record"]["damage_pct"], 18.5);
    let replaced = api
        .ok(
            "set_leaf_fate",
            json!({ "leaf_id": leaf["id"], "fate": "replaced", "replacement_label": "C-T9b" }),
        )
        .await;
    assert_eq!(replaced["replaces_leaf_id"], leaf["id"]);
    let visit = api
        .ok(
            "start_visit",
            json!({ "enclosure_id": cage, "kind": "cover" }),
        )
        .await;
    assert_eq!(
        visit["id"], cover["visit_id"],
        "today's cover visit is found, not made twice"
    );
    let updated = api
        .ok(
            "update_visit",
            json!({ "visit_id": visit["id"], "notes": "ants on the mesh", "completed": true }),
        )
        .await;
    assert_eq!(
        (updated["notes"].clone(), updated["completed"].clone()),
        (json!("ants on the mesh"), json!(true))
    );

    let sheet = api.ok("sheet", json!({ "enclosure_id": cage })).await;
    let slug_line = sheet["animals"]
        .as_array()
        .unwrap()
        .iter()
        .find(|a| a["taxon"]["code"] == "SLUG")
        .unwrap();
    assert_eq!(slug_line["today"]["alive"], 5);
    assert_eq!(slug_line["restocked"], 3);
    assert_eq!(sheet["cover_records"].as_array().unwrap().len(), 2);

    let history = api
        .ok(
            "history",
            json!({ "table": "census", "id": census["record"]["id"] }),
        )
        .await;
    let alive: Vec<(Value, Value)> = history
        .as_array()
        .unwrap()
        .iter()
        .filter(|c| c["field"] == "alive")
        .map(|c| (c["old"].clone(), c["new"].clone()))
        .collect();
    assert_eq!(alive, [(Value::Null, json!(4)), (json!(4), json!(5))]);

    let undone = api
        .ok(
            "undo",
            json!({ "table": "census", "id": census["record"]["id"] }),
        )
        .await;
    assert_eq!(undone["action"], "restored");
    let sheet = api.ok("sheet", json!({ "enclosure_id": cage })).await;
    let slug_line = sheet["animals"]
        .as_array()
        .unwrap()
        .iter()
        .find(|a| a["taxon"]["code"] == "SLUG")
        .unwrap();
    assert_eq!(
        (
            slug_line["today"]["alive"].clone(),
            slug_line["today"]["missing"].clone()
        ),
        (json!(4), Value::Null)
    );

    let undo_insert = api
        .ok(
            "undo",
            json!({ "table": "cover_record", "id": ground["record"]["id"] }),
        )
        .await;
    assert_eq!(undo_insert["action"], "deleted");
    let deleted = api
        .ok(
            "delete_record",
            json!({ "table": "cover_record", "id": cover["record"]["id"] }),
        )
        .await;
    assert_eq!(deleted["table"], "cover_record");
    let sheet = api.ok("sheet", json!({ "enclosure_id": cage })).await;
    assert_eq!(sheet["cover_records"], json!([]));

    let route = api.ok("route", json!({})).await;
    assert_eq!(
        route["blocks"][0]["cages"][0]["state"], "partial",
        "cover finished, damage not yet"
    );
    // Results of an experiment whose cover records were removed and whose one
    // damage visit is left: damage of one cage, with no interval from one
    // cage, no contrast without a second treatment, no survival.
    let results = api.ok("results", json!({})).await;
    for chart in ["cover_over_time", "effect_sizes"] {
        assert_eq!(results["charts"][chart], json!([]), "{chart}");
    }
    let damage = results["charts"]["damage_by_treatment"].as_array().unwrap();
    assert_eq!(damage.len(), 2, "herbivory index and mean damage");
    for series in damage {
        let point = &series["points"][0];
        assert_eq!(
            (point["n"].as_i64(), &point["ci_low"]),
            (Some(1), &Value::Null)
        );
    }
    assert!(
        results["charts"]["survival_curves"]
            .as_array()
            .unwrap()
            .is_empty()
    );
    assert!(
        results["charts"]["predator_split"]
            .as_array()
            .unwrap()
            .is_empty()
    );
    assert_eq!(results["treatments"].as_array().unwrap().len(), 4);
}

#[tokio::test]
async fn bad_input_is_refused_naming_the_field_and_writes_nothing() {
    let api = api();
    let (cage, sheet) = first_cage(&api).await;
    let slug = taxon(&sheet, "SLUG");
    let before = api.stored();
    let cases = [
        // wrong type
        (
            "save_census",
            json!({ "enclosure_id": cage, "taxon_id": slug, "alive": "seven", "dead": 0, "missing": 0 }),
            StatusCode::BAD_REQUEST,
            "alive",
        ),
        // out of range (schemas/tables/census.json: minimum 0)
        (
            "save_census",
            json!({ "enclosure_id": cage, "taxon_id": slug, "alive": -1, "dead": 0, "missing": 0 }),
            StatusCode::UNPROCESSABLE_ENTITY,
            "census.alive",
        ),
        // unknown id
        (
            "save_census",
            json!({ "enclosure_id": "019e0000-0000-7000-8000-000000000000", "taxon_id": slug, "alive": 1, "dead": 0, "missing": 0 }),
            StatusCode::NOT_FOUND,
            "enclosure.id",
        ),
        // missing field
        (
            "save_census",
            json!({ "enclosure_id": cage, "alive": 1, "dead": 0, "missing": 0 }),
            StatusCode::BAD_REQUEST,
            ".",
        ),
        // a field that does not exist
        (
            "save_census",
            json!({ "enclosure_id": cage, "taxon_id": slug, "alive": 1, "dead": 0, "missing": 0, "colour": "red" }),
            StatusCode::BAD_REQUEST,
            ".",
        ),
        // cover above 100 %
        (
            "save_cover",
            json!({ "enclosure_id": cage, "category": "litter", "percent": 101 }),
            StatusCode::UNPROCESSABLE_ENTITY,
            "cover_record.value_pct",
        ),
        // a class code on a percent protocol
        (
            "save_cover",
            json!({ "enclosure_id": cage, "category": "litter", "class_code": "3" }),
            StatusCode::UNPROCESSABLE_ENTITY,
            "cover_record.entry",
        ),
        ("no_such_operation", json!({}), StatusCode::NOT_FOUND, ""),
    ];
    for (op, args, status, field) in cases {
        let (got, body) = api.call(op, args.clone()).await;
        assert_eq!(got, status, "{op} {args}: {body}");
        let error = &body["error"];
        assert!(
            error["message"].as_str().is_some_and(|m| !m.is_empty()),
            "{body}"
        );
        match field {
            "" => {}
            "." => {
                let text = format!("{} {}", error["field"], error["message"]);
                assert!(
                    text.contains("taxon_id") || text.contains("colour"),
                    "names the field: {body}"
                );
            }
            f => assert_eq!(error["field"], f, "{body}"),
        }
    }
    let (status, body) = api.send(post("save_census", "{not json")).await;
    assert_eq!(
        (status, body["error"]["code"].as_str()),
        (StatusCode::BAD_REQUEST, Some("bad_request"))
    );
    assert_eq!(api.stored(), before, "no refused request wrote anything");
}

#[tokio::test]
async fn a_save_is_on_disk_when_it_is_acknowledged() {
    let api = api();
    let (cage, sheet) = first_cage(&api).await;
    let slug = taxon(&sheet, "SLUG");
    let saved = api
        .ok(
            "save_census",
            json!({ "enclosure_id": cage, "taxon_id": slug, "alive": 6, "dead": 2, "missing": 1 }),
        )
        .await;
    // A second connection, opened after the answer, sees the committed row.
    let conn = rusqlite::Connection::open(&api.db).unwrap();
    let (alive, dead): (i64, i64) = conn
        .query_row(
            "SELECT alive, dead FROM census WHERE id = ?1",
            [saved["record"]["id"].as_str().unwrap()],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    assert_eq!((alive, dead), (6, 2));
}

#[tokio::test]
async fn the_guard_refuses_other_hosts_origins_and_content_types() {
    let api = api();
    let request = |host: &str, origin: Option<&str>, content_type: &str| {
        let mut b = Request::post("/api/overview")
            .header("Host", host)
            .header("Content-Type", content_type);
        if let Some(o) = origin {
            b = b.header("Origin", o);
        }
        b.body(Body::from("{}")).unwrap()
    };
    let own = format!("127.0.0.1:{PORT}");
    let cases = [
        (
            request(&own, None, "application/json"),
            StatusCode::OK,
            None,
        ),
        (
            request(
                &format!("localhost:{PORT}"),
                Some(&format!("http://localhost:{PORT}")),
                "application/json; charset=utf-8",
            ),
            StatusCode::OK,
            None,
        ),
        // DNS rebinding: a foreign name resolving to 127.0.0.1.
        (
            request(
                &format!("attacker.example:{PORT}"),
                None,
                "application/json",
            ),
            StatusCode::FORBIDDEN,
            Some("forbidden_host"),
        ),
        // Cross-site request from a page elsewhere.
        (
            request(&own, Some("http://attacker.example"), "application/json"),
            StatusCode::FORBIDDEN,
            Some("forbidden_origin"),
        ),
        // A form or a simple request cannot pass as JSON.
        (
            request(&own, None, "text/plain"),
            StatusCode::UNSUPPORTED_MEDIA_TYPE,
            Some("unsupported_media_type"),
        ),
    ];
    for (req, status, code) in cases {
        let (got, body) = api.send(req).await;
        assert_eq!(got, status, "{body}");
        if let Some(code) = code {
            assert_eq!(body["error"]["code"], code);
        }
    }
    let (status, _) = api
        .send(
            Request::get("/")
                .header("Host", &own)
                .body(Body::empty())
                .unwrap(),
        )
        .await;
    assert_eq!(status, StatusCode::OK, "the UI is served");
}

#[tokio::test]
async fn lan_mode_needs_the_token() {
    let guard = Guard::lan();
    let token = guard.token.clone().unwrap();
    let api = api_with(guard);
    let call = |auth: Option<String>| {
        let mut b = Request::post("/api/overview")
            .header("Host", "192.0.2.10:8088")
            .header("Content-Type", "application/json");
        if let Some(a) = auth {
            b = b.header("Authorization", a);
        }
        b.body(Body::from("{}")).unwrap()
    };
    let (status, body) = api.send(call(None)).await;
    assert_eq!(
        (status, body["error"]["code"].as_str()),
        (StatusCode::UNAUTHORIZED, Some("unauthorized"))
    );
    let (status, _) = api.send(call(Some("Bearer wrong".into()))).await;
    assert_eq!(status, StatusCode::UNAUTHORIZED);
    let (status, _) = api.send(call(Some(format!("Bearer {token}")))).await;
    assert_eq!(status, StatusCode::OK);
    assert!(token.len() >= 64, "a long random token");
}

#[test]
fn the_ui_is_small_and_self_contained() {
    let files = fieldcage_server::ui_files();
    let total: usize = files.iter().map(|(_, n)| n).sum();
    // Issue budget: all of ui/ under 150 KB uncompressed.
    assert!(total < 150 * 1024, "ui/ is {total} bytes");
    for (name, _) in files
        .iter()
        .filter(|(n, _)| n.ends_with(".html") || n.ends_with(".js") || n.ends_with(".css"))
    {
        let text = std::fs::read_to_string(crate::util::repo_root().join("ui").join(name)).unwrap();
        // The SVG namespace is a name (W3C SVG 1.1), not something loaded.
        let text = text.replace("'http://www.w3.org/2000/svg'", "");
        assert!(
            !text.contains("http://") && !text.contains("https://"),
            "{name} loads nothing from elsewhere"
        );
    }
}

#[tokio::test]
async fn review_runs_the_checks_and_confirm_keeps_the_note() {
    let api = api();
    let (cage, sheet) = first_cage(&api).await;
    let slug = taxon(&sheet, "SLUG");
    // A census of 50 alive where at most the stocked number can be (none were
    // stocked in this fresh experiment): the counts rules must flag it.
    api.ok(
        "save_census",
        json!({ "enclosure_id": cage, "taxon_id": slug, "alive": 50, "dead": 0, "missing": 0 }),
    )
    .await;
    let report = api.ok("review", json!({})).await;
    let flags = report["flags"].as_array().unwrap();
    let counted = flags
        .iter()
        .find(|f| f["record_table"] == "census")
        .expect("a census flag");
    assert_eq!(counted["status"], "open");
    assert!(
        counted["message"].as_str().unwrap().contains("50"),
        "the message names the number: {counted}"
    );
    let route = api.ok("route", json!({})).await;
    assert!(
        route["blocks"][0]["cages"][0]["open_flags"]
            .as_i64()
            .unwrap()
            >= 1,
        "the route marks the cage"
    );

    let (status, body) = api
        .call(
            "confirm_flag",
            json!({ "flag_id": counted["id"], "note": "  " }),
        )
        .await;
    assert_eq!(
        (status, body["error"]["field"].as_str()),
        (StatusCode::UNPROCESSABLE_ENTITY, Some("flag.note"))
    );
    let confirmed = api.ok("confirm_flag", json!({ "flag_id": counted["id"], "note": "Counted twice by two people: 50 is right." })).await;
    assert_eq!(
        (confirmed["status"].clone(), confirmed["note"].clone()),
        (
            json!("confirmed"),
            json!("Counted twice by two people: 50 is right.")
        )
    );
    let again = api.ok("review", json!({})).await;
    let same = again["flags"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["id"] == counted["id"])
        .unwrap();
    assert_eq!(
        same["status"], "confirmed",
        "a confirmed flag stays confirmed when the checks run again"
    );
}

/// A damaged database is not a conflict the person can settle: a broken
/// invariant is 500 `internal` (its message for a bug report), while a
/// person's conflict stays 409 `conflict` (#14: both were 409).
#[tokio::test]
async fn a_broken_invariant_is_internal_and_a_persons_conflict_is_a_conflict() {
    let api = api();
    let (cage, sheet) = first_cage(&api).await;
    let slug = taxon(&sheet, "SLUG");
    let census = api
        .ok(
            "save_census",
            json!({ "enclosure_id": cage, "taxon_id": slug, "alive": 4 }),
        )
        .await;
    let record = json!({ "table": "census", "id": census["record"]["id"] });

    // The person's conflict: a deleted record cannot be undone, only entered
    // again; nothing is written.
    api.ok("delete_record", record.clone()).await;
    let before = api.stored();
    let (status, problem) = api.call("undo", record.clone()).await;
    assert_eq!(
        (status, problem["error"]["code"].as_str()),
        (StatusCode::CONFLICT, Some("conflict")),
        "{problem}"
    );
    assert_eq!(api.stored(), before, "a refused undo writes nothing");

    // A broken invariant: the change log's entry of the insert is damaged
    // (as a bad disk or another program might leave it).
    let damaged = rusqlite::Connection::open(&api.db)
        .unwrap()
        .execute(
            "UPDATE change_log SET new_value = '[not a packed insert' \
             WHERE table_name = 'census' AND row_id = ?1 AND op = 'insert'",
            [census["record"]["id"].as_str().unwrap()],
        )
        .unwrap();
    assert_eq!(damaged, 1);
    let (status, problem) = api.call("history", record).await;
    assert_eq!(
        (status, problem["error"]["code"].as_str()),
        (StatusCode::INTERNAL_SERVER_ERROR, Some("internal")),
        "{problem}"
    );
    assert!(
        problem["error"]["message"]
            .as_str()
            .unwrap()
            .contains("change log entry"),
        "{problem}"
    );
}
