//! Keeps `src/http/openapi.json` (served at `GET /api/openapi.json`)
//! honest:
//!
//! - the document itself: OpenAPI 3.1, every operation has responses,
//!   every `$ref` resolves, path parameters match the path templates,
//!   error answers are problem details;
//! - the routes: the method and path pairs of the routers (scanned from
//!   `src/http/*.rs`, and copied into [`ROUTES`]) equal the documented set,
//!   so a new route without documentation fails;
//! - the real server (port 0, a real SQLite file): every documented
//!   operation is routed, every answer's status is one the document lists
//!   for it, its media type is documented, JSON bodies validate against the
//!   documented schema (a small JSON Schema checker below), and `ETag`
//!   answers give the documented 304.

use std::collections::{BTreeMap, BTreeSet};

use crate::common::{
    Keys, ReachApp, TestApp, body_of, bridge_reach, files::repo_path, json_of, reach_gauge,
    spawn_app, spawn_app_with, test_config,
};
use chrono::{DateTime, SecondsFormat, Utc};
use reachcast::{auth::Role, http::openapi::DOCUMENT};
use serde_json::{Value, json};

/// Every route of the application, as `(method, path)`: copied from the
/// routers in `src/http/*.rs` (checked against them by
/// `route_list_matches_the_routers`). A new route goes here and into
/// `src/http/openapi.json`.
const ROUTES: &[(&str, &str)] = &[
    ("GET", "/health"),
    ("GET", "/metrics"),
    ("GET", "/ready"),
    ("GET", "/problems/{slug}"),
    ("GET", "/api/openapi.json"),
    ("GET", "/api/gauges"),
    ("GET", "/api/gauges/{gauge}"),
    ("PUT", "/api/gauges/{gauge}"),
    ("GET", "/api/gauges/{gauge}/readings"),
    ("POST", "/api/gauges/{gauge}/readings"),
    ("GET", "/api/gauges/{gauge}/readings/{time}"),
    ("POST", "/api/gauges/{gauge}/readings/{time}/confirm"),
    ("GET", "/api/gauges/{gauge}/gaugings"),
    ("POST", "/api/gauges/{gauge}/gaugings"),
    ("GET", "/api/gauges/{gauge}/ratings"),
    ("POST", "/api/gauges/{gauge}/ratings"),
    ("POST", "/api/gauges/{gauge}/ratings/fit"),
    ("POST", "/api/gauges/{gauge}/ratings/shifts"),
    ("GET", "/api/reaches"),
    ("GET", "/api/reaches/{reach}"),
    ("PUT", "/api/reaches/{reach}"),
    ("GET", "/api/reaches/{reach}/forecast"),
    ("GET", "/api/reaches/{reach}/forecast/points/{point}"),
    ("GET", "/api/reaches/{reach}/profile"),
    ("GET", "/api/reaches/{reach}/verification"),
    ("GET", "/api/reaches/{reach}/runs"),
    ("POST", "/api/reaches/{reach}/runs"),
    ("POST", "/api/reaches/{reach}/hindcasts"),
    ("POST", "/api/reaches/{reach}/calibration"),
    ("GET", "/api/runs/{id}"),
    ("GET", "/api/exceedances"),
    ("GET", "/api/reaches/{reach}/inflows"),
    ("POST", "/api/reaches/{reach}/inflows"),
    ("GET", "/api/reaches/{reach}/inflows/{version}"),
    ("POST", "/api/reaches/{reach}/inflows/{version}/withdraw"),
    ("GET", "/api/keys/self"),
    ("GET", "/api/cap/feed.atom"),
    ("GET", "/api/cap/{identifier}"),
    ("GET", "/api/reaches/{reach}/cap/feed.atom"),
];

const METHODS: &[&str] = &["get", "put", "post", "delete", "patch", "head", "options"];

fn doc() -> Value {
    serde_json::from_str(DOCUMENT).expect("src/http/openapi.json is JSON")
}

/// Resolves a local `$ref` (`#/components/...`) as a JSON pointer.
fn resolve<'a>(doc: &'a Value, reference: &str) -> Option<&'a Value> {
    let pointer = reference.strip_prefix('#')?;
    doc.pointer(pointer)
}

/// Follows `$ref` until a non-reference object.
fn deref<'a>(doc: &'a Value, v: &'a Value) -> &'a Value {
    let mut v = v;
    for _ in 0..16 {
        match v.get("$ref").and_then(Value::as_str) {
            Some(r) => v = resolve(doc, r).unwrap_or_else(|| panic!("unresolved $ref {r}")),
            None => return v,
        }
    }
    panic!("$ref chain too long");
}

/// Every `(METHOD, path, operation)` of the document.
fn operations(doc: &Value) -> Vec<(String, String, Value)> {
    let mut out = Vec::new();
    for (path, item) in doc["paths"].as_object().expect("paths") {
        for m in METHODS {
            if let Some(op) = item.get(*m) {
                out.push((m.to_uppercase(), path.clone(), op.clone()));
            }
        }
    }
    out
}

/// The parameters in force for an operation: the path item's, overridden
/// by the operation's (by name and location), each dereferenced.
fn parameters(doc: &Value, path: &str, op: &Value) -> Vec<Value> {
    let mut by_key: BTreeMap<(String, String), Value> = BTreeMap::new();
    let lists = [doc["paths"][path].get("parameters"), op.get("parameters")];
    for list in lists.into_iter().flatten() {
        for p in list.as_array().expect("parameters array") {
            let p = deref(doc, p).clone();
            let key = (
                p["name"].as_str().expect("parameter name").to_owned(),
                p["in"].as_str().expect("parameter in").to_owned(),
            );
            by_key.insert(key, p);
        }
    }
    by_key.into_values().collect()
}

fn template_names(path: &str) -> BTreeSet<String> {
    path.split('/')
        .filter_map(|seg| seg.strip_prefix('{')?.strip_suffix('}'))
        .map(str::to_owned)
        .collect()
}

fn collect_refs(v: &Value, out: &mut Vec<String>) {
    match v {
        Value::Object(map) => {
            for (k, v) in map {
                if k == "$ref" {
                    out.push(v.as_str().expect("$ref is a string").to_owned());
                } else {
                    collect_refs(v, out);
                }
            }
        }
        Value::Array(items) => items.iter().for_each(|v| collect_refs(v, out)),
        _ => {}
    }
}

#[test]
fn the_document_is_well_formed_openapi_3_1() {
    let doc = doc();
    assert!(
        doc["openapi"]
            .as_str()
            .is_some_and(|v| v.starts_with("3.1")),
        "openapi: {}",
        doc["openapi"]
    );
    assert_eq!(doc["info"]["version"], env!("CARGO_PKG_VERSION"));
    let description = doc["info"]["description"].as_str().expect("description");
    assert!(description.contains("advisory model output"));
    assert!(description.contains("not an official warning"));
    assert_eq!(doc["servers"][0]["url"], "/");
    assert_eq!(
        doc["components"]["securitySchemes"]["bearer"]["type"],
        "http"
    );
    assert_eq!(
        doc["components"]["securitySchemes"]["bearer"]["scheme"],
        "bearer"
    );
    for name in [
        "Problem",
        "Reading",
        "ReadingsReport",
        "Gauge",
        "ReachDocument",
        "Forecast",
        "PointForecast",
        "Level",
        "Exceedances",
        "Run",
        "Upload",
    ] {
        assert!(
            doc["components"]["schemas"].get(name).is_some(),
            "schema {name} is missing"
        );
    }
    for field in ["field", "row", "errors"] {
        assert!(
            doc["components"]["schemas"]["Problem"]["properties"]
                .get(field)
                .is_some(),
            "Problem has no `{field}`"
        );
    }

    // Every reference resolves inside the document.
    let mut refs = Vec::new();
    collect_refs(&doc, &mut refs);
    assert!(refs.len() > 50, "only {} references?", refs.len());
    for r in &refs {
        assert!(r.starts_with("#/"), "non-local $ref {r}");
        assert!(resolve(&doc, r).is_some(), "$ref {r} does not resolve");
    }

    let mut operation_ids = BTreeSet::new();
    for (method, path, op) in operations(&doc) {
        let at = format!("{method} {path}");
        let id = op["operationId"]
            .as_str()
            .unwrap_or_else(|| panic!("{at}: no operationId"));
        assert!(
            operation_ids.insert(id.to_owned()),
            "{at}: operationId {id} twice"
        );
        let responses = op["responses"]
            .as_object()
            .unwrap_or_else(|| panic!("{at}: no responses"));
        assert!(!responses.is_empty(), "{at}: empty responses");
        for (code, response) in responses {
            let n: u16 = code
                .parse()
                .unwrap_or_else(|_| panic!("{at}: status {code}"));
            assert!((100..600).contains(&n), "{at}: status {code}");
            let response = deref(&doc, response);
            assert!(
                response["description"].is_string(),
                "{at} {code}: no description"
            );
            if n >= 400 {
                let content = response["content"].as_object();
                assert!(
                    content.is_some_and(|c| c.len() == 1
                        && c.contains_key("application/problem+json")),
                    "{at} {code}: errors are application/problem+json"
                );
            }
            if n == 304 {
                assert!(response.get("content").is_none(), "{at}: 304 has no body");
            }
        }
        // Path parameters: each template name declared as a required path
        // parameter, and nothing declared that the template lacks.
        let params = parameters(&doc, &path, &op);
        let declared: BTreeSet<String> = params
            .iter()
            .filter(|p| p["in"] == "path")
            .map(|p| {
                assert_eq!(
                    p["required"], true,
                    "{at}: path parameter {} not required",
                    p["name"]
                );
                p["name"].as_str().expect("name").to_owned()
            })
            .collect();
        assert_eq!(declared, template_names(&path), "{at}: path parameters");
        for p in &params {
            assert!(
                p["schema"].is_object(),
                "{at}: parameter {} has no schema",
                p["name"]
            );
        }
        // A 304 is documented exactly where If-None-Match is accepted.
        let inm = params
            .iter()
            .any(|p| p["name"] == "If-None-Match" && p["in"] == "header");
        assert_eq!(
            responses.contains_key("304"),
            inm,
            "{at}: 304 and If-None-Match"
        );
        // Writes need a key: they say so and document 401 and 403.
        let security = op["security"]
            .as_array()
            .expect("security stated per operation");
        let optional = security
            .iter()
            .any(|s| s.as_object().is_some_and(|o| o.is_empty()));
        let bearer = security.iter().any(|s| s.get("bearer").is_some());
        if method != "GET" {
            assert!(bearer && !optional, "{at}: writes require the bearer key");
            for code in ["401", "403", "429"] {
                assert!(responses.contains_key(code), "{at}: no {code}");
            }
        } else if bearer {
            // The one read about the key itself needs one; the rest are public.
            assert!(
                optional || path == "/api/keys/self",
                "{at}: reads are public by default"
            );
            for code in ["401", "429"] {
                assert!(responses.contains_key(code), "{at}: no {code}");
            }
        }
        if let Some(body) = op.get("requestBody") {
            for code in ["400", "413", "422"] {
                assert!(responses.contains_key(code), "{at}: body but no {code}");
            }
            let content = body["content"].as_object().expect("request content");
            if content.len() > 1 {
                assert!(
                    responses.contains_key("415"),
                    "{at}: media types but no 415"
                );
            }
        }
    }
}

/// The `(method, path)` pairs routed by `src/http/*.rs`, found by reading
/// the source: `.route("/p", get(a).post(b))` in each module, prefixed with
/// `/api` for the modules `mod.rs` merges into the nested `api` router.
fn scan_routers() -> BTreeSet<(String, String)> {
    let dir = repo_path("src/http");
    let module = std::fs::read_to_string(dir.join("mod.rs")).expect("mod.rs");
    let api_start = module
        .find("let api = Router::new()")
        .expect("the api router");
    let api_len = module[api_start..]
        .find(';')
        .expect("end of the api router");
    let api_chain = &module[api_start..api_start + api_len];
    let merged = |chain: &str| -> Vec<String> {
        chain
            .split(".merge(")
            .skip(1)
            .filter_map(|s| s.split("::router()").next())
            .map(|s| s.trim().to_owned())
            .collect()
    };
    let api_modules = merged(api_chain);
    let mut rest = module.clone();
    rest.replace_range(api_start..api_start + api_len, "");
    let root_modules = merged(&rest);
    assert!(api_modules.len() >= 6, "api modules: {api_modules:?}");
    assert!(
        root_modules.contains(&"health".to_owned()),
        "{root_modules:?}"
    );

    let mut found = BTreeSet::new();
    for (prefix, modules) in [("/api", &api_modules), ("", &root_modules)] {
        for m in modules {
            let text = std::fs::read_to_string(dir.join(format!("{m}.rs")))
                .unwrap_or_else(|e| panic!("src/http/{m}.rs: {e}"));
            let code = text.split("#[cfg(test)]").next().unwrap_or_default();
            assert!(
                !code.contains(".nest("),
                "{m}.rs nests a router: teach this scanner"
            );
            let mut n = 0;
            for piece in code.split(".route(").skip(1) {
                let piece = piece.trim_start();
                let path = piece
                    .strip_prefix('"')
                    .and_then(|p| p.split('"').next())
                    .unwrap_or_else(|| panic!("{m}.rs: a route without a literal path"));
                // The handler expression: up to the `)` closing `.route(`.
                let mut depth = 1;
                let mut end = piece.len();
                for (i, c) in piece.char_indices() {
                    match c {
                        '(' => depth += 1,
                        ')' => {
                            depth -= 1;
                            if depth == 0 {
                                end = i;
                                break;
                            }
                        }
                        _ => {}
                    }
                }
                let handlers = &piece[..end];
                let mut methods = 0;
                for method in METHODS.iter().chain(&["any"]) {
                    let needle = format!("{method}(");
                    for (i, _) in handlers.match_indices(&needle) {
                        let before = handlers[..i].chars().next_back();
                        if before.is_none_or(|c| !(c.is_alphanumeric() || c == '_')) {
                            found.insert((method.to_uppercase(), format!("{prefix}{path}")));
                            methods += 1;
                        }
                    }
                }
                assert!(methods > 0, "{m}.rs: no method for {path}");
                n += 1;
            }
            assert!(n > 0, "{m}.rs: no routes found");
        }
    }
    found
}

#[test]
fn route_list_matches_the_routers() {
    let listed: BTreeSet<(String, String)> = ROUTES
        .iter()
        .map(|(m, p)| ((*m).to_owned(), (*p).to_owned()))
        .collect();
    assert_eq!(listed.len(), ROUTES.len(), "a route is listed twice");
    let scanned = scan_routers();
    assert_eq!(
        scanned.difference(&listed).collect::<Vec<_>>(),
        Vec::<&(String, String)>::new(),
        "routed but not in ROUTES (add them here and to src/http/openapi.json)"
    );
    assert_eq!(
        listed.difference(&scanned).collect::<Vec<_>>(),
        Vec::<&(String, String)>::new(),
        "in ROUTES but not routed"
    );
}

#[test]
fn every_route_is_documented_and_nothing_else() {
    let doc = doc();
    let documented: BTreeSet<(String, String)> = operations(&doc)
        .into_iter()
        .map(|(m, p, _)| (m, p))
        .collect();
    let listed: BTreeSet<(String, String)> = ROUTES
        .iter()
        .map(|(m, p)| ((*m).to_owned(), (*p).to_owned()))
        .collect();
    assert_eq!(
        listed.difference(&documented).collect::<Vec<_>>(),
        Vec::<&(String, String)>::new(),
        "routes missing from src/http/openapi.json"
    );
    assert_eq!(
        documented.difference(&listed).collect::<Vec<_>>(),
        Vec::<&(String, String)>::new(),
        "documented but not routed"
    );
}

// ---------------------------------------------------------------------------
// A small JSON Schema (2020-12 subset) checker: the keywords the document
// uses. Unknown keywords are annotations and ignored.

fn type_matches(t: &str, v: &Value) -> bool {
    match t {
        "null" => v.is_null(),
        "boolean" => v.is_boolean(),
        "object" => v.is_object(),
        "array" => v.is_array(),
        "string" => v.is_string(),
        "number" => v.is_number(),
        "integer" => v.is_i64() || v.is_u64() || v.as_f64().is_some_and(|x| x.fract() == 0.0),
        other => panic!("unknown type {other} in the document"),
    }
}

fn validate(doc: &Value, schema: &Value, v: &Value, at: &str, errors: &mut Vec<String>) {
    if let Some(r) = schema.get("$ref").and_then(Value::as_str) {
        let target = resolve(doc, r).unwrap_or_else(|| panic!("unresolved {r}"));
        validate(doc, target, v, at, errors);
    }
    if let Some(t) = schema.get("type") {
        let ok = match t {
            Value::String(t) => type_matches(t, v),
            Value::Array(ts) => ts
                .iter()
                .any(|t| type_matches(t.as_str().expect("type"), v)),
            _ => panic!("bad type keyword at {at}"),
        };
        if !ok {
            errors.push(format!("{at}: {v} is not of type {t}"));
            return;
        }
    }
    if let Some(c) = schema.get("const")
        && c != v
    {
        errors.push(format!("{at}: {v} is not {c}"));
    }
    if let Some(e) = schema.get("enum").and_then(Value::as_array)
        && !e.contains(v)
    {
        errors.push(format!("{at}: {v} is not one of {e:?}"));
    }
    let count_ok = |list: &Vec<Value>| {
        list.iter()
            .filter(|s| {
                let mut e = Vec::new();
                validate(doc, s, v, at, &mut e);
                e.is_empty()
            })
            .count()
    };
    if let Some(list) = schema.get("oneOf").and_then(Value::as_array) {
        let n = count_ok(list);
        if n != 1 {
            errors.push(format!("{at}: {v} matches {n} of oneOf"));
        }
    }
    if let Some(list) = schema.get("anyOf").and_then(Value::as_array)
        && count_ok(list) == 0
    {
        errors.push(format!("{at}: {v} matches none of anyOf"));
    }
    if let Some(list) = schema.get("allOf").and_then(Value::as_array) {
        for s in list {
            validate(doc, s, v, at, errors);
        }
    }
    match v {
        Value::Object(map) => {
            if let Some(req) = schema.get("required").and_then(Value::as_array) {
                for r in req {
                    let r = r.as_str().expect("required name");
                    if !map.contains_key(r) {
                        errors.push(format!("{at}: missing `{r}`"));
                    }
                }
            }
            let props = schema.get("properties").and_then(Value::as_object);
            for (k, value) in map {
                match props.and_then(|p| p.get(k)) {
                    Some(s) => validate(doc, s, value, &format!("{at}.{k}"), errors),
                    None => match schema.get("additionalProperties") {
                        Some(Value::Bool(false)) => {
                            errors.push(format!("{at}: `{k}` is not documented"));
                        }
                        Some(s @ Value::Object(_)) => {
                            validate(doc, s, value, &format!("{at}.{k}"), errors);
                        }
                        _ => {}
                    },
                }
            }
        }
        Value::Array(items) => {
            if let Some(s) = schema.get("items") {
                for (i, item) in items.iter().enumerate() {
                    validate(doc, s, item, &format!("{at}[{i}]"), errors);
                }
            }
            if let Some(n) = schema.get("minItems").and_then(Value::as_u64)
                && (items.len() as u64) < n
            {
                errors.push(format!("{at}: fewer than {n} items"));
            }
            if let Some(n) = schema.get("maxItems").and_then(Value::as_u64)
                && (items.len() as u64) > n
            {
                errors.push(format!("{at}: more than {n} items"));
            }
        }
        Value::Number(n) => {
            let x = n.as_f64().expect("finite");
            if let Some(m) = schema.get("minimum").and_then(Value::as_f64)
                && x < m
            {
                errors.push(format!("{at}: {x} < minimum {m}"));
            }
            if let Some(m) = schema.get("maximum").and_then(Value::as_f64)
                && x > m
            {
                errors.push(format!("{at}: {x} > maximum {m}"));
            }
            if let Some(m) = schema.get("exclusiveMinimum").and_then(Value::as_f64)
                && x <= m
            {
                errors.push(format!("{at}: {x} <= exclusiveMinimum {m}"));
            }
        }
        Value::String(s) => {
            if schema.get("format").and_then(Value::as_str) == Some("date-time")
                && DateTime::parse_from_rfc3339(s).is_err()
            {
                errors.push(format!("{at}: `{s}` is not an RFC 3339 date-time"));
            }
            let chars = s.chars().count() as u64;
            if let Some(n) = schema.get("minLength").and_then(Value::as_u64)
                && chars < n
            {
                errors.push(format!("{at}: shorter than {n}"));
            }
            if let Some(n) = schema.get("maxLength").and_then(Value::as_u64)
                && chars > n
            {
                errors.push(format!("{at}: longer than {n}"));
            }
        }
        _ => {}
    }
}

#[test]
fn the_schema_checker_rejects_what_it_should() {
    // The checker is only worth its verdicts if it can say no.
    let doc = doc();
    let schema = json!({"$ref": "#/components/schemas/Reading"});
    let good = json!({"time": "2026-03-01T03:15:00.000Z", "stage": 1.2, "discharge": null,
        "quality": "good", "rate_check": "ok", "for_forecast": true, "revision": 0});
    let mut e = Vec::new();
    validate(&doc, &schema, &good, "$", &mut e);
    assert!(e.is_empty(), "{e:?}");
    for (bad, why) in [
        (json!({"quality": "bad"}), "enum"),
        (json!({"time": "yesterday"}), "date-time"),
        (json!({"revision": 1.5}), "integer"),
        (json!({"extra": 1}), "additionalProperties"),
        (json!({"stage": "high"}), "type"),
    ] {
        let mut v = good.clone();
        for (k, x) in bad.as_object().expect("object") {
            v[k] = x.clone();
        }
        let mut e = Vec::new();
        validate(&doc, &schema, &v, "$", &mut e);
        assert!(!e.is_empty(), "{why}: {v} passed");
    }
    let mut v = good.clone();
    v.as_object_mut().expect("object").remove("time");
    let mut e = Vec::new();
    validate(&doc, &schema, &v, "$", &mut e);
    assert!(!e.is_empty(), "required: {v} passed");
}

// ---------------------------------------------------------------------------
// Against the real server.

const REACH: &str = "oa-reach";
const GAUGE: &str = "oa-gauge";
const POINT: &str = "Quillet Bridge";

/// An invented 10 km trapezoidal reach with a bridge at mid-reach
/// (`common::bridge_reach`), the bridge watched by the gauge and its upper
/// threshold given a severity.
fn reach_doc() -> Value {
    let mut doc = bridge_reach("Quillet Water (invented)", POINT, GAUGE);
    doc["points"][0]["gauge"] = json!(GAUGE);
    doc["points"][0]["thresholds"][1]["severity"] = json!("severe");
    doc
}

fn encode(s: &str) -> String {
    s.bytes()
        .map(|b| {
            if b.is_ascii_alphanumeric() || b"-._~".contains(&b) {
                (b as char).to_string()
            } else {
                format!("%{b:02X}")
            }
        })
        .collect()
}

fn fill(path: &str, values: &BTreeMap<&str, String>) -> String {
    let mut out = path.to_owned();
    for name in template_names(path) {
        let v = values
            .get(name.as_str())
            .unwrap_or_else(|| panic!("no test value for {{{name}}}"));
        out = out.replace(&format!("{{{name}}}"), &encode(v));
    }
    out
}

struct Answer {
    status: u16,
    media: Option<String>,
    etag: Option<String>,
    body: Vec<u8>,
}

async fn send(
    app: &TestApp,
    method: &str,
    url_path: &str,
    key: Option<&str>,
    headers: &[(&str, &str)],
) -> Answer {
    let method = reqwest::Method::from_bytes(method.as_bytes()).expect("method");
    let mut req = app.client.request(method, app.url(url_path));
    if let Some(k) = key {
        req = req.bearer_auth(k);
    }
    for (name, value) in headers {
        req = req.header(*name, *value);
    }
    let res = req.send().await.expect("request");
    let status = res.status().as_u16();
    let header = |name: &str| {
        res.headers()
            .get(name)
            .and_then(|v| v.to_str().ok())
            .map(str::to_owned)
    };
    let media = header("content-type").map(|c| {
        c.split(';')
            .next()
            .unwrap_or_default()
            .trim()
            .to_ascii_lowercase()
    });
    let etag = header("etag");
    let body = res.bytes().await.expect("body").to_vec();
    Answer {
        status,
        media,
        etag,
        body,
    }
}

/// Checks an answer against the operation's documented responses and
/// returns the JSON body, if any.
fn check_answer(doc: &Value, op_name: &str, op: &Value, a: &Answer) -> Option<Value> {
    let text = String::from_utf8_lossy(&a.body);
    let at = format!("{op_name} -> {}", a.status);
    if a.status == 404 || a.status == 405 {
        // Never the router's own answer for an unrouted method or path.
        assert!(
            a.status != 405 && !text.contains("No resource at"),
            "{at}: not routed: {text}"
        );
    }
    let response = op["responses"]
        .get(a.status.to_string())
        .map(|r| deref(doc, r))
        .unwrap_or_else(|| panic!("{at}: status not documented: {text}"));
    let Some(content) = response.get("content").and_then(Value::as_object) else {
        assert!(a.body.is_empty(), "{at}: undocumented body {text}");
        return None;
    };
    let media = a
        .media
        .as_deref()
        .unwrap_or_else(|| panic!("{at}: no Content-Type"));
    let entry = content
        .get(media)
        .unwrap_or_else(|| panic!("{at}: media type {media} not documented"));
    if a.etag.is_some() && a.status == 200 {
        assert!(
            response["headers"].get("ETag").is_some(),
            "{at}: ETag sent but not documented"
        );
    }
    if !media.ends_with("json") {
        return None;
    }
    let value: Value =
        serde_json::from_slice(&a.body).unwrap_or_else(|e| panic!("{at}: not JSON ({e}): {text}"));
    let mut errors = Vec::new();
    validate(doc, &entry["schema"], &value, "$", &mut errors);
    assert!(
        errors.is_empty(),
        "{at}: body does not match the schema:\n{}\n{value:#}",
        errors.join("\n")
    );
    Some(value)
}

struct Fixture {
    app: TestApp,
    admin: String,
    values: BTreeMap<&'static str, String>,
    _dir: tempfile::TempDir,
}

async fn fixture() -> Fixture {
    let gauge = reach_gauge("Quillet gauge", REACH, "both", 10.0, 5.0);
    let ReachApp { app, keys, dir } = ReachApp::start(
        |c| {
            c.forecast.debounce_ms = 0;
            c.forecast.stale_after_minutes = 60;
        },
        (REACH, &reach_doc()),
        (GAUGE, &gauge),
    )
    .await;
    let Keys {
        admin,
        gauge: gauge_key,
        forecaster,
    } = keys;
    let now = Utc::now();
    let readings: Vec<Value> = (0..=12_i32)
        .map(|k| {
            let t = now - chrono::Duration::minutes(15 * i64::from(12 - k));
            json!({"time": t.to_rfc3339_opts(SecondsFormat::Millis, true),
                   "stage": 15.0 + 0.05 * f64::from(k), "discharge": 20.0 + 10.0 * f64::from(k),
                   "quality": "good"})
        })
        .collect();
    let res = app
        .post_readings(&gauge_key, GAUGE, &json!({ "readings": readings }))
        .await;
    body_of(res, 200).await;
    let series: Vec<Value> = (0..=24)
        .map(|h| {
            let t = now + chrono::Duration::hours(h);
            let q = 140.0 + 200.0 * (1.0 - (h as f64 - 6.0).abs() / 18.0).max(0.0);
            json!({"time": t.to_rfc3339(), "discharge": q})
        })
        .collect();
    let upload = json!({"reason": "test flood", "series": series});
    let res = app.post_inflow(&forecaster, REACH, &upload).await;
    let version = json_of(res, 201).await["version"].to_string();
    let res = app.run_and_wait(&forecaster, REACH).await;
    let summary = json_of(res, 200).await;
    assert_eq!(summary["status"], "ok", "{summary}");
    let run_id = summary["run_id"].to_string();

    // A CAP message, if the run issued one (the flood crosses both
    // thresholds); an unknown identifier otherwise (a documented 404).
    let feed = app
        .get("/api/cap/feed.atom")
        .await
        .text()
        .await
        .expect("feed text");
    let identifier = feed
        .split("/api/cap/")
        .skip(1)
        .filter_map(|s| s.split(['"', '<']).next())
        .find(|s| *s != "feed.atom" && !s.is_empty())
        .unwrap_or("no-such-message")
        .to_owned();
    let time = readings[12]["time"].as_str().expect("time").to_owned();

    let values = BTreeMap::from([
        ("gauge", GAUGE.to_owned()),
        ("reach", REACH.to_owned()),
        ("time", time),
        ("point", POINT.to_owned()),
        ("id", run_id),
        ("version", version),
        ("identifier", identifier),
        ("slug", "invalid-parameter".to_owned()),
    ]);
    Fixture {
        app,
        admin,
        values,
        _dir: dir,
    }
}

/// Every documented GET, with its path filled with the created resources
/// and once per enumerated query value, answers as documented; an `ETag`
/// leads to the documented 304.
#[tokio::test]
async fn every_documented_get_answers_as_documented() {
    let f = fixture().await;
    let doc = doc();
    let mut checked = 0;
    let mut conditional = BTreeSet::new();
    for (method, path, op) in operations(&doc) {
        if method != "GET" {
            continue;
        }
        let base = fill(&path, &f.values);
        // A read documented with a required key (no `{}` alternative) gets one.
        let needs_key = !op["security"]
            .as_array()
            .is_none_or(|s| s.is_empty() || s.iter().any(|r| r == &json!({})));
        let key = needs_key.then_some(f.admin.as_str());
        let mut queries = vec![String::new()];
        for p in parameters(&doc, &path, &op) {
            if p["in"] != "query" {
                continue;
            }
            for v in p["schema"]["enum"].as_array().into_iter().flatten() {
                queries.push(format!(
                    "?{}={}",
                    p["name"].as_str().expect("name"),
                    v.as_str().expect("enum value")
                ));
            }
        }
        for q in queries {
            let url = format!("{base}{q}");
            let name = format!("GET {url}");
            let a = send(&f.app, "GET", &url, key, &[]).await;
            assert_eq!(
                a.status,
                200,
                "{name}: {}",
                String::from_utf8_lossy(&a.body)
            );
            let body = check_answer(&doc, &name, &op, &a);
            if path == "/api/openapi.json" {
                assert_eq!(body.as_ref(), Some(&doc), "the served document is the file");
            }
            if q.contains("format=csv") {
                assert_eq!(a.media.as_deref(), Some("text/csv"), "{name}");
            }
            checked += 1;
            let Some(etag) = a.etag else { continue };
            assert!(
                op["responses"].get("304").is_some(),
                "{name}: sends an ETag but documents no 304"
            );
            // The answer may change between the two requests (a run that
            // a write queued finishing now): then the new tag differs.
            let mut etag = etag;
            let mut got_304 = false;
            for _ in 0..5 {
                let b = send(&f.app, "GET", &url, key, &[("if-none-match", &etag)]).await;
                check_answer(&doc, &format!("{name} (If-None-Match)"), &op, &b);
                if b.status == 304 {
                    assert_eq!(
                        b.etag.as_deref(),
                        Some(etag.as_str()),
                        "{name}: 304 names its tag"
                    );
                    got_304 = true;
                    break;
                }
                let new = b.etag.expect("a 200 carries its ETag");
                assert_ne!(new, etag, "{name}: a matching If-None-Match gave 200");
                etag = new;
            }
            assert!(got_304, "{name}: never 304");
            conditional.insert(path.clone());
        }
    }
    assert!(checked >= 30, "only {checked} GET requests checked");
    for p in [
        "/api/reaches/{reach}/forecast",
        "/api/exceedances",
        "/api/cap/feed.atom",
        "/api/reaches/{reach}/cap/feed.atom",
    ] {
        assert!(
            conditional.contains(p),
            "{p}: the 304 path was not exercised"
        );
    }

    // Unknown ids: documented answers (404, or 422 for a malformed id).
    let unknown = BTreeMap::from([
        ("gauge", "no-such-gauge".to_owned()),
        ("reach", "no-such-reach".to_owned()),
        ("time", "2001-01-01T00:00:00Z".to_owned()),
        ("point", "No Such Point".to_owned()),
        ("id", "999999".to_owned()),
        ("version", "999999".to_owned()),
        ("identifier", "no-such-message".to_owned()),
        ("slug", "no-such-problem".to_owned()),
    ]);
    let mut not_found = 0;
    for (method, path, op) in operations(&doc) {
        if method != "GET" || template_names(&path).is_empty() {
            continue;
        }
        let url = fill(&path, &unknown);
        let a = send(&f.app, "GET", &url, None, &[]).await;
        check_answer(&doc, &format!("GET {url}"), &op, &a);
        not_found += usize::from(a.status == 404);
    }
    assert!(
        not_found >= 8,
        "only {not_found} unknown resources were 404"
    );
    // A bad query value and an unknown one are documented problems.
    for url in [
        format!("/api/gauges/{GAUGE}/readings?limit=0"),
        format!("/api/gauges/{GAUGE}/readings?colour=blue"),
        format!("/api/reaches/{REACH}/forecast?units=imperial"),
        format!("/api/reaches/{REACH}/runs?limit=5000"),
        "/api/exceedances?colour=blue".to_owned(),
        "/api/runs/first".to_owned(),
    ] {
        let path = documented_path(&doc, &url);
        let op = &doc["paths"][&path]["get"];
        let a = send(&f.app, "GET", &url, None, &[]).await;
        assert!(a.status >= 400, "GET {url}: {}", a.status);
        check_answer(&doc, &format!("GET {url}"), op, &a);
    }
    f.app.stop().await;
}

/// The documented path template a concrete URL matches.
fn documented_path(doc: &Value, url: &str) -> String {
    let path = url.split('?').next().unwrap_or_default();
    let segs: Vec<&str> = path.split('/').collect();
    doc["paths"]
        .as_object()
        .expect("paths")
        .keys()
        .find(|t| {
            let ts: Vec<&str> = t.split('/').collect();
            ts.len() == segs.len()
                && ts
                    .iter()
                    .zip(&segs)
                    .all(|(t, s)| t == s || (t.starts_with('{') && t.ends_with('}')))
        })
        .unwrap_or_else(|| panic!("{url} matches no documented path"))
        .clone()
}

/// Every documented write is routed: without a key it is 401 (documented,
/// with `WWW-Authenticate`); with an admin key and an empty body it gets a
/// documented answer.
#[tokio::test]
async fn every_documented_write_is_routed_and_answers_as_documented() {
    let f = fixture().await;
    let doc = doc();
    let mut writes = 0;
    for (method, path, op) in operations(&doc) {
        if method == "GET" {
            continue;
        }
        let url = fill(&path, &f.values);
        let name = format!("{method} {url}");
        let a = send(&f.app, &method, &url, None, &[]).await;
        assert_eq!(
            a.status,
            401,
            "{name} without a key: {}",
            String::from_utf8_lossy(&a.body)
        );
        let problem = check_answer(&doc, &name, &op, &a).expect("a problem");
        assert_eq!(problem["type"], "/problems/unauthorized");

        let a = send(&f.app, &method, &url, Some(&f.admin), &[]).await;
        check_answer(&doc, &format!("{name} (admin, empty body)"), &op, &a);
        if op.get("requestBody").is_some() {
            // 409: an empty body that is a valid request (a fit with its
            // defaults) which the stored data cannot satisfy.
            assert!(
                [400, 409, 415, 422].contains(&a.status),
                "{name}: an empty body was accepted ({})",
                a.status
            );
        }
        writes += 1;
    }
    assert_eq!(writes, ROUTES.iter().filter(|(m, _)| *m != "GET").count());

    // A gauge key without the role for a forecaster's write: 403.
    let gauge_key = f.app.key(Role::Gauge, &[GAUGE]).await;
    let url = format!("/api/reaches/{REACH}/runs");
    let a = send(&f.app, "POST", &url, Some(&gauge_key), &[]).await;
    assert_eq!(a.status, 403);
    check_answer(
        &doc,
        &format!("POST {url}"),
        &doc["paths"]["/api/reaches/{reach}/runs"]["post"],
        &a,
    );
    f.app.stop().await;
}

/// With `auth.public_reads = false` every read that the document says
/// takes an optional key answers 401 without one, and the unauthenticated
/// probes still answer; a key past its budget gets the documented 429.
#[tokio::test]
async fn security_requirements_match_the_server() {
    let dir = tempfile::tempdir().expect("temp dir");
    let mut config = test_config(dir.path());
    config.auth.public_reads = false;
    config.auth.rate_limit_burst = 1;
    config.auth.rate_limit_per_sec = 0.001;
    let app = spawn_app_with(config).await;
    let doc = doc();
    let values = BTreeMap::from([
        ("gauge", "g".to_owned()),
        ("reach", "r".to_owned()),
        ("time", "2026-03-01T00:00:00Z".to_owned()),
        ("point", "p".to_owned()),
        ("id", "1".to_owned()),
        ("version", "1".to_owned()),
        ("identifier", "x".to_owned()),
        ("slug", "unauthorized".to_owned()),
    ]);
    for (method, path, op) in operations(&doc) {
        if method != "GET" {
            continue;
        }
        let url = fill(&path, &values);
        let a = send(&app, "GET", &url, None, &[]).await;
        check_answer(&doc, &format!("GET {url}"), &op, &a);
        let public = op["security"].as_array().is_some_and(Vec::is_empty);
        if public {
            assert_eq!(a.status, 200, "GET {url} is documented as open");
        } else {
            assert_eq!(a.status, 401, "GET {url} needs a key here");
        }
    }
    let key = app.key(Role::Gauge, &["g"]).await;
    let op = &doc["paths"]["/api/gauges"]["get"];
    let a = send(&app, "GET", "/api/gauges", Some(&key), &[]).await;
    assert_eq!(a.status, 200);
    check_answer(&doc, "GET /api/gauges (key)", op, &a);
    let a = send(&app, "GET", "/api/gauges", Some(&key), &[]).await;
    assert_eq!(a.status, 429);
    check_answer(&doc, "GET /api/gauges (past the budget)", op, &a);
    app.stop().await;
}

/// The document is served with the JSON media type, byte for byte.
#[tokio::test]
async fn the_document_is_served() {
    let dir = tempfile::tempdir().expect("temp dir");
    let app = spawn_app(dir.path()).await;
    let res = app.get("/api/openapi.json").await;
    assert_eq!(res.status(), 200);
    assert_eq!(
        res.headers()
            .get("content-type")
            .and_then(|v| v.to_str().ok()),
        Some("application/json")
    );
    assert_eq!(res.text().await.expect("text"), DOCUMENT);
    app.stop().await;
}
