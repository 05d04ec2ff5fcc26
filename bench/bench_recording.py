"""Recorder figures: sustained rows/s, producer cost per put, writer CPU share and commit p99
at 1 kHz, and two writer processes recording into one store at once.

Run: .venv/bin/python bench/bench_recording.py [--rows 300000] [--seconds 10]
Prints figures only; compare them within one run (the machines are shared).
Goals: >= 200,000 rows/s sustained, <= 2 % of a core at 1 kHz, commit p99 <= 1 ms,
producer well under 1 us per put; with two writers, rows per writer-CPU-second
close to one writer's (each waits for the other's commits, it does not spin).
"""

from __future__ import annotations

import argparse
import multiprocessing
import statistics
import tempfile
import time
from pathlib import Path

from daemon.recording import Recorder, RunMetadata

METADATA = RunMetadata(
    rig_id="bench-rig",
    config_text="",
    software_version="bench",
    protocol_version="1",
    firmware_version="0.0.0",
    drive_kind="voltage",
    mode_names={0: "IDLE", 3: "BALANCE"},
)


def row(i: int) -> tuple:
    return (i & 0xFFFF, 2000 * i, 10**12 + 2_000_000 * i, 3 * i, -i, 0, 0,
            i * 1e-5, 0.1, 0.01, -0.2, 1.5, 1.25, 3, 14.5, 0.0, 1.2)  # fmt: skip


def _empty_call(item: tuple) -> None:
    """Timed beside put_sample to show what the timer and a cold cache cost by themselves."""


def sustained(folder: Path, rows: int) -> None:
    data = [row(i) for i in range(rows)]
    recorder = Recorder(folder / "sustained.db", queue_capacity=rows + 10)
    recorder.start_run(METADATA)
    started = time.perf_counter()
    put = recorder.put_sample
    for item in data:
        put(item)
    queued_s = time.perf_counter() - started
    recorder.end_run("completed")
    recorder.close()
    total_s = time.perf_counter() - started
    stats = recorder.stats()
    print(f"sustained: {rows:,} rows in {total_s:.2f} s = {rows / total_s:,.0f} rows/s "
          f"(queued in {queued_s:.2f} s; writer CPU {stats.writer_cpu_s:.2f} s "
          f"= {rows / stats.writer_cpu_s:,.0f} rows per CPU-second; dropped {stats.dropped})")  # fmt: skip

    recorder = Recorder(folder / "prefilled.db", queue_capacity=rows + 10)
    recorder.start_run(METADATA)
    recorder._queue.extend(data)  # writer alone, no producer competing for the GIL
    started = time.perf_counter()
    recorder.end_run("completed")
    recorder.close()
    total_s = time.perf_counter() - started
    print(f"writer alone (queue pre-filled): {rows / total_s:,.0f} rows/s")


def producer_cost(folder: Path, puts: int) -> None:
    recorder = Recorder(folder / "producer.db", queue_capacity=puts + 10)
    recorder.start_run(METADATA)
    item = row(1)
    put = recorder.put_sample
    loop = range(puts)
    started = time.perf_counter_ns()
    for _ in loop:
        pass
    empty_ns = time.perf_counter_ns() - started
    started = time.perf_counter_ns()
    for _ in loop:
        put(item)
    burst_ns = time.perf_counter_ns() - started
    recorder.end_run("completed")
    recorder.close()
    print(f"producer burst: {(burst_ns - empty_ns) / puts:.0f} ns per put_sample "
          f"({puts:,} puts, writer running)")  # fmt: skip


def one_kilohertz(folder: Path, seconds: float) -> None:
    recorder = Recorder(folder / "1khz.db")
    recorder.start_run(METADATA)
    put = recorder.put_sample
    clock = time.perf_counter_ns
    put_ns: list[int] = []
    call_ns: list[int] = []  # an empty call timed the same way: the cost of waking from sleep
    period_ns = 1_000_000
    cpu_before = recorder.stats().writer_cpu_s
    started = clock()
    deadline = started
    i = 0
    while deadline - started < seconds * 1e9:
        deadline += period_ns
        pause = (deadline - clock()) / 1e9
        if pause > 0:
            time.sleep(pause)  # the producer sleeps between samples, as the rig clock paces it
        item = row(i)
        t0 = clock()
        _empty_call(item)
        t1 = clock()
        put(item)
        t2 = clock()
        call_ns.append(t1 - t0)
        put_ns.append(t2 - t1)
        i += 1
    wall_s = (clock() - started) / 1e9
    stats = recorder.stats()
    recorder.end_run("completed")
    recorder.close()
    cpu_share = (stats.writer_cpu_s - cpu_before) / wall_s
    put_ns.sort()
    call_median_ns = statistics.median(call_ns)
    print(f"1 kHz for {wall_s:.1f} s ({i:,} samples, {stats.commits} commits, "
          f"dropped {stats.dropped}):")  # fmt: skip
    print(f"  writer CPU share: {100 * cpu_share:.2f} % of a core")
    print(f"  commit p99 (BEGIN..COMMIT, last {min(stats.commits, 1024)} commits): "
          f"{1e3 * stats.commit_p99_s:.3f} ms")  # fmt: skip
    print(f"  put_sample right after a sleep: median {statistics.median(put_ns):.0f} ns, "
          f"p99 {put_ns[int(0.99 * len(put_ns))]:.0f} ns; an empty call timed the same way: "
          f"median {call_median_ns:.0f} ns")  # fmt: skip


def _one_of_two_writers(db: Path, rows: int, both_ready, results) -> None:
    """A writer process of two_writers: its rows, queued as fast as it can, once both are ready."""
    data = [row(i) for i in range(rows)]
    recorder = Recorder(db, queue_capacity=rows + 10)
    recorder.start_run(METADATA)
    both_ready.wait()
    started = time.perf_counter()
    put = recorder.put_sample
    for item in data:
        put(item)
    recorder.end_run("completed")
    recorder.close()
    stats = recorder.stats()
    wall_s = time.perf_counter() - started
    results.put((wall_s, stats.writer_cpu_s, stats.commits, stats.busy_waits))


def two_writers(folder: Path, rows: int) -> None:
    context = multiprocessing.get_context("spawn")
    both_ready, results = context.Barrier(2), context.Queue()
    args = (folder / "two.db", rows, both_ready, results)
    processes = [context.Process(target=_one_of_two_writers, args=args) for _ in range(2)]
    for process in processes:
        process.start()
    figures = [results.get() for _ in processes]
    for process in processes:
        process.join()
    walls, cpus, commits, busy = zip(*figures)
    per_cpu = " and ".join(f"{rows / cpu:,.0f}" for cpu in cpus)
    print(f"two writers at once, {rows:,} rows each into one store: "
          f"{2 * rows / max(walls):,.0f} rows/s together; {per_cpu} rows per writer-CPU-second; "
          f"commits {commits[0]} and {commits[1]}; "
          f"store busy a whole timeout {sum(busy)} times")  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=300_000, help="rows for the throughput run")
    parser.add_argument("--seconds", type=float, default=10.0, help="length of the 1 kHz run")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="poise-bench-") as folder:
        sustained(Path(folder), args.rows)
        producer_cost(Path(folder), 1_000_000)
        one_kilohertz(Path(folder), args.seconds)
        two_writers(Path(folder), args.rows)


if __name__ == "__main__":
    main()
