//! Sync through the operation set (issue 6 "Back online", issue 7 settings):
//! the settings and sync operations over HTTP, refusals naming the field and
//! value, conflicts settled as keep mine / take theirs, two real servers on
//! loopback exchanging edits through a shared folder, and automatic sync.
//!
//! The expected values are behaviours of the design (docs/methods.md §10.1); the
//! dates and counts are invented for the tests.

use crate::util::Raw;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::{Duration, Instant};

use axum::body::Body;
use axum::http::{Request, StatusCode};
use fieldcage_ops::Service;
use fieldcage_ops::auto_sync::{AutoSync, Look, Watch};
use fieldcage_server::{Guard, router};
use http_body_util::BodyExt;
use serde_json::{Value, json};
use tower::ServiceExt;

use crate::util::{Temp, snapshot, store_with};

const PORT: u16 = 8088;

/// Field day 14 of the demo definition (start 2026-05-11).
fn field_day() -> chrono::NaiveDate {
    chrono::NaiveDate::from_ymd_opt(2026, 5, 25).unwrap()
}

/// One tablet: a database initialised from the demo definition with seed 5
/// (the same setup rows on every tablet) and its operation set behind the
/// HTTP router.
struct Tablet {
    service: Arc<Service>,
    app: axum::Router,
    db: PathBuf,
    tmp: Temp,
}

impl Tablet {
    fn new() -> Tablet {
        let tmp = Temp::new();
        let store = store_with(&tmp, &[], 5);
        let db = store.path().to_path_buf();
        let service = Arc::new(Service::new(store).with_today(field_day()));
        Tablet {
            app: router(Arc::clone(&service), Guard::loopback(PORT)),
            service,
            db,
            tmp,
        }
    }

    async fn call(&self, op: &str, args: Value) -> (StatusCode, Value) {
        let request = Request::post(format!("/api/{op}"))
            .header("Host", format!("127.0.0.1:{PORT}"))
            .header("Content-Type", "application/json")
            .body(Body::from(args.to_string()))
            .unwrap();
        let response = self.app.clone().oneshot(request).await.unwrap();
        let status = response.status();
        let bytes = response.into_body().collect().await.unwrap().to_bytes();
        (
            status,
            serde_json::from_slice(&bytes).unwrap_or(Value::Null),
        )
    }

    async fn ok(&self, op: &str, args: Value) -> Value {
        let (status, body) = self.call(op, args).await;
        assert_eq!(status, StatusCode::OK, "{op}: {body}");
        body
    }

    /// The refusal of a call: status, code, field and value.
    async fn refused(&self, op: &str, args: Value) -> (StatusCode, Value) {
        let (status, body) = self.call(op, args).await;
        assert_ne!(status, StatusCode::OK, "{op} was accepted: {body}");
        (status, body["error"].clone())
    }

    fn stored(&self) -> String {
        snapshot(&fieldcage_core::Store::open(&self.db).unwrap())
    }
}

/// The first cage of the route and the id of a taxon by code.
async fn cage_and_taxon(t: &Tablet, code: &str) -> (String, String) {
    let route = t.ok("route", json!({})).await;
    let cage = route["blocks"][0]["cages"][0]["enclosure_id"]
        .as_str()
        .unwrap()
        .to_owned();
    let sheet = t.ok("sheet", json!({ "enclosure_id": cage })).await;
    let taxon = sheet["animals"]
        .as_array()
        .unwrap()
        .iter()
        .map(|a| &a["taxon"])
        .chain(sheet["plants"].as_array().unwrap())
        .find(|x| x["code"] == code)
        .map(|x| x["id"].as_str().unwrap().to_owned())
        .unwrap();
    (cage, taxon)
}

/// The first item of a JSON list that `wanted` accepts (the test fails,
/// showing the list, when none does).
fn find_in(list: &Value, wanted: impl Fn(&Value) -> bool) -> &Value {
    list.as_array()
        .unwrap_or_else(|| panic!("not a list: {list}"))
        .iter()
        .find(|x| wanted(x))
        .unwrap_or_else(|| panic!("no such item in {list}"))
}

/// Today's alive count of `taxon` on the cage's sheet.
async fn alive_on_sheet(t: &Tablet, cage: &str, taxon: &str) -> Value {
    let sheet = t.ok("sheet", json!({ "enclosure_id": cage })).await;
    find_in(&sheet["animals"], |a| a["taxon"]["id"] == taxon)["today"]["alive"].clone()
}

fn shared_folder(tmp: &Temp) -> PathBuf {
    let dir = tmp.path("shared");
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

async fn set_target(t: &Tablet, target: &Path) {
    let saved = t
        .ok(
            "save_settings",
            json!({ "sync_target": target.to_str().unwrap() }),
        )
        .await;
    assert_eq!(saved["sync_target"], target.to_str().unwrap());
}

#[tokio::test]
async fn settings_are_saved_per_database_and_bad_input_names_the_field() {
    let t = Tablet::new();
    let fresh = t.ok("settings", json!({})).await;
    assert!(
        fresh["device_name"]
            .as_str()
            .unwrap()
            .starts_with("device-")
    );
    assert_eq!(fresh["sync_target"], Value::Null);
    assert_eq!(fresh["sync_every_secs"], Value::Null, "no automatic sync");

    // A folder that does not exist yet, in one that does, is made.
    let target = t.tmp.path("stick").join("fieldcage-sync");
    std::fs::create_dir(t.tmp.path("stick")).unwrap();
    let saved = t
        .ok(
            "save_settings",
            json!({ "device_name": "  Tablet North ", "sync_target": target.to_str().unwrap() }),
        )
        .await;
    assert_eq!(saved["device_name"], "Tablet North");
    assert_eq!(saved["sync_target"], target.to_str().unwrap());
    assert!(target.is_dir(), "the target folder was made");
    // The name is what new visits record as their device.
    let overview = t.ok("overview", json!({})).await;
    assert_eq!(overview["device_name"], "Tablet North");

    // Kept in this database: a second service on it sees the same settings.
    let reopened = Service::new(fieldcage_core::Store::open(&t.db).unwrap());
    let again = reopened.call("settings", json!({})).unwrap();
    assert_eq!(again["sync_target"], target.to_str().unwrap());
    assert_eq!(again["device_name"], "Tablet North");

    let before = t.stored();
    let file = t.tmp.path("a-file.txt");
    std::fs::write(&file, "not a folder").unwrap();
    let no_parent = t.tmp.path("unplugged").join("fieldcage-sync");
    let own_folder = t.db.parent().unwrap().to_path_buf();
    let cases: Vec<(Value, StatusCode, &str, String, &str)> = vec![
        (
            json!({ "sync_target": "shared-folder" }),
            StatusCode::UNPROCESSABLE_ENTITY,
            "device.sync_target",
            "shared-folder".into(),
            "absolute",
        ),
        (
            json!({ "sync_target": file.to_str().unwrap() }),
            StatusCode::UNPROCESSABLE_ENTITY,
            "device.sync_target",
            file.display().to_string(),
            "not a folder",
        ),
        (
            json!({ "sync_target": no_parent.to_str().unwrap() }),
            StatusCode::UNPROCESSABLE_ENTITY,
            "device.sync_target",
            no_parent.display().to_string(),
            "does not exist",
        ),
        (
            json!({ "sync_target": own_folder.to_str().unwrap() }),
            StatusCode::UNPROCESSABLE_ENTITY,
            "device.sync_target",
            own_folder.display().to_string(),
            "live database",
        ),
        // A bad name with a good target: neither is saved.
        (
            json!({ "device_name": "", "sync_target": "" }),
            StatusCode::UNPROCESSABLE_ENTITY,
            "device.name",
            String::new(),
            "1 to 60 characters",
        ),
        (
            json!({ "device_name": "line\nbreak" }),
            StatusCode::UNPROCESSABLE_ENTITY,
            "device.name",
            "line\nbreak".into(),
            "line breaks",
        ),
        (
            json!({ "device_name": 7 }),
            StatusCode::BAD_REQUEST,
            "device_name",
            String::new(),
            "string",
        ),
    ];
    for (args, status, field, value, words) in cases {
        let (got, error) = t.refused("save_settings", args.clone()).await;
        assert_eq!(got, status, "{args}: {error}");
        assert_eq!(error["field"], field, "{args}: {error}");
        if !value.is_empty() {
            assert_eq!(error["value"], value.as_str(), "{args}: {error}");
        }
        assert!(
            error["message"].as_str().unwrap().contains(words),
            "{args}: {error}"
        );
    }
    let (status, error) = t.refused("settings", json!({ "colour": "green" })).await;
    assert_eq!(
        (status, error["code"].as_str()),
        (StatusCode::BAD_REQUEST, Some("bad_request"))
    );
    assert_eq!(t.stored(), before, "no refused setting changed anything");

    // An empty target clears it.
    let cleared = t.ok("save_settings", json!({ "sync_target": "" })).await;
    assert_eq!(cleared["sync_target"], Value::Null);
    assert_eq!(cleared["device_name"], "Tablet North");
}

#[tokio::test]
async fn the_sync_target_is_local_it_is_neither_exported_nor_sent() {
    let a = Tablet::new();
    let b = Tablet::new();
    let shared = shared_folder(&a.tmp);
    set_target(&a, &shared).await;
    a.ok("sync_now", json!({})).await;
    // Nothing in the change-set files mentions the folder.
    let path_text = shared.to_str().unwrap();
    for device in std::fs::read_dir(&shared).unwrap() {
        for file in std::fs::read_dir(device.unwrap().path()).unwrap() {
            let text = std::fs::read_to_string(file.unwrap().path()).unwrap();
            assert!(!text.contains(path_text), "a change-set names the target");
        }
    }
    // Another tablet syncing with the folder does not get it as its setting.
    let elsewhere = b.tmp.path("own-target");
    std::fs::create_dir(&elsewhere).unwrap();
    set_target(&b, &elsewhere).await;
    {
        let mut store = fieldcage_core::Store::open(&b.db).unwrap();
        fieldcage_core::sync::sync_once(&mut store, &shared).unwrap();
    }
    let settings = b.ok("settings", json!({})).await;
    assert_eq!(settings["sync_target"], elsewhere.to_str().unwrap());
    // And the export holds no trace of it.
    let out = a.tmp.path("export");
    fieldcage_core::export::export(&fieldcage_core::Store::open(&a.db).unwrap(), &out).unwrap();
    for file in std::fs::read_dir(&out).unwrap() {
        let path = file.unwrap().path();
        if path.is_file() {
            let text = std::fs::read_to_string(&path).unwrap_or_default();
            assert!(
                !text.contains(path_text),
                "{} names the target",
                path.display()
            );
        }
    }
}

#[tokio::test]
async fn sync_status_and_sync_now_report_the_state_and_what_happened() {
    let t = Tablet::new();
    let status = t.ok("sync_status", json!({})).await;
    assert_eq!(status["target_state"], "not_set");
    assert_eq!(status["last_sync"], Value::Null);
    assert_eq!(status["open_conflicts"], 0);
    let setup_changes = status["pending_changes"].as_i64().unwrap();
    assert!(setup_changes > 0, "init logged the setup: {status}");

    // No target: sync_now names the missing setting.
    let (code, error) = t.refused("sync_now", json!({})).await;
    assert_eq!(code, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(error["field"], "device.sync_target");

    let shared = shared_folder(&t.tmp);
    set_target(&t, &shared).await;
    let status = t.ok("sync_status", json!({})).await;
    assert_eq!(status["target_state"], "ready");
    assert_eq!(status["target"], shared.to_str().unwrap());

    let out = t.ok("sync_now", json!({})).await;
    assert!(!out["written"].as_array().unwrap().is_empty(), "{out}");
    assert_eq!(out["pending_changes"], 0);
    let status = t.ok("sync_status", json!({})).await;
    assert_eq!(status["pending_changes"], 0);
    assert_eq!(status["last_sync"]["finished_at"], out["finished_at"]);
    assert_eq!(status["last_sync"]["target"], shared.to_str().unwrap());

    // An edit is pending until the next sync.
    let (cage, slug) = cage_and_taxon(&t, "SLUG").await;
    t.ok(
        "save_census",
        json!({ "enclosure_id": cage, "taxon_id": slug, "alive": 4, "dead": 0, "missing": 1 }),
    )
    .await;
    let status = t.ok("sync_status", json!({})).await;
    assert!(status["pending_changes"].as_i64().unwrap() > 0, "{status}");

    // The stick is pulled: the state says so, and sync_now is refused with
    // the folder named, the edit kept.
    std::fs::remove_dir_all(&shared).unwrap();
    let status = t.ok("sync_status", json!({})).await;
    assert_eq!(status["target_state"], "unavailable");
    assert!(
        status["target_problem"]
            .as_str()
            .unwrap()
            .contains(shared.to_str().unwrap()),
        "{status}"
    );
    let (code, error) = t.refused("sync_now", json!({})).await;
    assert_eq!(code, StatusCode::SERVICE_UNAVAILABLE);
    assert_eq!(error["code"], "target_unavailable");
    assert_eq!(error["field"], "device.sync_target");
    assert_eq!(error["value"], shared.to_str().unwrap());
    assert_eq!(alive_on_sheet(&t, &cage, &slug).await, 4);
}

/// Sync a, b, a through the folder with sync_now.
async fn sync_round(a: &Tablet, b: &Tablet) {
    a.ok("sync_now", json!({})).await;
    b.ok("sync_now", json!({})).await;
    a.ok("sync_now", json!({})).await;
}

#[tokio::test]
async fn conflicts_show_both_versions_and_settle_as_keep_mine_or_take_theirs() {
    let a = Tablet::new();
    let b = Tablet::new();
    let shared = shared_folder(&a.tmp);
    set_target(&a, &shared).await;
    set_target(&b, &shared).await;
    b.ok("save_settings", json!({ "device_name": "Tablet South" }))
        .await;
    let (cage, slug) = cage_and_taxon(&a, "SLUG").await;
    let census = a
        .ok(
            "save_census",
            json!({ "enclosure_id": cage, "taxon_id": slug, "alive": 4, "dead": 0, "missing": 0 }),
        )
        .await;
    sync_round(&a, &b).await;
    assert_eq!(alive_on_sheet(&b, &cage, &slug).await, 4);

    // Both change the count without seeing each other's change.
    let edit = |alive: i64| json!({ "enclosure_id": cage, "taxon_id": slug, "alive": alive, "dead": 0, "missing": 0 });
    a.ok("save_census", edit(5)).await;
    b.ok("save_census", edit(6)).await;
    sync_round(&a, &b).await;
    b.ok("sync_now", json!({})).await;

    let listed = b.ok("conflicts", json!({})).await;
    let list = listed.as_array().unwrap();
    assert_eq!(list.len(), 1, "{listed}");
    let c = &list[0];
    assert_eq!(c["kind"], "concurrent");
    assert_eq!(c["table"], "census");
    assert_eq!(c["field"], "alive");
    // The record in people's words: the first cage of block B1 on the field day.
    assert_eq!(c["record"], "census · cage C-01 · 2026-05-25 · SLUG", "{c}");
    let mine = c["mine"].as_str().unwrap();
    let theirs = if mine == "current" {
        "other"
    } else {
        "current"
    };
    assert_eq!(c[mine]["value"], 6, "{c}");
    assert_eq!(c[mine]["device_name"], "Tablet South");
    assert_eq!(c[theirs]["value"], 5, "{c}");
    assert!(!c[theirs]["is_local"].as_bool().unwrap());
    let status = b.ok("sync_status", json!({})).await;
    assert_eq!(status["open_conflicts"], 1);

    // Bad input names the field and value, and settles nothing.
    let before = b.stored();
    let (code, error) = b
        .refused(
            "resolve_conflict",
            json!({ "key": "concurrent:census:nothing", "choice": "take_theirs" }),
        )
        .await;
    assert_eq!(code, StatusCode::NOT_FOUND);
    assert_eq!(error["field"], "conflict.id");
    assert_eq!(error["value"], "concurrent:census:nothing");
    let (code, error) = b
        .refused(
            "resolve_conflict",
            json!({ "key": c["key"], "choice": "both" }),
        )
        .await;
    assert_eq!(code, StatusCode::BAD_REQUEST);
    assert_eq!(error["field"], "choice");
    assert_eq!(b.stored(), before);

    let settled = b
        .ok(
            "resolve_conflict",
            json!({ "key": c["key"], "choice": "take_theirs" }),
        )
        .await;
    assert_eq!(settled["open_conflicts"], 0);
    assert_eq!(alive_on_sheet(&b, &cage, &slug).await, 5);
    // The settlement reaches the other tablet: its conflict closes too.
    b.ok("sync_now", json!({})).await;
    a.ok("sync_now", json!({})).await;
    assert_eq!(a.ok("conflicts", json!({})).await, json!([]));
    assert_eq!(alive_on_sheet(&a, &cage, &slug).await, 5);

    // An edit against a delete is always shown; keeping mine (the edit)
    // brings the record back.
    let id = census["record"]["id"].clone();
    a.ok("delete_record", json!({ "table": "census", "id": id }))
        .await;
    b.ok("save_census", edit(8)).await;
    sync_round(&a, &b).await;
    b.ok("sync_now", json!({})).await;
    let listed = b.ok("conflicts", json!({})).await;
    let c = find_in(&listed, |c| c["kind"] == "deleted").clone();
    let mine = c["mine"].as_str().unwrap();
    let theirs = if mine == "current" {
        "other"
    } else {
        "current"
    };
    assert_eq!(c[theirs]["action"], "deleted", "{c}");
    assert_eq!(c[mine]["action"], "set", "{c}");
    b.ok(
        "resolve_conflict",
        json!({ "key": c["key"], "choice": "keep_mine" }),
    )
    .await;
    assert_eq!(alive_on_sheet(&b, &cage, &slug).await, 8);
}

/// A real server on a loopback port, as `fieldcage serve` runs it.
async fn serve(t: &Tablet) -> String {
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let port = listener.local_addr().unwrap().port();
    let app = router(Arc::clone(&t.service), Guard::loopback(port));
    tokio::spawn(async move { axum::serve(listener, app).await });
    format!("http://127.0.0.1:{port}")
}

async fn http(client: &reqwest::Client, base: &str, op: &str, args: Value) -> Value {
    let response = client
        .post(format!("{base}/api/{op}"))
        .json(&args)
        .send()
        .await
        .unwrap();
    let status = response.status();
    let body: Value = response.json().await.unwrap();
    assert!(status.is_success(), "{op}: {status} {body}");
    body
}

/// Issue 6 acceptance: two servers on two databases sharing a folder; edits
/// made through each one's HTTP API appear on the other after sync.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn two_servers_sharing_a_folder_see_each_others_edits() {
    let a = Tablet::new();
    let b = Tablet::new();
    let shared = shared_folder(&a.tmp);
    let (url_a, url_b) = (serve(&a).await, serve(&b).await);
    let client = reqwest::Client::new();
    for url in [&url_a, &url_b] {
        http(
            &client,
            url,
            "save_settings",
            json!({ "sync_target": shared.to_str().unwrap() }),
        )
        .await;
    }
    let route = http(&client, &url_a, "route", json!({})).await;
    let cage_of = |i: usize| route["blocks"][0]["cages"][i]["enclosure_id"].clone();
    let sheet = http(
        &client,
        &url_a,
        "sheet",
        json!({ "enclosure_id": cage_of(0) }),
    )
    .await;
    let slug = find_in(&sheet["animals"], |x| x["taxon"]["code"] == "SLUG")["taxon"]["id"].clone();
    let grass = find_in(&sheet["plants"], |x| x["code"] == "GRA1")["id"].clone();
    // A counts slugs in the first cage; B estimates grass cover in the second.
    http(
        &client,
        &url_a,
        "save_census",
        json!({ "enclosure_id": cage_of(0), "taxon_id": slug, "alive": 7, "dead": 1, "missing": 0 }),
    )
    .await;
    http(
        &client,
        &url_b,
        "save_cover",
        json!({ "enclosure_id": cage_of(1), "taxon_id": grass, "percent": 35 }),
    )
    .await;
    for url in [&url_a, &url_b, &url_a] {
        http(&client, url, "sync_now", json!({})).await;
    }
    let on_b = http(
        &client,
        &url_b,
        "sheet",
        json!({ "enclosure_id": cage_of(0) }),
    )
    .await;
    let census = find_in(&on_b["animals"], |x| x["taxon"]["id"] == slug)["today"].clone();
    assert_eq!(
        (census["alive"].clone(), census["dead"].clone()),
        (json!(7), json!(1))
    );
    let on_a = http(
        &client,
        &url_a,
        "sheet",
        json!({ "enclosure_id": cage_of(1) }),
    )
    .await;
    let cover: Vec<&Value> = on_a["cover_records"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|r| r["taxon_id"] == grass)
        .collect();
    assert_eq!(cover.len(), 1, "{on_a}");
    assert_eq!(cover[0]["cover_pct"], 35.0);
    for url in [&url_a, &url_b] {
        let status = http(&client, url, "sync_status", json!({})).await;
        assert_eq!(status["pending_changes"], 0, "{url}: {status}");
        assert_eq!(status["open_conflicts"], 0, "{url}: {status}");
    }
    // Both hold the same data.
    assert_eq!(
        crate::util::data_snapshot(&fieldcage_core::Store::open(&a.db).unwrap()),
        crate::util::data_snapshot(&fieldcage_core::Store::open(&b.db).unwrap())
    );
}

/// One look at a time: a look syncs when the target is ready and something
/// is new (changes here, other devices' files), and otherwise does nothing.
#[tokio::test]
async fn a_look_syncs_only_when_the_target_is_back_and_something_is_new() {
    let a = Tablet::new();
    let b = Tablet::new();
    let mut watch = Watch::default();
    assert_eq!(watch.look(&a.service), Look::NoTarget);

    let shared = shared_folder(&a.tmp);
    set_target(&a, &shared).await;
    set_target(&b, &shared).await;
    assert_eq!(watch.look(&a.service), Look::Synced, "the setup is pending");
    let runs = |t: &Tablet| -> i64 {
        fieldcage_core::Store::open(&t.db)
            .unwrap()
            .raw()
            .query_row("SELECT count(*) FROM sync_run", [], |r| r.get(0))
            .unwrap()
    };
    let after_first = runs(&a);
    assert_eq!(watch.look(&a.service), Look::NothingNew);
    assert_eq!(
        runs(&a),
        after_first,
        "a look with nothing new runs no sync"
    );

    // An edit here.
    let (cage, slug) = cage_and_taxon(&a, "SLUG").await;
    a.ok(
        "save_census",
        json!({ "enclosure_id": cage, "taxon_id": slug, "alive": 3, "dead": 0, "missing": 0 }),
    )
    .await;
    assert_eq!(watch.look(&a.service), Look::Synced);
    assert_eq!(watch.look(&a.service), Look::NothingNew);

    // Another device's files.
    b.ok("sync_now", json!({})).await;
    assert_eq!(watch.look(&a.service), Look::Synced);
    assert_eq!(watch.look(&a.service), Look::NothingNew);

    // The stick is pulled: nothing is written, the reason names the folder,
    // and the state shows it.
    std::fs::remove_dir_all(&shared).unwrap();
    match watch.look(&a.service) {
        Look::Unavailable(reason) => {
            assert!(reason.contains(shared.to_str().unwrap()), "{reason}")
        }
        other => panic!("expected unavailable, got {other:?}"),
    }
    let status = a.ok("sync_status", json!({})).await;
    assert!(
        status["auto_sync"]["last_problem"]
            .as_str()
            .unwrap()
            .contains(shared.to_str().unwrap()),
        "{status}"
    );
    // It is back (an empty stick): this device's files are written again.
    std::fs::create_dir(&shared).unwrap();
    assert_eq!(watch.look(&a.service), Look::Synced);
    let own = a.ok("settings", json!({})).await["device_id"]
        .as_str()
        .unwrap()
        .to_owned();
    assert!(
        std::fs::read_dir(shared.join(own)).unwrap().count() > 0,
        "this device's change-sets are in the target again"
    );
}

/// Automatic sync on its own thread: an edit on one tablet reaches the other
/// with nobody pressing "Sync now".
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn automatic_sync_brings_an_edit_to_the_other_tablet() {
    let a = Tablet::new();
    let b = Tablet::new();
    let shared = shared_folder(&a.tmp);
    set_target(&a, &shared).await;
    set_target(&b, &shared).await;
    let every = Duration::from_millis(100);
    let auto_a = AutoSync::start(Arc::clone(&a.service), every).unwrap();
    let auto_b = AutoSync::start(Arc::clone(&b.service), every).unwrap();
    let settings = a.ok("settings", json!({})).await;
    assert_eq!(settings["sync_every_secs"], 0.1);

    let (cage, slug) = cage_and_taxon(&a, "SLUG").await;
    a.ok(
        "save_census",
        json!({ "enclosure_id": cage, "taxon_id": slug, "alive": 11, "dead": 0, "missing": 0 }),
    )
    .await;
    // A bounded wait for the result, not a measure of speed.
    let deadline = Instant::now() + Duration::from_secs(60);
    loop {
        if alive_on_sheet(&b, &cage, &slug).await == 11 {
            break;
        }
        assert!(
            Instant::now() < deadline,
            "the edit did not reach the other tablet: {}",
            b.ok("sync_status", json!({})).await
        );
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    let status = b.ok("sync_status", json!({})).await;
    assert!(status["auto_sync"]["last_run_at"].is_string(), "{status}");
    assert_eq!(status["auto_sync"]["last_problem"], Value::Null);
    auto_a.stop();
    drop(auto_b);
    let settings = a.ok("settings", json!({})).await;
    assert_eq!(settings["sync_every_secs"], Value::Null, "stopped");
}

/// While automatic sync runs, the status the UI asks for after every save
/// reuses the poller's last look at the target (a probe writes and removes a
/// file there); without the poller, the status looks itself.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_status_stands_on_the_running_pollers_look_at_the_target() {
    let a = Tablet::new();
    let shared = shared_folder(&a.tmp);
    set_target(&a, &shared).await;
    // A long interval: one look at the start, none during the test.
    let auto = AutoSync::start(Arc::clone(&a.service), Duration::from_secs(3600)).unwrap();
    let deadline = Instant::now() + Duration::from_secs(60);
    let mut status = a.ok("sync_status", json!({})).await;
    while !status["auto_sync"]["last_check_at"].is_string() {
        assert!(
            Instant::now() < deadline,
            "the poller never looked: {status}"
        );
        tokio::time::sleep(Duration::from_millis(20)).await;
        status = a.ok("sync_status", json!({})).await;
    }
    assert_eq!(status["target_state"], "ready", "{status}");
    // The folder goes away after the poller's look: the status still says
    // what the poller saw moments ago, so it did not probe again.
    std::fs::remove_dir_all(&shared).unwrap();
    let status = a.ok("sync_status", json!({})).await;
    assert_eq!(status["target_state"], "ready", "{status}");
    drop(auto);
    let status = a.ok("sync_status", json!({})).await;
    assert_eq!(status["target_state"], "unavailable", "{status}");
    assert!(
        status["target_problem"]
            .as_str()
            .unwrap()
            .contains(shared.to_str().unwrap()),
        "{status}"
    );
}
