//! A small HTTP prediction service for a relume model file.
//!
//! Run: `cargo run --release --example serve -- MODEL.json [127.0.0.1:8080]`, then
//! `curl -s localhost:8080/health` and
//! `curl -s -X POST localhost:8080/predict -d '{"rows":[{"outdoor_c":31,"setpoint_c":-18,"door_openings_per_h":12,"load_t":20,"refrigerant":"co2"}]}'`.
//!
//! POST /predict takes `{"rows": [{column: value, ...}, ...]}` and answers
//! `{"predictions": [{"prediction": x, "extrapolated": bool, "out_of_range": [...],
//! "unseen_category": [...]}], "caution": ...}` (a category never seen in training is predicted
//! through the pooled level and named in `unseen_category`);
//! a malformed request gets 400 and `{"error": reason}`. GET /health answers 200 with the
//! model's feature names.

use axum::body::Bytes;
use axum::extract::State;
use axum::http::StatusCode;
use axum::response::{IntoResponse, Response};
use axum::routing::{get, post};
use axum::{Json, Router};
use relume::serve::predict::{Cell, Predictor};
use serde_json::{json, Value};
use std::sync::Arc;

/// Shown with every prediction.
const CAUTION: &str =
    "Validate on held-out data before use; flagged rows are extrapolation; keep a \
                       human and domain review in the loop; follow local regulations.";

/// The service's routes around a shared predictor.
pub fn app(predictor: Arc<Predictor>) -> Router {
    Router::new()
        .route("/health", get(health))
        .route("/predict", post(predict))
        .with_state(predictor)
}

async fn health(State(p): State<Arc<Predictor>>) -> Json<Value> {
    Json(json!({ "status": "ok", "features": p.feature_names() }))
}

fn bad_request(reason: String) -> Response {
    (StatusCode::BAD_REQUEST, Json(json!({ "error": reason }))).into_response()
}

async fn predict(State(p): State<Arc<Predictor>>, body: Bytes) -> Response {
    let request: Value = match serde_json::from_slice(&body) {
        Ok(v) => v,
        Err(e) => return bad_request(format!("the body is not JSON: {e}")),
    };
    let Some(rows) = request.get("rows").and_then(Value::as_array) else {
        return bad_request("expected an object with a \"rows\" array".to_string());
    };
    let names = p.feature_names();
    let mut scratch = p.scratch();
    let mut out = Vec::with_capacity(rows.len());
    for (i, row) in rows.iter().enumerate() {
        let Some(object) = row.as_object() else {
            return bad_request(format!("row {i} is not an object"));
        };
        let mut cells = Vec::with_capacity(names.len());
        for name in &names {
            cells.push(match object.get(*name) {
                None | Some(Value::Null) => Cell::Missing,
                Some(Value::Number(n)) => Cell::Number(n.as_f64().unwrap_or(f64::NAN)),
                Some(Value::String(s)) => Cell::Text(s),
                Some(_) => {
                    return bad_request(format!("row {i}: '{name}' must be a number or a string"))
                }
            });
        }
        match p.predict_row(&cells, &mut scratch) {
            Ok(pred) => {
                let flagged: Vec<&str> = names
                    .iter()
                    .zip(scratch.out_of_range())
                    .filter(|(_, &o)| o)
                    .map(|(n, _)| *n)
                    .collect();
                let unseen: Vec<&str> = names
                    .iter()
                    .zip(scratch.unseen())
                    .filter(|(_, &u)| u)
                    .map(|(n, _)| *n)
                    .collect();
                out.push(json!({
                    "prediction": pred.value,
                    "extrapolated": pred.extrapolated,
                    "out_of_range": flagged,
                    "unseen_category": unseen,
                }));
            }
            Err(e) => return bad_request(format!("row {i}: {}", p.explain(&e))),
        }
    }
    Json(json!({ "predictions": out, "caution": CAUTION })).into_response()
}

#[tokio::main]
#[allow(dead_code)]
async fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let model = args.next().ok_or("usage: serve MODEL.json [ADDRESS]")?;
    let address = args.next().unwrap_or_else(|| "127.0.0.1:8080".to_string());
    let predictor = Arc::new(Predictor::load(std::path::Path::new(&model))?);
    let listener = tokio::net::TcpListener::bind(&address).await?;
    println!("serving {model} on http://{address} (POST /predict, GET /health)");
    axum::serve(listener, app(predictor)).await?;
    Ok(())
}
