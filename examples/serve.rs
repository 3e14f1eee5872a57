//! A small HTTP prediction service for a relume model file, with the limits a service in
//! production needs.
//!
//! Run: `cargo run --release --example serve -- MODEL.json [127.0.0.1:8080]`, then
//! `curl -s localhost:8080/health` and
//! `curl -s -X POST localhost:8080/predict -d '{"rows":[{"outdoor_c":31,"setpoint_c":-18,"door_openings_per_h":12,"load_t":20,"refrigerant":"co2"}]}'`.
//! The endpoints, bodies and statuses are in `examples/serve.openapi.json`
//! (tests/service.rs keeps it true).
//!
//! - POST /predict: `{"rows": [{column: value, ...}, ...]}` (parsed and predicted by
//!   `relume::serve::request::predict_json`); a malformed request gets 400 with the reason, a
//!   body over [`Limits::body_bytes`] 413, more rows than [`Limits::rows`] 422, a request not
//!   done within [`Limits::timeout`] 408, and more than [`Limits::in_flight`] requests at
//!   once 503 (with `Retry-After`). Every error body is `{"error": reason}`.
//! - GET /health: the model's feature names, the file and how many times it was loaded.
//! - POST /admin/reload, or SIGHUP: reads the model file again, checks it (the loader's checks,
//!   and the same feature names as the model serving now), then swaps it in; requests already
//!   running finish on the model they started with. A file that fails keeps the old model
//!   serving, and the answer (422) or the log says why. Bind the service to loopback or put
//!   the admin path behind your proxy's access control: it has no authentication of its own.
//! - SIGTERM or Ctrl-C: stops accepting connections, finishes the requests in flight, exits.

use axum::body::{Body, Bytes};
use axum::extract::rejection::BytesRejection;
use axum::extract::{DefaultBodyLimit, Request, State};
use axum::http::{header, StatusCode};
use axum::middleware::{self, Next};
use axum::response::{IntoResponse, Response};
use axum::routing::{get, post};
use axum::{Json, Router};
use relume::serve::predict::Predictor;
use relume::serve::request::{predict_json, RequestError};
use serde_json::{json, Value};
use std::future::Future;
use std::path::PathBuf;
use std::sync::{Arc, RwLock};
use std::time::Duration;
use tokio::sync::Semaphore;

/// Shown with every prediction.
const CAUTION: &str =
    "Validate on held-out data before use; flagged rows are extrapolation; keep a \
                       human and domain review in the loop; follow local regulations.";

/// What one request may ask of the service.
#[derive(Clone, Copy, Debug)]
pub struct Limits {
    /// Largest request body.
    pub body_bytes: usize,
    /// Most rows per request.
    pub rows: usize,
    /// Most prediction requests served at once; one more gets 503.
    pub in_flight: usize,
    /// Longest a prediction request may take, reading its body included.
    pub timeout: Duration,
}

impl Default for Limits {
    fn default() -> Self {
        // Common practice, no source: sized so one request stays in the milliseconds.
        Limits {
            body_bytes: 1 << 20,
            rows: 1000,
            in_flight: 64,
            timeout: Duration::from_secs(10),
        }
    }
}

/// The predictor serving now and which load of the file it came from.
struct Loaded {
    predictor: Predictor,
    generation: u64,
}

/// The service's shared state: the model file, the model serving now and the request slots.
pub struct Service {
    model_path: PathBuf,
    current: RwLock<Arc<Loaded>>,
    slots: Arc<Semaphore>,
    limits: Limits,
}

impl Service {
    /// Loads the model file; an error names the file and the problem.
    pub fn load(model_path: PathBuf, limits: Limits) -> Result<Arc<Service>, String> {
        let predictor = Predictor::load(&model_path).map_err(|e| e.to_string())?;
        Ok(Arc::new(Service {
            model_path,
            current: RwLock::new(Arc::new(Loaded {
                predictor,
                generation: 1,
            })),
            slots: Arc::new(Semaphore::new(limits.in_flight)),
            limits,
        }))
    }

    fn current(&self) -> Arc<Loaded> {
        self.current
            .read()
            .expect("no panic while swapping")
            .clone()
    }

    /// Reads the model file again and swaps it in if it loads and takes the same columns;
    /// otherwise the old model keeps serving and the error says why.
    pub async fn reload(&self) -> Result<Value, String> {
        let path = self.model_path.clone();
        let loaded = tokio::task::spawn_blocking(move || Predictor::load(&path))
            .await
            .map_err(|e| format!("the loader stopped: {e}"))?;
        let refused = |why: String| {
            format!(
                "kept the model serving now; {} was refused: {why}",
                self.model_path.display()
            )
        };
        let predictor = loaded.map_err(|e| refused(e.to_string()))?;
        let mut current = self.current.write().expect("no panic while swapping");
        let (old, new) = (current.predictor.feature_names(), predictor.feature_names());
        if old != new {
            return Err(refused(format!(
                "it takes the columns [{}], the clients send [{}] (restart to change columns)",
                new.join(", "),
                old.join(", ")
            )));
        }
        let generation = current.generation + 1;
        let features = json!(new);
        *current = Arc::new(Loaded {
            predictor,
            generation,
        });
        Ok(json!({ "status": "reloaded", "generation": generation, "features": features }))
    }
}

/// The service's routes.
pub fn app(service: Arc<Service>) -> Router {
    let predict_route = post(predict)
        .layer::<_, std::convert::Infallible>(middleware::from_fn_with_state(
            service.clone(),
            guard,
        ))
        .layer(DefaultBodyLimit::max(service.limits.body_bytes));
    Router::new()
        .route("/health", get(health))
        .route("/predict", predict_route)
        .route("/admin/reload", post(reload))
        .fallback(|| async { error(StatusCode::NOT_FOUND, "no such path".into()) })
        .layer(middleware::map_response(reason_as_json))
        .with_state(service)
}

/// Serves on `listener` until `shutdown` completes, then finishes the requests in flight.
pub async fn run(
    listener: tokio::net::TcpListener,
    service: Arc<Service>,
    shutdown: impl Future<Output = ()> + Send + 'static,
) -> std::io::Result<()> {
    axum::serve(listener, app(service))
        .with_graceful_shutdown(shutdown)
        .await
}

fn error(status: StatusCode, reason: String) -> Response {
    (status, Json(json!({ "error": reason }))).into_response()
}

/// Admission for /predict: a free slot (else 503), and the whole request within the timeout
/// (else 408).
async fn guard(State(service): State<Arc<Service>>, request: Request, next: Next) -> Response {
    let Ok(_slot) = service.slots.clone().try_acquire_owned() else {
        let mut response = error(
            StatusCode::SERVICE_UNAVAILABLE,
            format!(
                "busy: {} requests are being served; retry shortly",
                service.limits.in_flight
            ),
        );
        response
            .headers_mut()
            .insert(header::RETRY_AFTER, header::HeaderValue::from_static("1"));
        return response;
    };
    let limit = service.limits.timeout;
    match tokio::time::timeout(limit, next.run(request)).await {
        Ok(response) => response,
        Err(_) => error(
            StatusCode::REQUEST_TIMEOUT,
            format!(
                "the request was not complete within {} s",
                limit.as_secs_f64()
            ),
        ),
    }
}

/// Gives the framework's own 4xx answers (body too large, method not allowed...) the
/// `{"error": reason}` body every other error has.
async fn reason_as_json(response: Response) -> Response {
    let status = response.status();
    let is_json = response
        .headers()
        .get(header::CONTENT_TYPE)
        .is_some_and(|t| t.as_bytes().starts_with(b"application/json"));
    if !status.is_client_error() || is_json {
        return response;
    }
    let (mut parts, body) = response.into_parts();
    let text = axum::body::to_bytes(body, 64 * 1024)
        .await
        .map(|b| String::from_utf8_lossy(&b).trim().to_string())
        .unwrap_or_default();
    let reason = if text.is_empty() {
        status.canonical_reason().unwrap_or("refused").to_string()
    } else {
        text
    };
    let body = serde_json::to_vec(&json!({ "error": reason })).expect("a string serializes");
    parts.headers.remove(header::CONTENT_LENGTH);
    parts.headers.insert(
        header::CONTENT_TYPE,
        header::HeaderValue::from_static("application/json"),
    );
    Response::from_parts(parts, Body::from(body))
}

async fn health(State(service): State<Arc<Service>>) -> Json<Value> {
    let loaded = service.current();
    Json(json!({
        "status": "ok",
        "features": loaded.predictor.feature_names(),
        "model_file": service.model_path.display().to_string(),
        "generation": loaded.generation,
    }))
}

async fn predict(
    State(service): State<Arc<Service>>,
    body: Result<Bytes, BytesRejection>,
) -> Response {
    let body = match body {
        Ok(body) => body,
        Err(e) if e.status() == StatusCode::PAYLOAD_TOO_LARGE => {
            let limit = service.limits.body_bytes;
            return error(e.status(), format!("the body is over {limit} bytes"));
        }
        Err(e) => return error(e.status(), e.body_text()),
    };
    let loaded = service.current();
    let rows = service.limits.rows;
    let answer =
        tokio::task::spawn_blocking(move || predict_json(&loaded.predictor, &body, rows)).await;
    match answer {
        Ok(Ok(mut predictions)) => {
            predictions["caution"] = json!(CAUTION);
            Json(predictions).into_response()
        }
        Ok(Err(e @ RequestError::TooManyRows { .. })) => {
            error(StatusCode::UNPROCESSABLE_ENTITY, e.to_string())
        }
        Ok(Err(e)) => error(StatusCode::BAD_REQUEST, e.to_string()),
        Err(e) => error(
            StatusCode::INTERNAL_SERVER_ERROR,
            format!("the prediction stopped: {e}"),
        ),
    }
}

async fn reload(State(service): State<Arc<Service>>) -> Response {
    match service.reload().await {
        Ok(answer) => Json(answer).into_response(),
        Err(reason) => error(StatusCode::UNPROCESSABLE_ENTITY, reason),
    }
}

/// Completes on SIGTERM or Ctrl-C.
async fn stop_signal() {
    let mut term = tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate())
        .expect("SIGTERM handler");
    tokio::select! {
        _ = term.recv() => {}
        _ = tokio::signal::ctrl_c() => {}
    }
    eprintln!("stopping: finishing the requests in flight");
}

#[tokio::main]
#[allow(dead_code)]
async fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let model = args.next().ok_or("usage: serve MODEL.json [ADDRESS]")?;
    let address = args.next().unwrap_or_else(|| "127.0.0.1:8080".to_string());
    let service = Service::load(PathBuf::from(&model), Limits::default())?;
    let mut hangup = tokio::signal::unix::signal(tokio::signal::unix::SignalKind::hangup())?;
    let on_hangup = service.clone();
    tokio::spawn(async move {
        while hangup.recv().await.is_some() {
            match on_hangup.reload().await {
                Ok(answer) => eprintln!("SIGHUP: {answer}"),
                Err(reason) => eprintln!("SIGHUP: {reason}"),
            }
        }
    });
    let listener = tokio::net::TcpListener::bind(&address).await?;
    println!(
        "serving {model} on http://{address} (POST /predict, GET /health, POST /admin/reload)"
    );
    run(listener, service, stop_signal()).await?;
    eprintln!("stopped");
    Ok(())
}
