//! The tablet's command surface, without a webview (tauri's `test` feature):
//! `call` reaches the operation set and answers exactly what the HTTP API
//! answers, errors included; the settings screen's operations; and the
//! automatic sync the app starts on launch.

use std::time::{Duration, Instant};

use fieldcage_tablet::{Options, app, manage_service, open_service};
use serde_json::{Value, json};
use tauri::ipc::{CallbackFn, InvokeBody};
use tauri::test::{INVOKE_KEY, get_ipc_response, mock_builder, mock_context, noop_assets};
use tauri::webview::InvokeRequest;

fn invoke(
    webview: &tauri::WebviewWindow<tauri::test::MockRuntime>,
    op: &str,
    args: Value,
) -> Result<Value, Value> {
    get_ipc_response(
        webview,
        InvokeRequest {
            cmd: "call".into(),
            callback: CallbackFn(0),
            error: CallbackFn(1),
            url: "tauri://localhost".parse().expect("url"),
            body: InvokeBody::Json(json!({ "op": op, "args": args })),
            headers: Default::default(),
            invoke_key: INVOKE_KEY.to_string(),
        },
    )
    .map(|body| body.deserialize::<Value>().expect("JSON answer"))
}

fn demo_app() -> (
    tempfile::TempDir,
    tauri::App<tauri::test::MockRuntime>,
    tauri::WebviewWindow<tauri::test::MockRuntime>,
) {
    demo_app_with(&[])
}

/// The demo season in a new database, the app set up as on launch.
fn demo_app_with(
    extra: &[&str],
) -> (
    tempfile::TempDir,
    tauri::App<tauri::test::MockRuntime>,
    tauri::WebviewWindow<tauri::test::MockRuntime>,
) {
    let dir = tempfile::tempdir().expect("temp dir");
    let args = ["--demo", "--today", "2026-06-01"]
        .iter()
        .chain(extra)
        .map(|a| (*a).to_owned());
    let options = Options::parse_from_args(args).expect("options");
    let service = open_service(&dir.path().join("tablet.db"), &options).expect("demo database");
    let app = app(mock_builder())
        .build(mock_context(noop_assets()))
        .expect("app builds");
    manage_service(&app, service, &options).expect("service and automatic sync");
    let webview = tauri::WebviewWindowBuilder::new(&app, "main", Default::default())
        .build()
        .expect("window");
    (dir, app, webview)
}

#[test]
fn call_runs_operations_of_the_operation_set() {
    let (_dir, _app, webview) = demo_app();
    let overview = invoke(&webview, "overview", json!({})).expect("overview");
    // Day 21 of the demo season (demo_data/definition.toml: start 2026-05-11).
    assert_eq!(overview["day"], 21);
    let route = invoke(&webview, "route", json!({})).expect("route");
    let cage = route["blocks"][0]["cages"][0]["enclosure_id"].clone();
    let sheet = invoke(&webview, "sheet", json!({ "enclosure_id": cage })).expect("sheet");
    let slug = sheet["animals"]
        .as_array()
        .and_then(|a| a.iter().find(|x| x["taxon"]["code"] == "SLUG"))
        .map(|x| x["taxon"]["id"].clone())
        .expect("slug");
    let saved = invoke(
        &webview,
        "save_census",
        json!({ "enclosure_id": cage, "taxon_id": slug, "alive": 9, "dead": 0, "missing": 1 }),
    )
    .expect("saved");
    assert_eq!(saved["record"]["alive"], 9);
}

#[test]
fn errors_have_the_same_shape_as_over_http() {
    let (_dir, _app, webview) = demo_app();
    let err =
        invoke(&webview, "sheet", json!({ "enclosure_id": "not-a-uuid" })).expect_err("refused");
    assert_eq!(err["code"], "bad_request");
    assert_eq!(err["field"], "enclosure_id");
    let err = invoke(&webview, "no_such_operation", json!({})).expect_err("refused");
    assert_eq!(err["code"], "unknown_operation");
}

#[test]
fn options_are_checked() {
    let refused = |args: &[&str]| {
        Options::parse_from_args(args.iter().map(|a| (*a).to_owned()))
            .unwrap_err()
            .to_string()
    };
    // A wrong value or an unknown option is named in the error.
    assert!(refused(&["--today", "soon"]).contains("'soon'"));
    assert!(refused(&["--colour"]).contains("--colour"));
    let o = Options::parse_from_args(["--db".to_owned(), "x.db".to_owned(), "--demo".to_owned()])
        .expect("ok");
    assert_eq!(
        (o.db.as_deref(), o.launch.demo),
        (Some(std::path::Path::new("x.db")), true)
    );
    // Automatic sync: every 5 s unless told (common practice of our own).
    assert_eq!(o.launch.sync_every.0, Some(Duration::from_secs(5)));
    let off = Options::parse_from_args(["--sync-every".to_owned(), "0".to_owned()]).expect("ok");
    assert_eq!(off.launch.sync_every.0, None);
    let negative = refused(&["--sync-every", "-2"]);
    assert!(
        negative.contains("sync-every") && negative.contains("0 or more"),
        "{negative}"
    );
    // The same type is what `fieldcage serve` takes: its defaults are these.
    assert_eq!(
        Options::parse_from_args([]).expect("ok"),
        Options::default()
    );
}

#[test]
fn the_settings_screen_operations_work_through_the_command() {
    let (dir, _app, webview) = demo_app_with(&["--sync-every", "0"]);
    let settings = invoke(&webview, "settings", json!({})).expect("settings");
    assert_eq!(settings["sync_target"], Value::Null);
    assert_eq!(settings["sync_every_secs"], Value::Null, "turned off");
    let target = dir.path().join("stick");
    let saved = invoke(
        &webview,
        "save_settings",
        json!({ "device_name": "Tablet West", "sync_target": target.to_str().expect("utf-8") }),
    )
    .expect("saved");
    assert_eq!(saved["device_name"], "Tablet West");
    assert_eq!(saved["sync_target"], target.to_str().expect("utf-8"));
    assert!(target.is_dir(), "the folder was made");
    let status = invoke(&webview, "sync_status", json!({})).expect("status");
    assert_eq!(status["target_state"], "ready");
    // The same refusal as over HTTP: the field and the value.
    let err = invoke(
        &webview,
        "save_settings",
        json!({ "sync_target": "relative/folder" }),
    )
    .expect_err("refused");
    assert_eq!(err["code"], "invalid_value");
    assert_eq!(err["field"], "device.sync_target");
    assert_eq!(err["value"], "relative/folder");
    let again = invoke(&webview, "settings", json!({})).expect("settings");
    assert_eq!(again["sync_target"], target.to_str().expect("utf-8"));
}

#[test]
fn the_app_syncs_on_its_own_once_a_folder_is_set() {
    let (dir, _app, webview) = demo_app_with(&["--sync-every", "0.1"]);
    let settings = invoke(&webview, "settings", json!({})).expect("settings");
    assert_eq!(settings["sync_every_secs"], 0.1);
    let target = dir.path().join("stick");
    invoke(
        &webview,
        "save_settings",
        json!({ "sync_target": target.to_str().expect("utf-8") }),
    )
    .expect("saved");
    let own = target.join(settings["device_id"].as_str().expect("device id"));
    // A bounded wait for the result, not a measure of speed.
    let deadline = Instant::now() + Duration::from_secs(60);
    loop {
        let status = invoke(&webview, "sync_status", json!({})).expect("status");
        if status["pending_changes"] == 0 && status["last_sync"].is_object() {
            break;
        }
        assert!(Instant::now() < deadline, "no automatic sync: {status}");
        std::thread::sleep(Duration::from_millis(50));
    }
    assert!(
        std::fs::read_dir(own).expect("own folder").count() > 0,
        "this tablet's changes are in the folder"
    );
}
