//! HTTP on its own port: `/metrics` (Prometheus text format) and
//! `/healthz` (`ok`, or `degraded` with the reasons, status 503).

use super::clock::DaemonClock;
use super::metrics::Metrics;
use axum::Router;
use axum::extract::State;
use axum::http::{StatusCode, header};
use axum::response::IntoResponse;
use axum::routing::get;
use std::sync::Arc;

#[derive(Clone)]
pub struct HttpState {
    pub metrics: Arc<Metrics>,
    pub clock: DaemonClock,
}

pub fn router(state: HttpState) -> Router {
    Router::new().route("/metrics", get(metrics)).route("/healthz", get(healthz)).with_state(state)
}

async fn metrics(State(s): State<HttpState>) -> impl IntoResponse {
    ([(header::CONTENT_TYPE, "text/plain; version=0.0.4; charset=utf-8")], s.metrics.render(s.clock.now()))
}

async fn healthz(State(s): State<HttpState>) -> impl IntoResponse {
    let reasons = s.metrics.degraded_reasons(s.clock.now());
    if reasons.is_empty() {
        (StatusCode::OK, "ok\n".to_string())
    } else {
        let mut body = String::from("degraded\n");
        for r in reasons {
            body.push_str(&r);
            body.push('\n');
        }
        (StatusCode::SERVICE_UNAVAILABLE, body)
    }
}
