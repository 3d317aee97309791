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

/// The census row of a taxon in a cage as stored: (alive, dead, missing).
fn census_of(api: &Api, cage: &str, taxon: &str) -> Vec<(Option<i64>, Option<i64>, Option<i64>)> {
    let conn = rusqlite::Connection::open(&api.db).unwrap();
    let mut stmt = conn
        .prepare(
            "SELECT c.alive, c.dead, c.missing FROM census c JOIN visit v ON v.id = c.visit_id \
             WHERE v.enclosure_id = ?1 AND c.taxon_id = ?2 AND c.deleted = 0",
        )
        .unwrap();
    stmt.query_map([cage, taxon], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap()
}

/// Issue 15: a double tap or a retry sends the same save twice; with its
/// operation id the second is answered with the first answer and writes
/// nothing (not a second restock, not a second leaf).
#[tokio::test]
async fn regression_15_the_same_operation_id_twice_writes_once() {
    let api = api();
    let (cage, sheet) = first_cage(&api).await;
    let slug = taxon(&sheet, "SLUG");
    let op_id = "01900000-0000-7000-8000-00000000aa01";
    let restock = json!({ "op_id": op_id, "enclosure_id": cage, "taxon_id": slug, "kind": "restock", "count": 3 });
    let first = api.ok("save_stocking", restock.clone()).await;
    let after_first = api.stored();
    let second = api.ok("save_stocking", restock.clone()).await;
    assert_eq!(
        first, second,
        "the repeat is answered with the first answer"
    );
    assert_eq!(api.stored(), after_first, "the repeat wrote nothing");
    // Two copies at once (two requests in flight after a double tap).
    let tag = |n: u32| json!({ "op_id": format!("01900000-0000-7000-8000-00000000bb0{n}"), "enclosure_id": cage, "taxon_id": taxon(&sheet, "GRA1"), "tag_label": "T-x" });
    let (a, b) = tokio::join!(api.call("tag_leaf", tag(1)), api.call("tag_leaf", tag(1)));
    assert_eq!((a.0, b.0), (StatusCode::OK, StatusCode::OK), "{a:?} {b:?}");
    assert_eq!(a.1["id"], b.1["id"]);
    let leaves = api.ok("sheet", json!({ "enclosure_id": cage })).await["leaves"]
        .as_array()
        .unwrap()
        .len();
    assert_eq!(leaves, 1, "one leaf tagged");
    // An id names one request: the same id for another operation is refused.
    let (status, body) = api
        .call(
            "save_census",
            json!({ "op_id": op_id, "enclosure_id": cage, "taxon_id": slug, "alive": 4 }),
        )
        .await;
    assert_eq!(status, StatusCode::CONFLICT, "{body}");
    assert!(
        body["error"]["message"]
            .as_str()
            .unwrap()
            .contains("save_stocking"),
        "{body}"
    );
}

/// Issue 15: two tabs on one cage. A save names only the field changed and
/// what the person saw there: it never puts back the other fields' old
/// values, and a field that moved meanwhile is refused with both values.
#[tokio::test]
async fn regression_15_a_stale_save_never_overwrites_what_it_did_not_see() {
    let api = api();
    let (cage, sheet) = first_cage(&api).await;
    let slug = taxon(&sheet, "SLUG");
    let census = |fields: Value| {
        let mut args = json!({ "enclosure_id": cage, "taxon_id": slug });
        args.as_object_mut()
            .unwrap()
            .extend(fields.as_object().unwrap().clone());
        args
    };
    api.ok(
        "save_census",
        census(json!({ "alive": 7, "dead": 1, "missing": 0 })),
    )
    .await;
    // Tab A (fresh) changes alive 7 -> 6.
    api.ok(
        "save_census",
        census(json!({ "alive": 6, "base": { "alive": 7 } })),
    )
    .await;
    // Tab B still shows alive 7; it changes dead 1 -> 2: alive stays 6.
    api.ok(
        "save_census",
        census(json!({ "dead": 2, "base": { "dead": 1 } })),
    )
    .await;
    assert_eq!(census_of(&api, &cage, &slug), [(Some(6), Some(2), Some(0))]);
    // Tab B now changes alive, which it saw as 7: refused, nothing written.
    let before = api.stored();
    let (status, body) = api
        .call(
            "save_census",
            census(json!({ "alive": 5, "base": { "alive": 7 } })),
        )
        .await;
    assert_eq!(status, StatusCode::CONFLICT, "{body}");
    let message = body["error"]["message"].as_str().unwrap();
    for shown in ["Alive", "6", "7", "5"] {
        assert!(message.contains(shown), "{shown} in {message}");
    }
    assert_eq!(body["error"]["field"], "census.alive");
    assert_eq!(api.stored(), before, "the stale save wrote nothing");
    // The same value saved from both tabs is no conflict.
    api.ok(
        "save_census",
        census(json!({ "alive": 6, "base": { "alive": 7 } })),
    )
    .await;
    // Cover: a pin counter tapped on a stale sheet is refused too.
    let cover = |hits: i64, base: Value| json!({ "enclosure_id": cage, "category": "litter", "percent": hits, "base": { "value_pct": base } });
    api.ok("save_cover", cover(40, Value::Null)).await;
    let (status, body) = api.call("save_cover", cover(45, Value::Null)).await;
    assert_eq!(status, StatusCode::CONFLICT, "{body}");
    api.ok("save_cover", cover(45, json!(40))).await;
}

/// Issue 15: letters and decimals in a count are refused with the field's
/// label and the value; what is stored stays, and the next valid entry
/// saves (the refused value does not stick to the row).
#[tokio::test]
async fn regression_15_counts_are_whole_numbers_and_a_refusal_does_not_stick() {
    let api = api();
    let (cage, sheet) = first_cage(&api).await;
    let slug = taxon(&sheet, "SLUG");
    api.ok(
        "save_census",
        json!({ "enclosure_id": cage, "taxon_id": slug, "alive": 7, "dead": 0 }),
    )
    .await;
    let before = api.stored();
    for (value, status_wanted, says) in [
        (
            json!(1.5),
            StatusCode::BAD_REQUEST,
            "Dead: 1.5 is not a whole number",
        ),
        (
            json!("2o"),
            StatusCode::BAD_REQUEST,
            "Dead: \"2o\" is not a number",
        ),
        (
            json!(-1),
            StatusCode::UNPROCESSABLE_ENTITY,
            "Dead: -1 is below the minimum 0",
        ),
    ] {
        let (status, body) = api
            .call(
                "save_census",
                json!({ "enclosure_id": cage, "taxon_id": slug, "dead": value }),
            )
            .await;
        assert_eq!(status, status_wanted, "{body}");
        let message = body["error"]["message"].as_str().unwrap();
        assert!(message.starts_with(says), "{message}");
    }
    assert_eq!(api.stored(), before, "no refused count wrote anything");
    api.ok(
        "save_census",
        json!({ "enclosure_id": cage, "taxon_id": slug, "dead": 1 }),
    )
    .await;
    assert_eq!(census_of(&api, &cage, &slug), [(Some(7), Some(1), None)]);
    // A refused percent names the field in the sheet's words.
    let (_, body) = api
        .call(
            "save_cover",
            json!({ "enclosure_id": cage, "category": "litter", "percent": 450 }),
        )
        .await;
    let message = body["error"]["message"].as_str().unwrap();
    assert!(message.starts_with("Percent: 450"), "{message}");
}

/// Issue 15: clearing a field means "not assessed" (empty), never 0.
#[tokio::test]
async fn regression_15_clearing_stores_not_assessed_never_zero() {
    let api = api();
    let (cage, sheet) = first_cage(&api).await;
    let leaf = api
        .ok(
            "tag_leaf",
            json!({ "enclosure_id": cage, "taxon_id": taxon(&sheet, "GRA1"), "tag_label": "T1" }),
        )
        .await;
    let leaf = leaf["id"].as_str().unwrap();
    // The demo's damage protocol scores classes; clearing sends no value.
    let scored = api
        .ok("save_damage", json!({ "leaf_id": leaf, "class_code": "2" }))
        .await;
    assert!(scored["record"]["damage_pct"].as_f64().unwrap() > 0.0);
    let cleared = api.ok("save_damage", json!({ "leaf_id": leaf })).await;
    assert_eq!(cleared["record"]["id"], scored["record"]["id"]);
    assert_eq!(
        (
            &cleared["record"]["damage_pct"],
            &cleared["record"]["class_code"]
        ),
        (&Value::Null, &Value::Null)
    );
    let slug = taxon(&sheet, "SLUG");
    api.ok(
        "save_census",
        json!({ "enclosure_id": cage, "taxon_id": slug, "alive": 4 }),
    )
    .await;
    api.ok(
        "save_census",
        json!({ "enclosure_id": cage, "taxon_id": slug, "alive": null }),
    )
    .await;
    assert_eq!(census_of(&api, &cage, &slug), [(None, None, None)]);
}
