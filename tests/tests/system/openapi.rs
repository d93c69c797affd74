//! The contract, `openapi.yaml`, against the server: a change to either that the
//! other does not follow fails here.
//!
//! # How the router is known
//!
//! axum's `Router` cannot list its routes, and a hand-kept list beside it would drift
//! just as the YAML can. So the routes are read from two places that cannot lie:
//!
//! - **the source**: every `.route("PATH", get(..).put(..))` call in
//!   `crates/dispar/src` (test modules excluded). This is the only way to find a
//!   route the document does not mention, and it also catches a method added to a
//!   path. An unusual registration (`.nest`, `.route_service`, `any(..)`, `on(..)`)
//!   fails the test until this reader learns it, rather than being skipped.
//! - **the running binary**: each documented operation is sent once (path parameters
//!   from the document's examples), and `/metrics` must then show a request counted
//!   under exactly that route template and method, so the router really serves the
//!   documented path with the documented parameter names; a method the path does
//!   not take must get 405 with an `Allow` header listing exactly the documented
//!   methods; and an operation that needs a key must answer 401 without one.
//!
//! Problem types: the document's problem responses (type slugs with their statuses)
//! must equal the server's `ProblemKind`s (read from `error.rs`), every slug must
//! resolve at `/problems/{slug}` with the documented status, and every documented
//! error status of an operation must be the status of some problem kind. Last, the
//! server must serve this very file at `/openapi.yaml`.
//!
//! The YAML is read with `serde_norway` into a `serde_json::Value` (the maintained
//! fork of the archived `serde_yaml`, with the same API; see tests/Cargo.toml).

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

use dispar_system_tests::{Body, Server, Value};

/// HTTP methods an OpenAPI path item may hold.
const METHODS: [&str; 8] = [
    "get", "put", "post", "delete", "options", "head", "patch", "trace",
];

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

fn spec_text() -> String {
    std::fs::read_to_string(root().join("openapi.yaml")).expect("openapi.yaml at the top")
}

fn spec() -> Value {
    serde_norway::from_str(&spec_text()).expect("openapi.yaml is YAML that maps to JSON")
}

/// Follows a local `$ref` (`#/components/...`) until a node without one.
fn resolve<'a>(spec: &'a Value, mut node: &'a Value) -> &'a Value {
    while let Some(r) = node.get("$ref").and_then(Value::as_str) {
        let pointer = r.strip_prefix('#').expect("local $ref");
        node = spec
            .pointer(pointer)
            .unwrap_or_else(|| panic!("dangling $ref {r}"));
    }
    node
}

/// `(METHOD, path template)` of every documented operation.
fn documented(spec: &Value) -> BTreeSet<(String, String)> {
    let mut out = BTreeSet::new();
    for (path, item) in spec["paths"].as_object().expect("paths") {
        for (key, _) in item.as_object().expect("path item") {
            if METHODS.contains(&key.as_str()) {
                out.insert((key.to_uppercase(), path.clone()));
            }
        }
    }
    out
}

// ------------------------------------------------------------- reading the source

/// Every `.rs` file under `dir`.
fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

/// The code of a source file without comment lines and without test modules: the
/// item after a `#[cfg(test)]` line is skipped (`mod tests;`, or `mod tests { .. }`
/// up to its balancing brace). Files named `tests.rs` are test modules as a whole.
fn code_of(path: &Path) -> String {
    if path.file_name().is_some_and(|n| n == "tests.rs") {
        return String::new();
    }
    let text = std::fs::read_to_string(path).unwrap();
    let mut code = String::new();
    let mut lines = text.lines();
    while let Some(line) = lines.next() {
        let t = line.trim_start();
        if t.starts_with("#[cfg(test)]") {
            let mut depth = 0i64;
            for item in lines.by_ref() {
                depth += item.matches('{').count() as i64;
                depth -= item.matches('}').count() as i64;
                if depth <= 0 && (item.trim_end().ends_with(';') || item.trim_end().ends_with('}'))
                {
                    break;
                }
            }
            continue;
        }
        if t.starts_with("//") {
            continue;
        }
        code.push_str(line);
        code.push('\n');
    }
    code
}

/// Reads a Rust string literal starting at `s` (which begins with `"`): its text and
/// the rest after the closing quote. Escapes are kept as written (paths have none).
fn string_literal(s: &str) -> (String, &str) {
    let body = s.strip_prefix('"').expect("a string literal");
    let mut escaped = false;
    for (i, c) in body.char_indices() {
        match c {
            '\\' if !escaped => escaped = true,
            '"' if !escaped => return (body[..i].to_owned(), &body[i + 1..]),
            _ => escaped = false,
        }
    }
    panic!("unterminated string literal");
}

/// The text up to the `)` closing an already opened `(`, skipping nested parentheses
/// and string literals; returns (inside, rest after the `)`).
fn until_close(s: &str) -> (&str, &str) {
    let mut depth = 0usize;
    let mut in_str = false;
    let mut escaped = false;
    for (i, c) in s.char_indices() {
        if in_str {
            match c {
                '\\' if !escaped => escaped = true,
                '"' if !escaped => in_str = false,
                _ => escaped = false,
            }
            continue;
        }
        match c {
            '"' => in_str = true,
            '(' => depth += 1,
            ')' if depth == 0 => return (&s[..i], &s[i + 1..]),
            ')' => depth -= 1,
            _ => {}
        }
    }
    panic!("unbalanced parentheses");
}

/// The methods of a method router expression such as `put(put_day).get(get_day)`:
/// the identifiers called at parenthesis depth 0.
fn methods_of(expr: &str, path: &str) -> Vec<String> {
    let mut methods = Vec::new();
    let mut depth = 0usize;
    let mut ident = String::new();
    for c in expr.chars() {
        match c {
            '(' => {
                if depth == 0 && !ident.is_empty() {
                    match ident.as_str() {
                        m if METHODS.contains(&m) => methods.push(m.to_uppercase()),
                        "layer" | "route_layer" | "with_state" => {}
                        other => panic!(
                            "route {path}: the method router calls `{other}(..)`, which this test cannot read; teach methods_of() about it"
                        ),
                    }
                }
                depth += 1;
                ident.clear();
            }
            ')' => {
                depth = depth.saturating_sub(1);
                ident.clear();
            }
            c if depth == 0 && (c.is_alphanumeric() || c == '_') => ident.push(c),
            _ => {
                if depth == 0 {
                    ident.clear();
                }
            }
        }
    }
    assert!(!methods.is_empty(), "route {path}: no method in `{expr}`");
    methods
}

/// `(METHOD, path template)` of every route registered in `crates/dispar/src`, with
/// the file that registers it.
fn registered() -> BTreeMap<(String, String), PathBuf> {
    let mut files = Vec::new();
    rust_files(&root().join("crates/dispar/src"), &mut files);
    files.sort();
    let mut out = BTreeMap::new();
    for file in files {
        let code = code_of(&file);
        for unsupported in [".nest(", ".nest_service(", ".route_service("] {
            assert!(
                !code.contains(unsupported),
                "{}: `{unsupported}..)` registers routes this test cannot read; teach registered() about it",
                file.display()
            );
        }
        let mut rest = code.as_str();
        while let Some(at) = rest.find(".route(") {
            let after = rest[at + ".route(".len()..].trim_start();
            let (inside, next) = until_close(after);
            let (path, expr) = string_literal(inside.trim_start());
            let expr = expr.trim_start().strip_prefix(',').unwrap_or_else(|| {
                panic!("{}: route {path}: expected `, methods`", file.display())
            });
            for m in methods_of(expr, &path) {
                let previous = out.insert((m.clone(), path.clone()), file.clone());
                assert!(
                    previous.is_none(),
                    "{m} {path} is registered twice ({} and {})",
                    previous.unwrap().display(),
                    file.display()
                );
            }
            rest = next;
        }
    }
    out
}

#[test]
fn every_route_the_router_registers_is_documented_and_every_documented_one_is_registered() {
    let spec = spec();
    let documented = documented(&spec);
    let registered = registered();
    assert!(
        registered.len() >= 10,
        "the source reader found only {registered:?}"
    );
    let undocumented: Vec<String> = registered
        .iter()
        .filter(|(op, _)| !documented.contains(*op))
        .map(|((m, p), file)| format!("{m} {p} (registered in {})", file.display()))
        .collect();
    let unrouted: Vec<String> = documented
        .iter()
        .filter(|op| !registered.contains_key(*op))
        .map(|(m, p)| format!("{m} {p}"))
        .collect();
    assert!(
        undocumented.is_empty() && unrouted.is_empty(),
        "router and openapi.yaml disagree.\nIn the router, not in openapi.yaml:\n  {}\nIn openapi.yaml, not in the router:\n  {}",
        undocumented.join("\n  "),
        unrouted.join("\n  ")
    );
}

// ------------------------------------------------------------- the running server

/// The operation's parameters (path item's and its own), resolved.
fn parameters<'a>(spec: &'a Value, path: &str, method: &str) -> Vec<&'a Value> {
    let item = &spec["paths"][path];
    let mut out = Vec::new();
    for list in [&item["parameters"], &item[method]["parameters"]] {
        if let Some(list) = list.as_array() {
            out.extend(list.iter().map(|p| resolve(spec, p)));
        }
    }
    out
}

/// An example value of a parameter: its `example`, its first `examples` entry, or
/// its schema's first `examples` entry.
fn example_of(spec: &Value, param: &Value) -> Option<String> {
    let value = param
        .get("example")
        .or_else(|| {
            param
                .get("examples")
                .and_then(Value::as_object)
                .and_then(|m| m.values().next())
                .map(|e| &e["value"])
        })
        .or_else(|| {
            resolve(spec, &param["schema"])
                .get("examples")
                .and_then(|e| e.get(0))
        })?;
    Some(match value {
        Value::String(s) => s.clone(),
        other => other.to_string(),
    })
}

/// The path with every `{name}` replaced by the parameter's example.
fn concrete_path(spec: &Value, path: &str, method: &str) -> String {
    let mut out = path.to_owned();
    for p in parameters(spec, path, method) {
        if p["in"] == "path" {
            let name = p["name"].as_str().unwrap();
            let value = example_of(spec, p)
                .unwrap_or_else(|| panic!("{method} {path}: path parameter {name} has no example"));
            out = out.replace(&format!("{{{name}}}"), &value);
        }
    }
    assert!(
        !out.contains('{'),
        "{method} {path}: unfilled parameter in {out}"
    );
    out
}

/// The security requirement that applies to an operation (its own or the global one).
fn needs_bearer(spec: &Value, path: &str, method: &str) -> bool {
    let security = spec["paths"][path][method]
        .get("security")
        .unwrap_or(&spec["security"]);
    security
        .as_array()
        .is_some_and(|reqs| reqs.iter().any(|r| r.get("bearer").is_some()))
}

/// `(method, route, status)` -> count of `dispar_http_requests_total`.
fn request_counts(metrics: &str) -> BTreeMap<(String, String, String), f64> {
    let mut out = BTreeMap::new();
    for line in metrics.lines() {
        let Some(rest) = line.strip_prefix("dispar_http_requests_total{") else {
            continue;
        };
        let (labels, value) = rest.split_once("} ").unwrap();
        let mut map = BTreeMap::new();
        let mut s = labels;
        while let Some((name, after)) = s.split_once("=\"") {
            let (value, after) = after.split_once('"').unwrap();
            map.insert(name.trim_start_matches(',').to_owned(), value.to_owned());
            s = after;
        }
        out.insert(
            (
                map["method"].clone(),
                map["route"].clone(),
                map["status"].clone(),
            ),
            value.trim().parse().unwrap(),
        );
    }
    out
}

#[test]
fn the_server_routes_each_documented_operation_to_its_template_and_refuses_other_methods() {
    let spec = spec();
    let documented = documented(&spec);
    let s = Server::start();
    let admin = s.admin().to_owned();

    let mut problems = Vec::new();
    for (method, path) in &documented {
        let lower = method.to_lowercase();
        let url = concrete_path(&spec, path, &lower);
        let body = match method.as_str() {
            "PUT" | "POST" if path.starts_with("/v1/") => Body::Json(serde_json::json!({})),
            _ => Body::None,
        };
        let reply = s.request(method, &url, Some(&admin), body);
        if reply.status == 405 {
            problems.push(format!("{method} {url}: 405 ({})", reply.text));
        }
        if needs_bearer(&spec, path, &lower) {
            let anonymous = s.request(method, &url, None, Body::None);
            if anonymous.status != 401 {
                problems.push(format!(
                    "{method} {url}: documented as needing a key, but answers {} without one",
                    anonymous.status
                ));
            }
        }
    }

    // Every documented operation was counted under its own template and method.
    let metrics = s.request("GET", "/metrics", None, Body::None);
    assert_eq!(metrics.status, 200);
    let counts = request_counts(&metrics.text);
    for (method, path) in &documented {
        let routed = counts
            .keys()
            .any(|(m, route, _)| m == method && route == path);
        if !routed {
            let seen: Vec<String> = counts
                .keys()
                .filter(|(m, _, _)| m == method)
                .map(|(_, r, st)| format!("{r} ({st})"))
                .collect();
            problems.push(format!(
                "{method} {path}: no request counted under this route template; {method} requests were counted as: {}",
                seen.join(", ")
            ));
        }
    }

    // A method a documented path does not take: 405, and Allow names the documented
    // methods (axum adds HEAD wherever GET is routed).
    let mut by_path: BTreeMap<&str, BTreeSet<String>> = BTreeMap::new();
    for (method, path) in &documented {
        by_path.entry(path).or_default().insert(method.clone());
    }
    for (path, methods) in &by_path {
        let probe = if methods.contains("DELETE") {
            "PATCH"
        } else {
            "DELETE"
        };
        assert!(!methods.contains(probe), "{path} documents {probe}");
        let lower = methods.iter().next().unwrap().to_lowercase();
        let url = concrete_path(&spec, path, &lower);
        let reply = s.request(probe, &url, Some(&admin), Body::None);
        if reply.status != 405 {
            problems.push(format!(
                "{probe} {url}: expected 405 (not documented), got {} {}",
                reply.status, reply.text
            ));
            continue;
        }
        let mut expected = methods.clone();
        if expected.contains("GET") {
            expected.insert("HEAD".to_owned());
        }
        let allowed: BTreeSet<String> = reply
            .header("allow")
            .unwrap_or("")
            .split(',')
            .map(|m| m.trim().to_owned())
            .filter(|m| !m.is_empty())
            .collect();
        if allowed != expected {
            problems.push(format!(
                "{path}: the router allows {allowed:?}, openapi.yaml documents {expected:?}"
            ));
        }
    }

    // An undocumented path is 404 for every method.
    let nowhere = s.request("GET", "/v1/no-such-resource", Some(&admin), Body::None);
    reply_is_problem(&nowhere, 404, &mut problems);

    assert!(
        problems.is_empty(),
        "router and openapi.yaml disagree:\n  {}",
        problems.join("\n  ")
    );
}

fn reply_is_problem(reply: &dispar_system_tests::Reply, status: u16, problems: &mut Vec<String>) {
    if reply.status != status || reply.header("content-type") != Some("application/problem+json") {
        problems.push(format!(
            "expected a {status} problem, got {} {:?} {}",
            reply.status,
            reply.header("content-type"),
            reply.text
        ));
    }
}

// ------------------------------------------------------------- problem types

/// `slug -> status` of every problem response component of the document (the
/// `type` const or enum and the `status` const of its schema's second `allOf` part).
fn documented_problem_kinds(spec: &Value) -> BTreeMap<String, u16> {
    let mut out = BTreeMap::new();
    for (name, response) in spec["components"]["responses"].as_object().unwrap() {
        let Some(media) = response["content"].get("application/problem+json") else {
            continue;
        };
        let parts = media["schema"]["allOf"]
            .as_array()
            .unwrap_or_else(|| panic!("response {name}: schema is allOf [Problem, narrowing]"));
        let narrowing = &parts[1]["properties"];
        let status = narrowing["status"]["const"]
            .as_u64()
            .unwrap_or_else(|| panic!("response {name}: no status const"));
        let types: Vec<&str> = match narrowing["type"].get("const") {
            Some(t) => vec![t.as_str().unwrap()],
            None => narrowing["type"]["enum"]
                .as_array()
                .unwrap_or_else(|| panic!("response {name}: no type const or enum"))
                .iter()
                .map(|t| t.as_str().unwrap())
                .collect(),
        };
        for t in types {
            let slug = t.strip_prefix("/problems/").unwrap().to_owned();
            let previous = out.insert(slug.clone(), u16::try_from(status).unwrap());
            assert!(
                previous.is_none(),
                "problem type {slug} is in two response components"
            );
        }
    }
    out
}

/// The slugs of `ProblemKind::slug` in crates/dispar/src/error.rs.
fn server_problem_slugs() -> BTreeSet<String> {
    let code = code_of(&root().join("crates/dispar/src/error.rs"));
    let start = code
        .find("pub fn slug(self)")
        .expect("ProblemKind::slug in error.rs");
    let body = &code[start..];
    let end = body[1..].find("pub fn ").map_or(body.len(), |i| i + 1);
    let mut out = BTreeSet::new();
    let mut rest = &body[..end];
    while let Some(at) = rest.find("=> \"") {
        let (slug, after) = string_literal(&rest[at + 3..]);
        out.insert(slug);
        rest = after;
    }
    out
}

#[test]
fn the_documented_problem_types_are_the_servers_with_their_statuses() {
    let spec = spec();
    let kinds = documented_problem_kinds(&spec);

    let server: BTreeSet<String> = server_problem_slugs();
    let documented: BTreeSet<String> = kinds.keys().cloned().collect();
    assert_eq!(
        documented, server,
        "problem types: openapi.yaml's response components vs ProblemKind in error.rs"
    );
    let listed: BTreeSet<String> = spec["components"]["schemas"]["ProblemSlug"]["enum"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s.as_str().unwrap().to_owned())
        .collect();
    assert_eq!(listed, server, "schemas.ProblemSlug");
    let uris: BTreeSet<String> =
        spec["components"]["schemas"]["Problem"]["properties"]["type"]["enum"]
            .as_array()
            .unwrap()
            .iter()
            .map(|s| s.as_str().unwrap().to_owned())
            .collect();
    let expected_uris: BTreeSet<String> = server.iter().map(|s| format!("/problems/{s}")).collect();
    assert_eq!(uris, expected_uris, "schemas.Problem.type");

    // Every documented error status of an operation is a problem kind's status, and
    // is answered with a problem body (pages answer with HTML).
    let statuses: BTreeSet<u16> = kinds.values().copied().collect();
    let mut problems = Vec::new();
    for (path, item) in spec["paths"].as_object().unwrap() {
        for (method, op) in item.as_object().unwrap() {
            if !METHODS.contains(&method.as_str()) {
                continue;
            }
            for (code, response) in op["responses"].as_object().unwrap() {
                let status: u16 = code.parse().unwrap();
                if status < 400 {
                    continue;
                }
                let response = resolve(&spec, response);
                if response["content"]
                    .get("application/problem+json")
                    .is_none()
                {
                    if response["content"].get("text/html").is_none() {
                        problems.push(format!(
                            "{method} {path} {status}: neither a problem nor a page"
                        ));
                    }
                    continue;
                }
                if !statuses.contains(&status) {
                    problems.push(format!(
                        "{method} {path} documents {status}, which no problem kind has"
                    ));
                }
                let component_status = response["content"]["application/problem+json"]["schema"]
                    ["allOf"][1]["properties"]["status"]["const"]
                    .as_u64();
                if component_status != Some(u64::from(status)) {
                    problems.push(format!(
                        "{method} {path} {status}: refers to a problem response of status {component_status:?}"
                    ));
                }
            }
        }
    }
    assert!(problems.is_empty(), "{}", problems.join("\n"));

    // The server describes each type at its URI, with the documented status.
    let s = Server::start();
    for (slug, status) in &kinds {
        let page = s.request("GET", &format!("/problems/{slug}"), None, Body::None);
        assert_eq!(page.status, 200, "/problems/{slug}: {}", page.text);
        assert!(
            page.text.contains(&format!("HTTP status {status}.")),
            "/problems/{slug} should say HTTP status {status}: {}",
            page.text
        );
    }
    let unknown = s.request("GET", "/problems/no-such-kind", None, Body::None);
    assert_eq!(unknown.status, 404, "{}", unknown.text);
}

#[test]
fn the_server_serves_this_very_openapi_yaml() {
    let s = Server::start();
    let reply = s.request("GET", "/openapi.yaml", None, Body::None);
    assert_eq!(reply.status, 200, "{}", reply.text);
    assert_eq!(reply.header("content-type"), Some("application/yaml"));
    assert!(
        reply.text == spec_text(),
        "GET /openapi.yaml differs from openapi.yaml on disk (rebuild the binary)"
    );
    let v: Value = serde_norway::from_str(&reply.text).unwrap();
    assert_eq!(v["openapi"], "3.1.0");
}

// ------------------------------------------------------------- query parameters

/// The field names of `struct NAME { ... }` in a source file (one field a line; the
/// query structs are plain `name: Option<String>` lists with `deny_unknown_fields`).
fn struct_fields(file: &str, name: &str) -> BTreeSet<String> {
    let code = std::fs::read_to_string(root().join(file)).expect("source file");
    let start = code
        .find(&format!("struct {name} {{"))
        .unwrap_or_else(|| panic!("struct {name} not found in {file}"));
    let body = &code[start..];
    let body = &body[body.find('{').expect("{")..body.find('}').expect("}")];
    assert!(
        !body.contains("rename"),
        "{file}: {name} renames a field; teach this reader serde's rename"
    );
    body.lines()
        .filter_map(|l| l.trim().split_once(':'))
        .map(|(field, _)| field.trim().trim_start_matches("pub ").to_owned())
        .filter(|f| !f.is_empty() && !f.starts_with("//"))
        .collect()
}

/// The names of `const NAME: &[&str] = &["a", "b", ...];` in a source file (the list
/// of parameters an endpoint accepts, when its query type serves several endpoints).
fn const_names(file: &str, name: &str) -> BTreeSet<String> {
    let code = std::fs::read_to_string(root().join(file)).expect("source file");
    let start = code
        .find(&format!("const {name}: &[&str] = &["))
        .unwrap_or_else(|| panic!("const {name} not found in {file}"));
    let body = &code[start..];
    let body = &body[body.find("= &[").expect("= &[")..body.find("];").expect("];")];
    body.split('"')
        .skip(1)
        .step_by(2)
        .map(str::to_owned)
        .collect()
}

#[test]
fn the_query_parameters_the_server_reads_are_the_documented_ones() {
    // Each struct below refuses unknown fields (`deny_unknown_fields`), so its field
    // names are exactly the query parameters the server accepts; each upper-case name
    // is the list of parameters an endpoint accepts, every other one being refused.
    let spec = spec();
    let mut drift = Vec::new();
    for (method, path, file, name) in [
        (
            "get",
            "/v1/reports",
            "crates/dispar/src/reports/params.rs",
            "REPORT_PARAMETERS",
        ),
        (
            "get",
            "/v1/reports/series",
            "crates/dispar/src/reports/params.rs",
            "SERIES_PARAMETERS",
        ),
        (
            "get",
            "/v1/counts",
            "crates/dispar/src/counts.rs",
            "ListQuery",
        ),
        (
            "get",
            "/v1/sites/{site}/lines/{line}/days/{date}",
            "crates/dispar/src/counts.rs",
            "ProductQuery",
        ),
        (
            "put",
            "/v1/sites/{site}/lines/{line}/days/{date}",
            "crates/dispar/src/counts.rs",
            "ProductQuery",
        ),
    ] {
        let read = if name.chars().all(|c| c.is_ascii_uppercase() || c == '_') {
            const_names(file, name)
        } else {
            struct_fields(file, name)
        };
        assert!(!read.is_empty(), "{name}: no fields found");
        let documented: BTreeSet<String> = parameters(&spec, path, method)
            .into_iter()
            .filter(|p| p["in"] == "query")
            .map(|p| p["name"].as_str().expect("parameter name").to_owned())
            .collect();
        if read != documented {
            drift.push(format!(
                "{method} {path}: the server reads {read:?} ({file}, {name}); openapi.yaml documents {documented:?}"
            ));
        }
    }
    assert!(
        drift.is_empty(),
        "query parameters drift:\n  {}",
        drift.join("\n  ")
    );
}
