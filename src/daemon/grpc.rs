//! The gRPC services other than ingest: the picture subscription and the
//! health stream, and the server that carries them with the standard
//! health-checking and reflection services.

use super::engine_task::Control;
use super::metrics::{Metrics, REASONS};
use super::proto::{self, v1};
use super::publisher::{Filter, Subscription, Update, status_index};
use crate::reorder::ClockState;
use std::pin::Pin;
use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;
use std::task::{Context, Poll};
use std::time::Duration;
use tokio::sync::{mpsc, oneshot};
use tokio_stream::Stream;
use tokio_util::sync::CancellationToken;

/// Turns a subscription request into a filter.
pub fn filter_from_request(r: &v1::SubscribeRequest) -> Result<Filter, tonic::Status> {
    let mut f = Filter::default();
    if !r.statuses.is_empty() {
        f.statuses = [false; 4];
        for s in &r.statuses {
            let st = v1::TrackStatus::try_from(*s).ok().and_then(proto::status_from_proto).ok_or_else(|| tonic::Status::invalid_argument(format!("unknown track status {s}")))?;
            f.statuses[status_index(st)] = true;
        }
    }
    if let Some(a) = &r.area {
        let ok = [a.min_lat_deg, a.max_lat_deg, a.min_lon_deg, a.max_lon_deg].iter().all(|v| v.is_finite())
            && (-90.0..=90.0).contains(&a.min_lat_deg)
            && (-90.0..=90.0).contains(&a.max_lat_deg)
            && a.min_lat_deg <= a.max_lat_deg
            && (-180.0..=180.0).contains(&a.min_lon_deg)
            && (-180.0..=180.0).contains(&a.max_lon_deg);
        if !ok {
            return Err(tonic::Status::invalid_argument("area: need -90 <= min_lat <= max_lat <= 90 and longitudes in [-180, 180]"));
        }
        f.area = Some([a.min_lat_deg, a.max_lat_deg, a.min_lon_deg, a.max_lon_deg]);
    }
    if !(r.min_interval_s.is_finite() && r.min_interval_s >= 0.0) {
        return Err(tonic::Status::invalid_argument("min_interval_s must be a number >= 0"));
    }
    f.min_interval_s = r.min_interval_s;
    Ok(f)
}

/// A subscriber's stream: the picture, the marker, the queued updates,
/// then any skips left untold when the publisher closed.
pub struct PictureStream {
    picture: std::vec::IntoIter<Arc<crate::feed::TrackRecord>>,
    picture_len: u64,
    marker_sent: bool,
    sub: Subscription,
    done: bool,
}

impl PictureStream {
    pub fn new(mut sub: Subscription) -> Self {
        let picture = std::mem::take(&mut sub.picture);
        let picture_len = picture.len() as u64;
        PictureStream { picture: picture.into_iter(), picture_len, marker_sent: false, sub, done: false }
    }
}

fn track_update(r: &crate::feed::TrackRecord) -> v1::PictureUpdate {
    v1::PictureUpdate { update: Some(v1::picture_update::Update::Track(proto::track_to_proto(r))) }
}

fn skipped_update(n: u64) -> v1::PictureUpdate {
    v1::PictureUpdate { update: Some(v1::picture_update::Update::Skipped(v1::Skipped { updates: n })) }
}

impl Stream for PictureStream {
    type Item = Result<v1::PictureUpdate, tonic::Status>;

    fn poll_next(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<Option<Self::Item>> {
        if self.done {
            return Poll::Ready(None);
        }
        if let Some(r) = self.picture.next() {
            return Poll::Ready(Some(Ok(track_update(&r))));
        }
        if !self.marker_sent {
            self.marker_sent = true;
            let n = self.picture_len;
            return Poll::Ready(Some(Ok(v1::PictureUpdate { update: Some(v1::picture_update::Update::PictureSent(v1::PictureSent { tracks: n })) })));
        }
        match self.sub.rx.poll_recv(cx) {
            Poll::Ready(Some(Update::Track(r))) => Poll::Ready(Some(Ok(track_update(&r)))),
            Poll::Ready(Some(Update::Skipped(n))) => Poll::Ready(Some(Ok(skipped_update(n)))),
            Poll::Ready(None) => {
                self.done = true;
                match self.sub.residual.swap(0, Relaxed) {
                    0 => Poll::Ready(None),
                    n => Poll::Ready(Some(Ok(skipped_update(n)))),
                }
            }
            Poll::Pending => Poll::Pending,
        }
    }
}

pub struct PictureService {
    pub control: mpsc::Sender<Control>,
}

#[tonic::async_trait]
impl v1::picture_server::Picture for PictureService {
    type SubscribeStream = PictureStream;

    async fn subscribe(&self, req: tonic::Request<v1::SubscribeRequest>) -> Result<tonic::Response<Self::SubscribeStream>, tonic::Status> {
        let filter = filter_from_request(req.get_ref())?;
        let (reply, rx) = oneshot::channel();
        self.control.send(Control::Subscribe { filter, reply }).await.map_err(|_| tonic::Status::unavailable("shutting down"))?;
        let sub = rx.await.map_err(|_| tonic::Status::unavailable("shutting down"))?.map_err(|e| tonic::Status::resource_exhausted(e.to_string()))?;
        Ok(tonic::Response::new(PictureStream::new(sub)))
    }
}

/// The health report at this instant.
pub fn health_report(m: &Metrics, now: crate::time::Timestamp) -> v1::HealthReport {
    let reasons = m.degraded_reasons(now);
    let rates = m.rates.lock().map(|r| r.clone()).unwrap_or_default();
    let sensors = m
        .sensors
        .ids()
        .map(|id| {
            let s = m.snapshot(Some(id));
            let c = m.clock(id);
            let li = super::metrics::reason_index("late");
            let di = super::metrics::reason_index("duplicate");
            v1::SensorHealth {
                sensor: m.sensors.name(id).to_string(),
                received: s.received,
                accepted: s.accepted,
                rejected: REASONS.iter().zip(s.rejected).filter(|(_, n)| *n > 0).map(|(k, n)| (k.to_string(), n)).collect(),
                late: s.rejected[li],
                duplicate: s.rejected[di],
                last_seen: s.last_seen.map(|t| t.to_rfc3339()),
                clock_offset_s: c.as_ref().and_then(|c| c.offset_s),
                clock_state: c.map(|c| c.state).unwrap_or(ClockState::Never).as_str().to_string(),
                rate_per_s: rates.get(id as usize).copied().unwrap_or(0.0),
                rotation_period_s: s.rotation_period_s,
                plots_dropped: s.plots_dropped,
                track_starts_dropped: s.starts_dropped,
            }
        })
        .collect();
    v1::HealthReport {
        time: now.to_rfc3339(),
        status: if reasons.is_empty() { "ok".into() } else { "degraded".into() },
        reasons,
        sensors,
        tentative: m.tracks[0].load(Relaxed),
        confirmed: m.tracks[1].load(Relaxed),
        coasting: m.tracks[2].load(Relaxed),
        subscribers: m.subscribers.load(Relaxed) as u32,
        feed_time: m.released().map(|t| t.to_rfc3339()),
        reorder_held: m.reorder_held.load(Relaxed) as u64,
    }
}

pub struct MonitorService {
    pub metrics: Arc<Metrics>,
    pub clock: super::clock::DaemonClock,
    pub interval_s: f64,
    /// Health streams end when shutdown starts, so they never hold the
    /// server's graceful stop.
    pub cancel: CancellationToken,
}

#[tonic::async_trait]
impl v1::monitor_server::Monitor for MonitorService {
    type HealthStream = tokio_stream::wrappers::ReceiverStream<Result<v1::HealthReport, tonic::Status>>;

    async fn health(&self, req: tonic::Request<v1::HealthRequest>) -> Result<tonic::Response<Self::HealthStream>, tonic::Status> {
        let want = req.get_ref().interval_s;
        if !want.is_finite() || want < 0.0 {
            return Err(tonic::Status::invalid_argument("interval_s must be >= 0"));
        }
        let period = if want == 0.0 { self.interval_s } else { want.max(0.1) };
        let (tx, rx) = mpsc::channel(4);
        let (m, clock, cancel) = (self.metrics.clone(), self.clock, self.cancel.clone());
        tokio::spawn(async move {
            let mut tick = tokio::time::interval(Duration::from_secs_f64(period));
            loop {
                tokio::select! {
                    _ = cancel.cancelled() => break,
                    _ = tick.tick() => {
                        // A client that does not read misses reports.
                        if let Err(mpsc::error::TrySendError::Closed(_)) = tx.try_send(Ok(health_report(&m, clock.now()))) {
                            break;
                        }
                    }
                }
            }
        });
        Ok(tonic::Response::new(tokio_stream::wrappers::ReceiverStream::new(rx)))
    }
}
