"""A Python gRPC client of skerry, generated at run time from skerry's own
.proto files with grpcio-tools (python -m grpc_tools.protoc), used by
tests/daemon_python.rs as an independent client.

Usage: grpc_client.py PROTO_ROOT HOST:PORT FEED.jsonl

It subscribes to the picture (every status), sends the feed through
Ingest.Send (mapping each JSON line to the protobuf message itself), and
prints, one per line:
  SENT {summary}       the daemon's SendSummary
  HEALTH {report}      one Monitor.Health report
  then, once the daemon closes the subscription (the test stops it):
  TRACK {record}       each track record received, as a contract JSON object
  SKIPPED n            if the daemon said updates were skipped
  DONE
"""
import json
import subprocess
import sys
import tempfile
import threading


def generate(proto_root):
    out = tempfile.mkdtemp(prefix="skerry-py-")
    subprocess.run(
        [sys.executable, "-m", "grpc_tools.protoc", f"-I{proto_root}", f"--python_out={out}",
         f"--grpc_python_out={out}", "skerry/v1/records.proto", "skerry/v1/service.proto"],
        check=True,
    )
    sys.path.insert(0, out)


def feed_message(records_pb2, d):
    """One contract JSON record as a FeedRecord."""
    kind = d.get("type")
    if kind == "detection":
        m = records_pb2.Detection()
        for k in ("sensor", "time", "scan", "range_m", "bearing_deg", "radial_speed_mps", "snr_db"):
            if d.get(k) is not None:
                setattr(m, k, d[k])
        return records_pb2.FeedRecord(detection=m)
    if kind == "scan_end":
        m = records_pb2.ScanEnd()
        for k in ("sensor", "time", "scan"):
            if d.get(k) is not None:
                setattr(m, k, d[k])
        m.sector_deg.extend(d.get("sector_deg") or [])
        return records_pb2.FeedRecord(scan_end=m)
    m = records_pb2.Report()
    for k in ("sensor", "time", "id", "lat_deg", "lon_deg", "sog_kn", "cog_deg", "heading_deg"):
        if d.get(k) is not None:
            setattr(m, k, d[k])
    return records_pb2.FeedRecord(report=m)


STATUS = {1: "tentative", 2: "confirmed", 3: "coasting", 4: "ended"}


def track_json(t):
    c = list(t.pos_cov_m2)
    return {
        "type": "track", "time": t.time, "track": t.track, "status": STATUS[t.status],
        "lat_deg": t.lat_deg, "lon_deg": t.lon_deg, "east_m": t.east_m, "north_m": t.north_m,
        "vel_east_mps": t.vel_east_mps, "vel_north_mps": t.vel_north_mps,
        "speed_kn": t.speed_kn, "course_deg": t.course_deg,
        "pos_cov_m2": [[c[0], c[1]], [c[2], c[3]]],
        "sensors": list(t.sensors),
        "identity": t.identity if t.HasField("identity") else None,
    }


def main():
    proto_root, addr, feed = sys.argv[1:4]
    generate(proto_root)
    import grpc
    from skerry.v1 import records_pb2, service_pb2, service_pb2_grpc

    channel = grpc.insecure_channel(addr)
    grpc.channel_ready_future(channel).result(timeout=10)
    stream = service_pb2_grpc.PictureStub(channel).Subscribe(service_pb2.SubscribeRequest(statuses=[1, 2, 3, 4]))
    first = next(stream)
    assert first.WhichOneof("update") == "picture_sent", first
    tracks, skipped = [], [0]

    def read():
        for u in stream:
            which = u.WhichOneof("update")
            if which == "track":
                tracks.append(track_json(u.track))
            elif which == "skipped":
                skipped[0] += u.skipped.updates

    reader = threading.Thread(target=read)
    reader.start()

    def records():
        with open(feed) as f:
            for line in f:
                if line.strip():
                    yield feed_message(records_pb2, json.loads(line))

    s = service_pb2_grpc.IngestStub(channel).Send(records())
    print("SENT " + json.dumps({"received": s.received, "accepted": s.accepted, "rejected": dict(s.rejected), "dropped": s.dropped}), flush=True)
    h = next(service_pb2_grpc.MonitorStub(channel).Health(service_pb2.HealthRequest(interval_s=0.2)))
    print("HEALTH " + json.dumps({"status": h.status, "sensors": [{"sensor": x.sensor, "accepted": x.accepted, "rejected": dict(x.rejected)} for x in h.sensors]}), flush=True)
    reader.join(timeout=60)
    for t in tracks:
        print("TRACK " + json.dumps(t))
    if skipped[0]:
        print(f"SKIPPED {skipped[0]}")
    print("DONE", flush=True)


if __name__ == "__main__":
    main()
