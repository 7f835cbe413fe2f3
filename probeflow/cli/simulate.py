"""``probeflow simulate``: invented probe streams into files, MQTT or a pseudo-terminal.

    probeflow simulate --scenario simulators/scenarios/larkmoor-dairy.yaml \\
        --out readings.parquet --duration 2h --speed 0 --seed 5 --truth truth.parquet
    probeflow simulate --scenario ... --mqtt mqtt://127.0.0.1:1883 --speed 1 --batch 20
    probeflow simulate --scenario ... --serial --baud 9600 --layout csv --speed 1
"""

from __future__ import annotations

import argparse
import os
import sys
import threading
from typing import Any

from probeflow.errors import ConfigError, ProbeflowError

HELP = "Generate invented probe readings from a scenario (files, MQTT or a serial pty)."


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--scenario", required=True, metavar="FILE", help="scenario YAML file")
    parser.add_argument("--out", metavar="PATH", help="readings file: .jsonl or .parquet")
    parser.add_argument("--duration", metavar="TIME",
                        help='length of the run, e.g. "2h", "90min", "7d" (default: the scenario\'s)')
    parser.add_argument("--speed", type=float, default=0.0,
                        help="0: as fast as possible (default), 1: real time, 60: one minute per second")
    parser.add_argument("--seed", type=int, default=0, help="random seed (same seed, same readings)")
    parser.add_argument("--start", metavar="TIME",
                        help='first timestamp, RFC 3339 (e.g. 2026-03-02T06:00:00Z) or "now"; '
                             "default: the scenario's start at speed 0, now otherwise")
    parser.add_argument("--compression", choices=("lz4", "zstd", "snappy", "none"), default="lz4",
                        help="Parquet compression (default lz4; zstd gives about half the size)")
    parser.add_argument("--truth", metavar="PATH",
                        help="also write the ground truth per sample (.jsonl or .parquet)")
    mq = parser.add_argument_group("MQTT output")
    mq.add_argument("--mqtt", metavar="URL", help="publish to a broker, e.g. mqtt://127.0.0.1:1883")
    mq.add_argument("--topic-prefix", metavar="PREFIX",
                    help="topics are PREFIX/<probe>/reading (default: the scenario's site_id)")
    mq.add_argument("--qos", type=int, default=1, choices=(0, 1, 2), help="MQTT QoS (default 1)")
    mq.add_argument("--batch", type=int, default=1, metavar="N",
                    help="readings per message: 1 gives a JSON object, more a JSON array")
    se = parser.add_argument_group("serial output")
    se.add_argument("--serial", action="store_true", help="write lines to a new pseudo-terminal")
    se.add_argument("--baud", type=int, default=9600, help="baud rate for pacing (default 9600)")
    se.add_argument("--layout", choices=("csv", "kv", "json"), default="csv",
                    help="line layout: csv (probe,mv,temp_c), kv (probe=... mv=...) or json")
    parser.add_argument("--no-progress", action="store_true", help="no progress bar")


def _duration_ms(text: str | None) -> int | None:
    from probeflow.simulate.durations import parse_duration_ms

    if text is None:
        return None
    try:
        return parse_duration_ms(text)
    except ValueError as exc:
        raise ConfigError(f"--duration: {exc}", problems=[("--duration", str(exc))]) from None


def _start(text: str | None, scenario_start: float, speed: float) -> float:
    import time

    from probeflow.simulate.collector import start_time
    from probeflow.simulate.durations import parse_instant

    if text is None:
        return start_time(scenario_start, speed, None)
    if text.strip().lower() == "now":
        return float(int(time.time()))
    try:
        return parse_instant(text)
    except ValueError as exc:
        raise ConfigError(f"--start: {exc}", problems=[("--start", str(exc))]) from None


def run(args: argparse.Namespace) -> int:
    from probeflow.simulate.generator import Simulation
    from probeflow.simulate.outputs.files import TruthOutput, file_format, open_reading_file
    from probeflow.simulate.run import file_metadata, run_simulation
    from probeflow.simulate.scenario import describe, load_scenario

    if not (args.out or args.mqtt or args.serial):
        raise ProbeflowError("say where the readings go: --out FILE, --mqtt URL or --serial")
    if args.speed < 0:
        raise ConfigError("--speed must be 0 or more", problems=[("--speed", "negative")])
    for path in (args.out, args.truth):
        if path:
            file_format(path)
    scenario = load_scenario(args.scenario)
    duration = _duration_ms(args.duration)
    if duration is None and scenario.duration is None and (args.out or args.truth):
        raise ProbeflowError("a file needs an end: give --duration (the scenario has none)")
    sim = Simulation(scenario, args.seed, start=_start(args.start, scenario.start, args.speed),
                     duration_ms=duration)
    meta = file_metadata(sim)
    print(f"probeflow simulate: {describe(scenario)}, seed {sim.seed}", file=sys.stderr)

    stop = threading.Event()
    outputs: list[Any] = []
    truth = None
    try:
        if args.out:
            outputs.append(open_reading_file(args.out, meta, args.compression))
        if args.truth:
            truth = TruthOutput(args.truth, meta)
        if args.mqtt:
            from probeflow.simulate.outputs.mqtt import MqttOutput

            prefix = scenario.site_id if args.topic_prefix is None else args.topic_prefix
            outputs.append(MqttOutput(args.mqtt, prefix, qos=args.qos, batch=args.batch,
                                      client_id=f"probeflow-sim-{scenario.site_id}-{os.getpid()}"))
            print(f"publishing to {args.mqtt} on {outputs[-1].topic('<probe>')}", file=sys.stderr)
        if args.serial:
            from probeflow.simulate.outputs.serial import SerialOutput

            rtd = any(p.temperature_sensor.output == "ohms" for p in scenario.probes)
            port = SerialOutput(args.baud, args.layout, stop, ohms_column=rtd)
            outputs.append(port)
            print(port.path, flush=True)     # the device path, alone on stdout for scripts
            columns = f", columns {','.join(port.csv_fields)}" if args.layout == "csv" else ""
            print(f"serial lines ({args.layout}{columns}, {args.baud} baud) on {port.path}",
                  file=sys.stderr)

        bar = None
        if (args.out or args.truth) and not args.no_progress and sim.expected_readings:
            from tqdm import tqdm

            bar = tqdm(total=sim.expected_readings, unit=" readings", unit_scale=True,
                       file=sys.stderr, desc="simulating")

        def progress(n: int, end_ts: float) -> None:
            if bar is not None:
                bar.update(n)

        try:
            summary = run_simulation(sim, outputs, speed=args.speed, truth=truth, stop=stop,
                                     progress=progress)
        except KeyboardInterrupt:
            stop.set()
            print("stopped", file=sys.stderr)
            return 130
        finally:
            if bar is not None:
                bar.close()
        print(f"{summary.delivered} readings delivered from {summary.generated} samples",
              file=sys.stderr)
        return 0
    finally:
        for out in outputs:
            out.close()
        if truth is not None:
            truth.close()
