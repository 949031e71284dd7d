"""Fuzz pass: huge, tiny and extreme numbers in every numeric entry of the samples, across
every command. Not a benchmark and not collected by pytest; run on demand:

    python bench/fuzz_bad_numbers.py [--cases 3000] [--seed 1] [--timeout 20]

Each case copies a sample, puts one value (1e300, -1e308, 1e-320, ...) into one numeric
entry of one block's parameters (or turns a gain into a transfer function with a
negligible leading coefficient), and runs one command in a forked process. A case fails
when it raises (a traceback), runs longer than the timeout, exits with a status other
than 0 or 2, or prints more than one line on stderr. Prints a summary and every failure.
"""
from __future__ import annotations

import argparse
import contextlib
import io
import json
import multiprocessing as mp
import os
import random
import sys
import tempfile
import time
import traceback
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = sorted((ROOT / "samples").glob("*.lwd"))
VALUES = [1e300, -1e308, 1e-320, 1.7976931348623157e308, -1e300, 1e99, -1e150, 1e-300]


def commands(path: str, out_dir: str) -> list[list[str]]:
    return [
        ["check", path, "--json"],
        ["report", path, "--json"],
        ["freq", path, "--from", "dl", "--to", "y", "--json"],
        ["freq", path, "--from", "r", "--to", "u"],
        ["time", path, "--to", "y", "--json"],
        ["time", path, "--step", "r", "--to", "y", "--json"],
        ["margins", path, "--json"],
        ["audit", path, "--json"],
        ["noise", path, "--json"],
        ["design", path, "--json"],
        ["design", path, "--write", "--json"],
        ["export", path, "--what", "closed-loop", "-o", os.path.join(out_dir, "loop.json"), "--json"],
        ["export", path, "--what", "controller", "--ts", "0.001", "-o", os.path.join(out_dir, "ctrl.c"), "--json"],
    ]


def numeric_sites(doc: dict) -> list[tuple[int, tuple]]:
    """(block index, path inside params) of every number in every block's params."""
    sites = []

    def walk(v, path, bi):
        if isinstance(v, bool):
            return
        if isinstance(v, (int, float)):
            if path[-1] not in ("width", "seed"):
                sites.append((bi, path))
        elif isinstance(v, dict):
            for k, sub in v.items():
                walk(sub, path + (k,), bi)
        elif isinstance(v, list):
            for i, sub in enumerate(v):
                walk(sub, path + (i,), bi)

    for bi, b in enumerate(doc["blocks"]):
        walk(b.get("params", {}), (), bi)
    return sites


def mutate(doc: dict, rng: random.Random) -> tuple[dict, str]:
    doc = json.loads(json.dumps(doc))
    if rng.random() < 0.15:
        gains = [i for i, b in enumerate(doc["blocks"]) if b["kind"] == "gain"]
        bi = rng.choice(gains)
        b = doc["blocks"][bi]
        k = b["params"]["K"]
        if isinstance(k, list) and len(k) == 1 and len(k[0]) == 1:
            lead = rng.choice([1e-320, 1e-300, 1e-200, 1e-101])
            b["params"] = {"num": [k[0][0]], "den": [lead, 1.0]}
            b["kind"] = "dynamic"
            return doc, f"blocks[{bi}] ({b['name']}) as num={[k[0][0]]} den=[{lead}, 1]"
    bi, path = rng.choice(numeric_sites(doc))
    value = rng.choice(VALUES)
    target = doc["blocks"][bi]["params"]
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = value
    return doc, f"blocks[{bi}] ({doc['blocks'][bi]['name']}).params" + "".join(f"[{p!r}]" for p in path) + f" = {value!r}"


def _child(argv: list[str], conn) -> None:
    from loopwright.engine.cli import main

    err = io.StringIO()
    try:
        with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(err):
            try:
                code = main(argv)
            except SystemExit as exc:
                code = exc.code if isinstance(exc.code, int) else 2
        conn.send(("ok", code, err.getvalue()))
    except BaseException:  # noqa: BLE001 - a traceback is exactly what we look for
        conn.send(("traceback", None, traceback.format_exc()))


def run_case(argv: list[str], timeout: float) -> tuple[str, int | None, str, float]:
    ctx = mp.get_context("fork")
    parent, child = ctx.Pipe(duplex=False)
    t0 = time.perf_counter()
    proc = ctx.Process(target=_child, args=(argv, child))
    proc.start()
    child.close()
    if parent.poll(timeout):
        kind, code, text = parent.recv()
    else:
        kind, code, text = "hang", None, ""
    proc.join(1.0)
    if proc.is_alive():
        proc.kill()
        proc.join()
    return kind, code, text, time.perf_counter() - t0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", type=int, default=3000)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--timeout", type=float, default=20.0)
    args = ap.parse_args()
    import loopwright.engine.cli  # noqa: F401 - imported once, before forking
    import loopwright.engine.cli_analysis  # noqa: F401
    import loopwright.engine.cli_design  # noqa: F401

    rng = random.Random(args.seed)
    docs = {p: json.loads(p.read_text(encoding="utf-8")) for p in SAMPLES}
    failures, counts, slowest = [], {"ok0": 0, "ok2": 0}, 0.0
    with tempfile.TemporaryDirectory() as tmp:
        for case in range(args.cases):
            sample = rng.choice(SAMPLES)
            doc, what = mutate(docs[sample], rng)
            path = os.path.join(tmp, f"case{case}.lwd")
            Path(path).write_text(json.dumps(doc), encoding="utf-8")
            argv = rng.choice(commands(path, tmp))
            kind, code, text, secs = run_case(argv, args.timeout)
            slowest = max(slowest, secs)
            lines = text.strip().splitlines()
            bad = kind != "ok" or code not in (0, 2) or len(lines) > 1 or (code == 2 and len(lines) != 1) or (code == 0 and lines)
            if bad:
                failures.append((kind, code, sample.name, what, " ".join(argv[:1] + argv[2:]), text.strip()[-600:]))
            else:
                counts[f"ok{code}"] += 1
            os.unlink(path)
    print(f"{args.cases} cases: {counts['ok0']} answered, {counts['ok2']} one-line refusals, {len(failures)} failures; "
          f"slowest case {slowest:.1f} s")
    for f in failures:
        print("FAIL", *f, sep="\n  ")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
