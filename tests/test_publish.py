"""Publishing a bench to a real MQTT broker (Mosquitto, started by the tests on loopback): what arrives is the
run's own account, and a broker that goes away and comes back loses no event."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from devicestream import Device, Dip, Link, make_source
from fakes import wait_until
from mqtt_broker import Broker, Listener

from logger.cli import _scenario
from logger.ingest import Pipeline, Settings
from logger.publish import AddressError, Publisher, bench_name, parse_broker
from logger.publish.topics import read_message
from logger.sim.simple import simple_rig
from logger.sources.simulated import SimSource


@pytest.fixture
def broker(tmp_path: Path):
    b = Broker(tmp_path / "broker")
    yield b
    b.stop()


def test_a_broker_url_names_host_port_and_prefix_and_never_a_secret() -> None:
    b = parse_broker("mqtt://lab-pi.local/benches/line-2", {})
    assert (b.host, b.port, b.prefix, b.tls) == ("lab-pi.local", 1883, "benches/line-2", False)
    # 1883 and 8883: the IANA-registered MQTT ports, plain and over TLS (RFC 6335 registry; MQTT 3.1.1 s4.2)
    assert parse_broker("mqtts://10.0.0.5", {}).port == 8883 and parse_broker("mqtt://h", {}).prefix == "railtap"
    secret = parse_broker("mqtt://h:1999/x", {"RAILTAP_MQTT_USER": "bench", "RAILTAP_MQTT_PASSWORD": "s3cret"})
    assert secret.user == "bench" and "s3cret" not in repr(secret) and "s3cret" not in secret.url
    for bad, says in (("mqtt://u:p@h/x", "process list"), ("http://h/x", "mqtt://HOST"), ("mqtt:///x", "no broker"),
                      ("mqtt://h/a+b", "prefix"), ("mqtt://h:99999/x", "port")):
        with pytest.raises(AddressError, match=says):
            parse_broker(bad, {})
    with pytest.raises(AddressError, match="RAILTAP_MQTT_USER"):
        parse_broker("mqtt://h", {"RAILTAP_MQTT_PASSWORD": "x"})
    assert bench_name("bench 7") == "bench-7"
    with pytest.raises(AddressError):
        bench_name("a/b")


def _rollup(run: Path) -> pd.DataFrame:
    return pd.read_parquet(sorted(run.glob("_rollup-*.parquet"))).sort_values("device_s", ignore_index=True)


def test_what_a_bench_publishes_is_its_runs_own_account(tmp_path: Path, broker: Broker) -> None:
    """Every second's figures as the rollups hold them, every event begun and ended, a retained state that ends
    'stopped' (a clean goodbye, not the will), and nothing dropped."""
    listener = Listener(broker, "lab")
    device = Device(rate_hz=100.0, duration_s=40.0, seed=2, script=(Dip(10.0, 2.0, 60.0), Dip(25.0, 1.0, 0.0)))
    source, _ = make_source(device, Link(read_s=0.02, seed=1))
    publisher = Publisher(parse_broker(f"{broker.url}/lab", {}), "bench-1", "simple", ("out",))
    pipeline = Pipeline(source, simple_rig(), Settings(record_root=tmp_path / "runs"), outlets=[publisher])
    pipeline.start()
    assert pipeline.wait(60) and pipeline.error is None, pipeline.error
    (run,) = (tmp_path / "runs").iterdir()
    rollup = _rollup(run)
    wait_until(lambda: listener.state("lab/bench-1/state") == "stopped", "the last state")
    wait_until(lambda: len({d["device_s"] for d in listener.of("second")}) == len(rollup), "every second")
    seconds = {d["device_s"]: d for d in listener.of("second")}
    told = np.array([seconds[s]["ch"]["out_v"] for s in rollup["device_s"]], dtype=float)
    # Seven significant digits: what a float32 sample holds (IEEE 754 binary32, 24-bit significand)
    np.testing.assert_allclose(told[:, :3], rollup[["out_v_min", "out_v_mean", "out_v_max"]].to_numpy(), rtol=1e-6)
    events = pd.read_parquet(run / "_events.parquet")
    wait_until(lambda: len([d for d in listener.of("event") if d["phase"] == "end"]) == len(events), "every event")
    ends = {d["id"]: d for d in listener.of("event") if d["phase"] == "end"}
    assert set(ends) == set(events["id"])
    begins = {d["key"] for d in listener.of("event") if d["phase"] == "begin"}
    dips = [d for d in ends.values() if d["kind"] in ("brownout", "dropout")]
    assert len(dips) == 2 and {d["key"] for d in dips} <= begins
    account = json.loads((run / "_run.json").read_text())["publish"]
    assert account["dropped"] == {"seconds": 0, "events": 0} and account["bench"] == "bench-1"
    listener.close()


def test_a_broker_restart_loses_no_event_and_the_drops_are_counted(tmp_path: Path, broker: Broker) -> None:
    """The broker stops for a while in the middle of a run: every event still arrives (QoS 1 and the buffer),
    and the per-second figures that the small buffer could not hold are exactly the ones counted dropped,
    oldest first."""
    listener = Listener(broker, "lab")
    scenario = _scenario("demo-bench")
    source = SimSource(scenario.make_device(4), speed=25.0, duration_s=150.0)
    publisher = Publisher(parse_broker(f"{broker.url}/lab", {}), "bench-2", scenario.rig.name, buffer_seconds=10)
    pipeline = Pipeline(source, scenario.rig, Settings(record_root=tmp_path / "runs"), outlets=[publisher])
    pipeline.start()
    wait_until(lambda: len(listener.of("second")) >= 20, "figures before the outage")
    assert listener.state("lab/bench-2/state") == "recording"
    broker.stop()
    wait_until(lambda: not publisher.progress.connected, "the publisher to notice")
    wait_until(lambda: publisher.progress.seconds_dropped >= 20, "figures to overflow the buffer")
    broker.start()
    assert pipeline.wait(120) and pipeline.error is None, pipeline.error
    (run,) = (tmp_path / "runs").iterdir()
    account = json.loads((run / "_run.json").read_text())["publish"]
    rollup = _rollup(run)
    events = pd.read_parquet(run / "_events.parquet")
    assert {"brownout", "dropout"} <= set(events["kind"])
    wait_until(lambda: {d["id"] for d in listener.of("event") if d["phase"] == "end"} == set(events["id"]),
               "every event, after the restart")
    dropped = account["dropped"]["seconds"]
    assert dropped >= 20 and account["dropped"]["events"] == 0 and account["connects"] >= 2
    wait_until(lambda: len({d["device_s"] for d in listener.of("second")}) + dropped == len(rollup),
               "every second not counted dropped")
    heard = {d["device_s"] for d in listener.of("second")}
    missing = sorted(set(rollup["device_s"]) - heard)
    assert len(missing) == dropped and missing == list(range(missing[0], missing[0] + dropped))  # oldest first
    listener.close()


def test_messages_that_are_not_ours_are_passed_over() -> None:
    assert read_message("lab", "lab/b1/state", b'{"v": 1, "state": "recording"}').bench == "b1"
    for topic, payload in (("lab/b1/state", b"not json"), ("lab/b1/state", b'{"v": 9, "state": "x"}'),
                           ("lab/b1/other", b'{"v": 1}'), ("other/b1/state", b'{"v": 1, "state": "x"}'),
                           ("lab/b1/second", b'{"v": 1, "utc": "x", "ch": {"a": [1]}}'),
                           ("lab/b1/x/state", b'{"v": 1, "state": "x"}')):
        assert read_message("lab", topic, payload) is None, topic


def test_a_login_comes_from_the_environment_and_is_never_written_down(tmp_path: Path) -> None:
    """A broker that wants a login gets it from RAILTAP_MQTT_USER and RAILTAP_MQTT_PASSWORD_FILE; the password
    is in neither _run.json nor the link panel's line; a wrong one is said in words (MQTT 3.1.1 s3.2.2.3:
    CONNACK return code 4 or 5)."""
    broker = Broker(tmp_path / "broker", users={"bench-7": "pa55-word"})
    try:
        secret = tmp_path / "secret"
        secret.write_text("pa55-word\n")
        env = {"RAILTAP_MQTT_USER": "bench-7", "RAILTAP_MQTT_PASSWORD_FILE": str(secret)}
        wrong = Publisher(parse_broker(f"{broker.url}/lab", {"RAILTAP_MQTT_USER": "bench-7",
                                                             "RAILTAP_MQTT_PASSWORD": "guess"}), "b7", "simple")
        wait_until(lambda: "refused the login" in (wrong.progress.error or ""), "the refusal")
        assert "refused the login" in wrong.summary()
        wrong.close()
        device = Device(rate_hz=100.0, duration_s=5.0, seed=2)
        source, _ = make_source(device, Link(read_s=0.02, seed=1))
        publisher = Publisher(parse_broker(f"{broker.url}/lab", env), "b7", "simple")
        pipeline = Pipeline(source, simple_rig(), Settings(record_root=tmp_path / "runs"), outlets=[publisher])
        pipeline.start()
        assert pipeline.wait(60) and pipeline.error is None, pipeline.error
        wait_until(lambda: publisher.progress.connects >= 1 and publisher.progress.error is None, "a login")
        (run,) = (tmp_path / "runs").iterdir()
        assert "pa55" not in (run / "_run.json").read_text() and "pa55" not in publisher.summary()
    finally:
        broker.stop()


def test_mqtts_checks_the_brokers_certificate_against_the_ca_it_is_given(tmp_path: Path) -> None:
    """Over TLS the broker's certificate must chain to RAILTAP_MQTT_CA (or the system's CAs): one signed by an
    unknown CA is refused and said so (RFC 5280 path validation; common practice, no source)."""
    broker = Broker(tmp_path / "broker", tls=True)
    listener = Listener(broker, "lab")
    try:
        url = f"mqtts://127.0.0.1:{broker.tls_port}/lab"
        untrusted = Publisher(parse_broker(url, {}), "b-tls", "simple")
        wait_until(lambda: "RAILTAP_MQTT_CA" in (untrusted.progress.error or ""), "the refusal of an unknown CA")
        untrusted.close()
        trusted = Publisher(parse_broker(url, {"RAILTAP_MQTT_CA": str(tmp_path / "broker" / "ca.pem")}), "b-tls",
                            "simple")
        device = Device(rate_hz=100.0, duration_s=5.0, seed=2)
        source, _ = make_source(device, Link(read_s=0.02, seed=1))
        pipeline = Pipeline(source, simple_rig(), Settings(record_root=tmp_path / "runs"), outlets=[trusted])
        pipeline.start()
        assert pipeline.wait(60) and pipeline.error is None, pipeline.error
        wait_until(lambda: listener.state("lab/b-tls/state") == "stopped", "the state, over TLS")
        assert len({d["device_s"] for d in listener.of("second")}) >= 5
    finally:
        listener.close()
        broker.stop()


def test_a_broker_that_never_answers_holds_up_nothing(tmp_path: Path) -> None:
    """A port that takes the connection and never answers: the run goes at full speed to its end, the figures
    past the buffer are counted dropped (oldest first), the events wait, and closing gives up after its limit."""
    import socket

    silent = socket.create_server(("127.0.0.1", 0))  # listens, never accepts: no CONNACK ever comes
    try:
        device = Device(rate_hz=100.0, duration_s=60.0, seed=2, script=(Dip(10.0, 2.0, 60.0),))
        source, _ = make_source(device, Link(read_s=0.02, seed=1))
        publisher = Publisher(parse_broker(f"mqtt://127.0.0.1:{silent.getsockname()[1]}/lab", {}), "b-x", "simple",
                              buffer_seconds=10)
        pipeline = Pipeline(source, simple_rig(), Settings(record_root=tmp_path / "runs"), outlets=[publisher])
        pipeline.start()
        assert pipeline.wait(120) and pipeline.error is None, pipeline.error
        (run,) = (tmp_path / "runs").iterdir()
        account = json.loads((run / "_run.json").read_text())["publish"]
        rollup = _rollup(run)
        assert account["sent"] == {"seconds": 0, "events": 0}
        assert account["dropped"]["seconds"] == len(rollup) - 10 and account["dropped"]["events"] == 0
        assert account["waiting_at_end"] >= 10
    finally:
        silent.close()
