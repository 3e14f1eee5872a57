//! The example HTTP service (examples/serve.rs), started in-process on free loopback ports:
//! good and malformed requests, the limits (413, 422, 503, 408), graceful shutdown, model reload,
//! and its OpenAPI description (examples/serve.openapi.json). Every response any scenario
//! gets is checked against the description (status documented for the path and method, body
//! fields and types as described), and every documented status must be seen.

#[path = "../examples/serve.rs"]
#[allow(dead_code)]
mod serve;

use relume::data::{EncoderSpec, ReadOptions, Table};
use relume::fit::monitor::MonitorConfig;
use relume::serve::predict::Cell;
use relume::{Model, Predictor, Recipe};
use serde_json::{json, Value};
use serve::{Limits, Service};
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};
use std::time::Duration;
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::net::TcpStream;

/// (path, method, status) triples the service answered, for the coverage check.
type Seen = Mutex<BTreeSet<(String, String, u16)>>;

/// A running service and what the scenario has seen of it.
struct Running {
    port: u16,
    spec: Value,
    seen: Arc<Seen>,
}

fn spec() -> Value {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/examples/serve.openapi.json"
    ))
    .unwrap();
    serde_json::from_str(&text).unwrap()
}

/// A small model on columns x (number) and kind (a, b): y = sin(x) + 0.5 for kind a.
fn fitted_model() -> Model {
    let mut csv = String::from("x,kind,y\n");
    for i in 0..150 {
        let x = i as f64 / 15.0;
        let kind = ["a", "b"][i % 2];
        csv += &format!(
            "{x},{kind},{}\n",
            x.sin() + if i % 2 == 0 { 0.5 } else { 0.0 }
        );
    }
    let table = Table::read(csv.as_bytes(), "t", &ReadOptions::default()).unwrap();
    let spec = EncoderSpec {
        target: "y".into(),
        ..EncoderSpec::default()
    };
    let recipe = Recipe {
        hidden: vec![16, 16],
        members: 2,
        ..Recipe::default()
    };
    Model::fit(&table, &spec, &recipe, MonitorConfig::default())
        .unwrap()
        .0
}

/// A model file of this test alone (removed by the caller's guard).
fn model_file(name: &str, model: &Model) -> PathBuf {
    let path = std::env::temp_dir().join(format!("relume-service-{}-{name}", std::process::id()));
    model.save(&path).unwrap();
    path
}

/// Starts the service on a free loopback port; the returned sender stops it.
async fn start(
    path: &Path,
    limits: Limits,
    seen: Arc<Seen>,
) -> (
    Running,
    tokio::sync::oneshot::Sender<()>,
    tokio::task::JoinHandle<std::io::Result<()>>,
) {
    let service = Service::load(path.to_path_buf(), limits).unwrap();
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let port = listener.local_addr().unwrap().port();
    let (stop, stopped) = tokio::sync::oneshot::channel::<()>();
    let server = tokio::spawn(serve::run(listener, service, async {
        stopped.await.ok();
    }));
    let running = Running {
        port,
        spec: spec(),
        seen,
    };
    (running, stop, server)
}

/// Writes the head of a request whose body is `body`.
fn head(method: &str, path: &str, body: &str) -> String {
    format!(
        "{method} {path} HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Type: application/json\r\nContent-Length: {}\r\nConnection: close\r\n\r\n",
        body.len()
    )
}

/// A response: status, lower-cased header lines, JSON body (Null if not JSON).
struct Answer {
    status: u16,
    headers: String,
    body: Value,
}

impl Running {
    /// Sends one request and checks the answer against the description.
    async fn send(&self, method: &str, path: &str, body: &str) -> Answer {
        let mut stream = TcpStream::connect(("127.0.0.1", self.port)).await.unwrap();
        stream
            .write_all((head(method, path, body) + body).as_bytes())
            .await
            .unwrap();
        self.answer(stream, method, path).await
    }

    /// Reads the answer on `stream` and checks it against the description.
    async fn answer(&self, mut stream: TcpStream, method: &str, path: &str) -> Answer {
        let mut response = String::new();
        stream.read_to_string(&mut response).await.unwrap();
        let (head, body) = response.split_once("\r\n\r\n").unwrap();
        let status: u16 = head.split(' ').nth(1).unwrap().parse().unwrap();
        let answer = Answer {
            status,
            headers: head.to_ascii_lowercase(),
            body: serde_json::from_str(body).unwrap_or(Value::Null),
        };
        self.check_against_spec(method, path, &answer);
        answer
    }

    fn check_against_spec(&self, method: &str, path: &str, answer: &Answer) {
        let method = method.to_ascii_lowercase();
        let operation = &self.spec["paths"][path][&method];
        let Some(mut response) = operation["responses"].get(answer.status.to_string()) else {
            // Only documented answers on documented operations; the framework's 404 and
            // 405 on other paths and methods still carry a reason.
            assert!(
                operation.is_null() && [404, 405].contains(&answer.status),
                "{method} {path} answered {} which the description does not list",
                answer.status
            );
            assert!(
                answer.body["error"].as_str().is_some_and(|e| !e.is_empty()),
                "{method} {path}: {}",
                answer.body
            );
            return;
        };
        if let Some(reference) = response["$ref"].as_str() {
            response = resolve(&self.spec, reference);
        }
        let schema = &response["content"]["application/json"]["schema"];
        if let Err(e) = conforms(&self.spec, schema, &answer.body) {
            panic!("{method} {path} {}: {e}\n{}", answer.status, answer.body);
        }
        if let Some(headers) = response["headers"].as_object() {
            for name in headers.keys() {
                let line = format!("\r\n{}:", name.to_ascii_lowercase());
                assert!(answer.headers.contains(&line), "{path}: no {name} header");
            }
        }
        self.seen
            .lock()
            .unwrap()
            .insert((path.to_string(), method, answer.status));
    }
}

/// The object a local `$ref` ("#/components/...") points to.
fn resolve<'a>(spec: &'a Value, reference: &str) -> &'a Value {
    let pointer = reference.strip_prefix('#').expect("a local reference");
    spec.pointer(pointer).expect("the reference exists")
}

/// Checks `value` against the part of OpenAPI 3.0's schema language the description uses:
/// `$ref`, `type`, `nullable`, `enum`, `required`, `properties`, `additionalProperties:
/// false`, `items`, `minLength`, `minimum`.
fn conforms(spec: &Value, schema: &Value, value: &Value) -> Result<(), String> {
    if let Some(reference) = schema["$ref"].as_str() {
        return conforms(spec, resolve(spec, reference), value);
    }
    if value.is_null() && schema["nullable"] == true {
        return Ok(());
    }
    let fits = match schema["type"].as_str() {
        Some("object") => value.is_object(),
        Some("array") => value.is_array(),
        Some("string") => value.is_string(),
        Some("number") => value.is_number(),
        Some("integer") => value.is_i64() || value.is_u64(),
        Some("boolean") => value.is_boolean(),
        Some(other) => return Err(format!("type {other} is not handled here")),
        None => true,
    };
    if !fits {
        return Err(format!("{value} is not of type {}", schema["type"]));
    }
    if let Some(allowed) = schema["enum"].as_array() {
        if !allowed.contains(value) {
            return Err(format!("{value} is not one of {}", schema["enum"]));
        }
    }
    if let (Some(min), Some(s)) = (schema["minLength"].as_u64(), value.as_str()) {
        if (s.chars().count() as u64) < min {
            return Err(format!("{value} is shorter than {min}"));
        }
    }
    if let (Some(min), Some(v)) = (schema["minimum"].as_f64(), value.as_f64()) {
        if v < min {
            return Err(format!("{value} is below {min}"));
        }
    }
    if let Some(object) = value.as_object() {
        for name in schema["required"].as_array().into_iter().flatten() {
            if !object.contains_key(name.as_str().unwrap()) {
                return Err(format!("field {name} is missing"));
            }
        }
        let properties = &schema["properties"];
        for (name, field) in object {
            match properties.get(name) {
                Some(s) => conforms(spec, s, field).map_err(|e| format!("{name}: {e}"))?,
                None if schema["additionalProperties"] == false => {
                    return Err(format!("field {name} is not described"))
                }
                None => {}
            }
        }
    }
    if let Some(items) = value.as_array() {
        for (i, item) in items.iter().enumerate() {
            conforms(spec, &schema["items"], item).map_err(|e| format!("[{i}]: {e}"))?;
        }
    }
    Ok(())
}

/// Good requests, malformed ones, and the framework's own refusals.
async fn requests_and_refusals(service: &Running) {
    let (status, body) = {
        let a = service.send("GET", "/health", "").await;
        (a.status, a.body)
    };
    assert_eq!(status, 200);
    assert_eq!(body["features"], json!(["x", "kind"]));
    assert_eq!(body["generation"], 1);

    let a = service
        .send(
            "POST",
            "/predict",
            r#"{"rows":[{"x":1.0,"kind":"a"},{"x":40,"kind":"b"}]}"#,
        )
        .await;
    assert_eq!(a.status, 200, "{}", a.body);
    let p = &a.body["predictions"];
    assert!(
        (p[0]["prediction"].as_f64().unwrap() - (1f64.sin() + 0.5)).abs() < 0.2,
        "{}",
        a.body
    );
    assert!(p[0]["lower"].as_f64().unwrap() <= p[0]["prediction"].as_f64().unwrap());
    assert_eq!(p[0]["extrapolated"], false);
    assert_eq!(p[1]["extrapolated"], true);
    assert_eq!(p[1]["out_of_range"], json!(["x"]));
    assert!(a.body["caution"].as_str().unwrap().contains("held-out"));
    // A category never seen in training: a prediction, flagged.
    let a = service
        .send("POST", "/predict", r#"{"rows":[{"x":1.0,"kind":"c"}]}"#)
        .await;
    assert_eq!(a.status, 200, "{}", a.body);
    assert_eq!(a.body["predictions"][0]["unseen_category"], json!(["kind"]));
    // Asked to explain: the attributions plus the baseline make the prediction (completeness,
    // Sundararajan, Taly & Yan 2017), one share per input column.
    let a = service
        .send(
            "POST",
            "/predict",
            r#"{"rows":[{"x":1.0,"kind":"b"}],"explain":true}"#,
        )
        .await;
    assert_eq!(a.status, 200, "{}", a.body);
    let p = &a.body["predictions"][0];
    let shares = p["attributions"].as_object().unwrap();
    assert_eq!(shares.len(), 2, "{}", a.body);
    let total: f64 =
        shares.values().map(|v| v.as_f64().unwrap()).sum::<f64>() + p["baseline"].as_f64().unwrap();
    let value = p["prediction"].as_f64().unwrap();
    assert!(
        (total - value).abs() <= 1e-3 * value.abs().max(1.0),
        "{total} vs {value}"
    );

    for (request, reason) in [
        ("{not json", "not JSON"),
        (r#"{"lines":[]}"#, "\"rows\""),
        (r#"{"rows":[{"x":1.0}]}"#, "'kind' is empty"),
        (
            r#"{"rows":[{"x":"one","kind":"a"}]}"#,
            "'x' must be a number",
        ),
        (
            r#"{"rows":[{"x":[1],"kind":"a"}]}"#,
            "number, a string or null",
        ),
        (r#"{"rows":[3]}"#, "row 0 is not an object"),
        (
            r#"{"rows":[],"explain":"yes"}"#,
            "\"explain\" must be true or false",
        ),
        (
            r#"{"rows":[],"explain":null}"#,
            "\"explain\" must be true or false",
        ),
        (
            r#"{"rows":[{"x":1e999,"kind":"a"}]}"#,
            "number out of range",
        ),
    ] {
        let a = service.send("POST", "/predict", request).await;
        assert_eq!(a.status, 400, "{request}: {}", a.body);
        let error = a.body["error"].as_str().unwrap_or("");
        assert!(error.contains(reason), "{request}: {error}");
    }
    // Not in the description: still a reason.
    assert_eq!(service.send("GET", "/predict", "").await.status, 405);
    assert_eq!(service.send("GET", "/nowhere", "").await.status, 404);
}

/// A request whose body is still coming: holds a slot until it is finished or times out.
async fn slow_request(port: u16, body: &str) -> TcpStream {
    let mut stream = TcpStream::connect(("127.0.0.1", port)).await.unwrap();
    let half = body.len() / 2;
    stream
        .write_all((head("POST", "/predict", body) + &body[..half]).as_bytes())
        .await
        .unwrap();
    // Give the service time to take the request in.
    tokio::time::sleep(Duration::from_millis(200)).await;
    stream
}

const ONE_ROW: &str = r#"{"rows":[{"x":2.0,"kind":"b"}]}"#;

/// Body and row limits (413, 422), one slot taken (503), a request that never finishes (408).
async fn limits(service: &Running) {
    let big = format!(r#"{{"rows":[{{"x":1,"kind":"{}"}}]}}"#, "a".repeat(2000));
    let a = service.send("POST", "/predict", &big).await;
    assert_eq!(a.status, 413);
    assert!(a.body["error"]
        .as_str()
        .unwrap()
        .contains("over 1000 bytes"));
    let rows = format!(
        r#"{{"rows":[{}]}}"#,
        [r#"{"x":2.0,"kind":"b"}"#; 4].join(",")
    );
    let a = service.send("POST", "/predict", &rows).await;
    assert_eq!(a.status, 422, "{rows}: {}", a.body);
    assert!(
        a.body["error"]
            .as_str()
            .unwrap()
            .contains("4 rows; at most 3"),
        "{}",
        a.body
    );

    let slow = slow_request(service.port, ONE_ROW).await;
    let a = service.send("POST", "/predict", ONE_ROW).await;
    assert_eq!(a.status, 503, "{}", a.body);
    assert!(a.headers.contains("\r\nretry-after: 1"));
    assert!(a.body["error"].as_str().unwrap().contains("busy"));
    let a = service.answer(slow, "POST", "/predict").await;
    assert_eq!(a.status, 408, "{}", a.body);
    assert!(a.body["error"].as_str().unwrap().contains("within 1 s"));
    // The slot is free again.
    assert_eq!(service.send("POST", "/predict", ONE_ROW).await.status, 200);
}

/// Reload: a good file is swapped in, a bad one or one with other columns keeps the old
/// model serving and says why.
async fn reload(service: &Running, path: &Path) {
    let before = service.send("POST", "/predict", ONE_ROW).await.body;
    // tests/data/model_v1.json takes the same columns (x, kind) with other weights.
    let other = Model::load(Path::new(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/data/model_v1.json"
    )))
    .unwrap();
    let expected = {
        let p = Predictor::new(&other);
        let mut scratch = p.scratch();
        p.predict_row(&[Cell::Number(2.0), Cell::Text("b")], &mut scratch)
            .unwrap()
            .value
    };
    other.save(path).unwrap();
    let a = service.send("POST", "/admin/reload", "").await;
    assert_eq!(a.status, 200, "{}", a.body);
    assert_eq!(a.body["generation"], 2);
    let after = service.send("POST", "/predict", ONE_ROW).await.body;
    assert_eq!(after["predictions"][0]["prediction"], json!(expected));
    assert_ne!(after, before);

    std::fs::write(path, "{\"format\": \"relume-model\", \"version\": 9").unwrap();
    let a = service.send("POST", "/admin/reload", "").await;
    assert_eq!(a.status, 422, "{}", a.body);
    let reason = a.body["error"].as_str().unwrap();
    assert!(reason.contains("kept the model serving now"), "{reason}");
    assert!(reason.contains(&path.display().to_string()), "{reason}");
    let renamed = other
        .to_json()
        .replace("\"name\":\"kind\"", "\"name\":\"sort\"");
    assert!(renamed.contains("sort"));
    std::fs::write(path, renamed).unwrap();
    let a = service.send("POST", "/admin/reload", "").await;
    assert_eq!(a.status, 422, "{}", a.body);
    assert!(
        a.body["error"].as_str().unwrap().contains("columns"),
        "{}",
        a.body
    );
    assert_eq!(service.send("POST", "/predict", ONE_ROW).await.body, after);
    assert_eq!(
        service.send("GET", "/health", "").await.body["generation"],
        2
    );
}

/// Removes the test's model files however the test ends.
struct Files(Vec<PathBuf>);

impl Drop for Files {
    fn drop(&mut self) {
        for f in &self.0 {
            std::fs::remove_file(f).ok();
        }
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_service_keeps_its_limits_and_its_openapi_description() {
    let model = fitted_model();
    let files = Files(vec![
        model_file("a.json", &model),
        model_file("b.json", &model),
    ]);
    let seen = Arc::new(Seen::default());
    let checks = async {
        let (service, stop, server) = start(&files.0[0], Limits::default(), seen.clone()).await;
        requests_and_refusals(&service).await;
        reload(&service, &files.0[0]).await;
        stop.send(()).unwrap();
        server.await.unwrap().unwrap();

        let tight = Limits {
            body_bytes: 1000,
            rows: 3,
            in_flight: 1,
            timeout: Duration::from_secs(1),
        };
        let (service, stop, server) = start(&files.0[1], tight, seen.clone()).await;
        limits(&service).await;
        stop.send(()).unwrap();
        server.await.unwrap().unwrap();
    };
    tokio::time::timeout(Duration::from_secs(60), checks)
        .await
        .expect("the scenarios ran within 60 s");

    let spec = spec();
    let mut documented = BTreeSet::new();
    for (path, operations) in spec["paths"].as_object().unwrap() {
        for (method, operation) in operations.as_object().unwrap() {
            for status in operation["responses"].as_object().unwrap().keys() {
                documented.insert((path.clone(), method.clone(), status.parse().unwrap()));
            }
        }
    }
    assert_eq!(
        *seen.lock().unwrap(),
        documented,
        "statuses seen vs. described"
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn shutdown_finishes_the_requests_in_flight() {
    let files = Files(vec![model_file("c.json", &fitted_model())]);
    let (service, stop, server) =
        start(&files.0[0], Limits::default(), Arc::new(Seen::default())).await;
    let mut slow = slow_request(service.port, ONE_ROW).await;
    stop.send(()).unwrap();
    tokio::time::sleep(Duration::from_millis(200)).await;
    assert!(!server.is_finished(), "a request is still in flight");
    let half = ONE_ROW.len() / 2;
    slow.write_all(&ONE_ROW.as_bytes()[half..]).await.unwrap();
    let a = service.answer(slow, "POST", "/predict").await;
    assert_eq!(a.status, 200, "{}", a.body);
    tokio::time::timeout(Duration::from_secs(10), server)
        .await
        .expect("the service stopped after its last request")
        .unwrap()
        .unwrap();
    assert!(TcpStream::connect(("127.0.0.1", service.port))
        .await
        .is_err());
}
