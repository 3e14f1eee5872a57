//! A JSON prediction request, parsed and predicted: the one piece of a web service that
//! touches untrusted bytes, kept here so the example service and the fuzz target share it.
//!
//! The body is `{"rows": [{column: value, ...}, ...]}` (numbers, strings, or null/absent for
//! empty), with `"explain": true` to ask for attributions; the answer is `{"predictions":
//! [{"prediction", "lower", "upper", "extrapolated", "out_of_range", "unseen_category"}, ...]}`,
//! each prediction with `"baseline"` and `"attributions"` (column to its share, in target
//! units: the shares plus the baseline make the prediction) when asked for.

use crate::serve::predict::{Cell, Predictor};
use serde_json::{json, Map, Value};

/// Why a request body was refused.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum RequestError {
    /// Not the expected JSON, or a row the model cannot take; the reason names the row and
    /// the column.
    Malformed(String),
    /// More rows than the caller's limit.
    TooManyRows {
        /// Rows in the request.
        given: usize,
        /// The limit.
        limit: usize,
    },
}

impl std::fmt::Display for RequestError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            RequestError::Malformed(reason) => f.write_str(reason),
            RequestError::TooManyRows { given, limit } => write!(
                f,
                "the request has {given} rows; at most {limit} are taken per request"
            ),
        }
    }
}

impl std::error::Error for RequestError {}

/// Parses a request body and predicts every row: `{"predictions": [...]}`, or the first
/// problem found (nothing is predicted then).
pub fn predict_json(
    predictor: &Predictor,
    body: &[u8],
    max_rows: usize,
) -> Result<Value, RequestError> {
    let malformed = RequestError::Malformed;
    let request: Value = serde_json::from_slice(body)
        .map_err(|e| malformed(format!("the body is not JSON: {e}")))?;
    let Some(rows) = request.get("rows").and_then(Value::as_array) else {
        return Err(malformed(
            "expected an object with a \"rows\" array".to_string(),
        ));
    };
    if rows.len() > max_rows {
        return Err(RequestError::TooManyRows {
            given: rows.len(),
            limit: max_rows,
        });
    }
    let explain = match request.get("explain") {
        None => false,
        Some(Value::Bool(b)) => *b,
        Some(_) => return Err(malformed("\"explain\" must be true or false".to_string())),
    };
    let names = predictor.feature_names();
    let mut scratch = predictor.scratch();
    let mut shares = vec![0.0; names.len()];
    let mut cells = Vec::with_capacity(names.len());
    let mut out = Vec::with_capacity(rows.len());
    for (i, row) in rows.iter().enumerate() {
        let object = row
            .as_object()
            .ok_or_else(|| malformed(format!("row {i} is not an object")))?;
        cells.clear();
        for name in &names {
            cells.push(cell_of(object, name).map_err(|e| malformed(format!("row {i}: {e}")))?);
        }
        let row_error = |e| malformed(format!("row {i}: {}", predictor.explain(&e)));
        let (p, baseline) = if explain {
            let a = predictor
                .attribute_row(&cells, &mut scratch, &mut shares)
                .map_err(row_error)?;
            (a.prediction, Some(a.baseline))
        } else {
            let p = predictor
                .predict_row(&cells, &mut scratch)
                .map_err(row_error)?;
            (p, None)
        };
        if ![Some(p.value), p.lower, p.upper]
            .iter()
            .all(|v| v.is_none_or(f64::is_finite))
        {
            // JSON has no infinity: refuse rather than answer null.
            return Err(malformed(format!(
                "row {i}: the prediction is not a finite number (inputs far outside the \
                 training range)"
            )));
        }
        let flagged = |flags: &[bool]| -> Vec<&str> {
            names
                .iter()
                .zip(flags)
                .filter(|(_, &f)| f)
                .map(|(n, _)| *n)
                .collect()
        };
        let mut answer = json!({
            "prediction": p.value,
            "lower": p.lower,
            "upper": p.upper,
            "extrapolated": p.extrapolated,
            "out_of_range": flagged(scratch.out_of_range()),
            "unseen_category": flagged(scratch.unseen()),
        });
        if let Some(baseline) = baseline {
            let parts: Map<String, Value> = names
                .iter()
                .zip(&shares)
                .map(|(n, v)| (n.to_string(), json!(v)))
                .collect();
            answer["baseline"] = json!(baseline);
            answer["attributions"] = Value::Object(parts);
        }
        out.push(answer);
    }
    Ok(json!({ "predictions": out }))
}

/// The cell for column `name` of a JSON row object.
fn cell_of<'a>(object: &'a Map<String, Value>, name: &str) -> Result<Cell<'a>, String> {
    match object.get(name) {
        None | Some(Value::Null) => Ok(Cell::Missing),
        // Without serde_json's arbitrary precision every JSON number reads as an f64
        // (a huge one as ±inf, which the predictor refuses as not finite).
        Some(Value::Number(n)) => Ok(Cell::Number(n.as_f64().unwrap_or(f64::NAN))),
        Some(Value::String(s)) => Ok(Cell::Text(s)),
        Some(_) => Err(format!("'{name}' must be a number, a string or null")),
    }
}
