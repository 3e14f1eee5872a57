//! The example HTTP service, started on a free loopback port: good and malformed requests,
//! within a bounded time.

#[path = "../examples/serve.rs"]
#[allow(dead_code)]
mod serve;

use relume::data::{EncoderSpec, ReadOptions, Table};
use relume::fit::monitor::MonitorConfig;
use relume::{Model, Predictor, Recipe};
use std::sync::Arc;
use std::time::Duration;
use tokio::io::{AsyncReadExt, AsyncWriteExt};

/// Sends one HTTP/1.1 request and returns (status, body).
async fn send(port: u16, method: &str, path: &str, body: &str) -> (u16, serde_json::Value) {
    let mut stream = tokio::net::TcpStream::connect(("127.0.0.1", port))
        .await
        .unwrap();
    let request = format!(
        "{method} {path} HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Type: application/json\r\nContent-Length: {}\r\nConnection: close\r\n\r\n{body}",
        body.len()
    );
    stream.write_all(request.as_bytes()).await.unwrap();
    let mut response = String::new();
    stream.read_to_string(&mut response).await.unwrap();
    let status: u16 = response.split(' ').nth(1).unwrap().parse().unwrap();
    let json = response.split("\r\n\r\n").nth(1).unwrap_or("");
    (
        status,
        serde_json::from_str(json).unwrap_or(serde_json::Value::Null),
    )
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_service_answers_good_and_malformed_requests() {
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
        ..Recipe::default()
    };
    let (model, _) = Model::fit(&table, &spec, &recipe, MonitorConfig::default()).unwrap();
    let predictor = Arc::new(Predictor::new(&model));

    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let port = listener.local_addr().unwrap().port();
    let server = tokio::spawn(async move { axum::serve(listener, serve::app(predictor)).await });

    let checks = async {
        let (status, body) = send(port, "GET", "/health", "").await;
        assert_eq!(status, 200);
        assert_eq!(body["features"], serde_json::json!(["x", "kind"]));

        let (status, body) = send(
            port,
            "POST",
            "/predict",
            r#"{"rows":[{"x":1.0,"kind":"a"},{"x":40,"kind":"b"}]}"#,
        )
        .await;
        assert_eq!(status, 200, "{body}");
        let p = &body["predictions"];
        assert!(
            (p[0]["prediction"].as_f64().unwrap() - (1f64.sin() + 0.5)).abs() < 0.2,
            "{body}"
        );
        assert_eq!(p[0]["extrapolated"], false);
        assert_eq!(p[1]["extrapolated"], true);
        assert_eq!(p[1]["out_of_range"], serde_json::json!(["x"]));
        assert!(body["caution"].as_str().unwrap().contains("held-out"));
        // A category never seen in training: a prediction, flagged.
        let (status, body) = send(
            port,
            "POST",
            "/predict",
            r#"{"rows":[{"x":1.0,"kind":"c"}]}"#,
        )
        .await;
        assert_eq!(status, 200, "{body}");
        assert_eq!(
            body["predictions"][0]["unseen_category"],
            serde_json::json!(["kind"])
        );

        for (request, reason) in [
            ("{not json", "not JSON"),
            (r#"{"lines":[]}"#, "\"rows\""),
            (r#"{"rows":[{"x":1.0}]}"#, "'kind' is empty"),
            (
                r#"{"rows":[{"x":"one","kind":"a"}]}"#,
                "'x' must be a number",
            ),
            (r#"{"rows":[{"x":[1],"kind":"a"}]}"#, "number or a string"),
            (r#"{"rows":[3]}"#, "row 0 is not an object"),
        ] {
            let (status, body) = send(port, "POST", "/predict", request).await;
            assert_eq!(status, 400, "{request}: {body}");
            let error = body["error"].as_str().unwrap_or("");
            assert!(error.contains(reason), "{request}: {error}");
        }
    };
    tokio::time::timeout(Duration::from_secs(30), checks)
        .await
        .expect("the service answered within 30 s");
    server.abort();
}
