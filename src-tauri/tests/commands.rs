//! The tablet's command surface, without a webview (tauri's `test` feature):
//! `call` reaches the operation set and answers exactly what the HTTP API
//! answers, errors included.

use std::sync::Arc;

use fieldcage_tablet::{Options, app, open_service};
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
    let dir = tempfile::tempdir().expect("temp dir");
    let options = Options::parse([
        "--demo".to_owned(),
        "--today".to_owned(),
        "2026-06-01".to_owned(),
    ])
    .expect("options");
    let service = open_service(&dir.path().join("tablet.db"), &options).expect("demo database");
    let app = app(mock_builder())
        .manage(Arc::new(service))
        .build(mock_context(noop_assets()))
        .expect("app builds");
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
    assert!(
        Options::parse(["--today".to_owned(), "soon".to_owned()])
            .unwrap_err()
            .contains("\"soon\"")
    );
    assert!(
        Options::parse(["--colour".to_owned()])
            .unwrap_err()
            .contains("--colour")
    );
    let o =
        Options::parse(["--db".to_owned(), "x.db".to_owned(), "--demo".to_owned()]).expect("ok");
    assert_eq!(
        (o.db.as_deref(), o.demo),
        (Some(std::path::Path::new("x.db")), true)
    );
}
