#!/usr/bin/env python3
"""Side-by-side timing: crankcharge's detailed fidelity against the independent scipy reference.

One run times, on the same scenario and the same simulated span,

- scipy's solve_ivp with LSODA and with Radau on the detailed equations of
  `detailed_reference.py` (imported from it: the same model, segments, events and per-step checks
  that produce the committed fixture, nothing written);
- the product's release binary, detailed fidelity (Radau5; explicit Dopri5 before), as a whole process:
  `target/release/crankcharge run <demo.ron> --profile <steady.ron> --fidelity detailed
  --duration <D> --set profile.jitter.enabled=false --no-plot --out <tmp>`; its solver figures
  (evaluations, accepted and rejected steps, in-process wall time) come from its summary.json;
- the same command with the fast fidelity, for comparison;

each best of N, and prints a table with the ratio product time / scipy time. Not part of CI.

From the repository root (builds the release binary first):

    python3 tests/reference/timing.py [--duration 3] [--repeats 3]

The scipy tolerances default to the product's own solver defaults (`Solver::default` in
src/scenario/setup.rs: rtol 1e-6, atol 1e-8, largest step 0.05 s); the script says so, or warns
if the source no longer matches. W' keeps the reference's absolute tolerance of 1e-7 J (its
9-kJ reserve is governed by rtol at these settings anyway).
"""

import argparse
import json
import math
import pathlib
import re
import subprocess
import sys
import tempfile
import time

sys.dont_write_bytecode = True  # no __pycache__ left in tests/reference
sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
import detailed_reference as ref  # noqa: E402  (the equations and the scenario)

ROOT = ref.ROOT
BINARY = ROOT / "target/release/crankcharge"
PRODUCT_RTOL, PRODUCT_ATOL, PRODUCT_MAX_STEP = 1e-6, 1e-8, 0.05


def product_defaults_note():
    """States whether the tolerances above are still the product's `Solver::default`."""
    text = (ROOT / "src/scenario/setup.rs").read_text(encoding="utf-8")
    m = re.search(r"impl Default for Solver \{.*?rtol:\s*([^,]+),\s*atol:\s*([^,]+),\s*"
                  r"max_step_s:\s*([^,]+),", text, re.S)
    if not m:
        return "warning: Solver::default not found in src/scenario/setup.rs"
    found = tuple(float(v.replace("_", "")) for v in m.groups())
    if found != (PRODUCT_RTOL, PRODUCT_ATOL, PRODUCT_MAX_STEP):
        return (f"warning: the product's defaults are now rtol {found[0]:g}, atol {found[1]:g}, "
                f"max step {found[2]:g} s; update PRODUCT_* in this script")
    if re.search(r"\bsolver\s*:", ref.strip_comments(ref.SETUP_FILE.read_text(encoding="utf-8"))):
        return "warning: demo.ron sets its own solver block; the product may not use the defaults"
    return "the product's Solver::default (demo.ron leaves them unset)"


def build():
    print("building: cargo build --release", flush=True)
    subprocess.run(["cargo", "build", "--release", "--quiet"], cwd=ROOT, check=True)


def time_product(binary, fidelity, duration, repeats):
    """Best-of-N whole-process wall time of the binary, and the summary of the best run."""
    best, summary, end = math.inf, None, None
    with tempfile.TemporaryDirectory(prefix="crankcharge-timing-") as tmp:
        cmd = [str(binary), "run", str(ref.SETUP_FILE), "--profile", str(ref.PROFILE_FILE),
               "--fidelity", fidelity, "--duration", f"{duration:g}",
               "--set", "profile.jitter.enabled=false", "--no-plot", "--out", tmp]
        # Scenario files as paths relative to the repository root (the command runs there).
        cmd[2], cmd[4] = (str(pathlib.Path(c).relative_to(ROOT)) for c in (cmd[2], cmd[4]))
        for _ in range(repeats):
            t0 = time.perf_counter()
            subprocess.run(cmd, cwd=ROOT, check=True, stdout=subprocess.DEVNULL)
            wall = time.perf_counter() - t0
            if wall < best:
                best = wall
                summary = json.loads((pathlib.Path(tmp) / "summary.json").read_text())
                lines = (pathlib.Path(tmp) / "trace.csv").read_text().splitlines()
                head = lines[0].split(",")
                last = dict(zip(head, lines[-1].split(",")))
                end = (float(last["crank_rpm"]), float(last["battery_current_a"]))
    s = summary["solver"]
    return {
        "wall": best,
        "inproc": summary.get("wall_time_s", s.get("wall_time_s", float("nan"))),
        "steps": s["accepted_steps"],
        "rejected": s.get("rejected_steps", 0),
        "evals": s["evaluations"],
        "end": end,
        "cmd": " ".join(cmd[:-1] + ["<tmp>"]),
    }


def time_scipy(method, duration, repeats, rtol, atol, max_step, model):
    """Best-of-N wall time of one reference integration (files already read), with counters."""
    calls = [0]
    evaluate = type(model).evaluate

    def counted(*a):
        calls[0] += 1
        return evaluate(model, *a)

    model.evaluate = counted  # every model call: right-hand side, Jacobian columns, events, checks
    best, best_stats, end = math.inf, None, None
    try:
        for _ in range(repeats):
            calls[0] = 0
            t0 = time.perf_counter()
            rows, _, stats = ref.integrate(method, duration, rtol, atol, max_step, model=model)
            wall = time.perf_counter() - t0
            if wall < best:
                best, best_stats = wall, dict(stats, calls=calls[0])
                end = (rows[-1]["crank_rpm"], rows[-1]["battery_current_a"])
    finally:
        del model.evaluate
    return dict(best_stats, wall=best, end=end)


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--duration", type=float, default=ref.DURATION_S, help="simulated s (3)")
    ap.add_argument("--repeats", type=int, default=3, help="best of N (3)")
    ap.add_argument("--rtol", type=float, default=PRODUCT_RTOL)
    ap.add_argument("--atol", type=float, default=PRODUCT_ATOL)
    ap.add_argument("--max-step", type=float, default=PRODUCT_MAX_STEP, help="s, scipy's max_step")
    ap.add_argument("--no-build", action="store_true", help="use the existing release binary")
    ap.add_argument("--binary", type=pathlib.Path, default=None,
                    help="time this crankcharge binary instead (e.g. one built from a clean "
                         "checkout elsewhere); implies --no-build")
    args = ap.parse_args()
    if args.duration <= 0 or args.repeats < 1:
        sys.exit("--duration must be > 0 and --repeats >= 1")
    d, n = args.duration, args.repeats

    binary = args.binary.resolve() if args.binary else BINARY
    if not (args.no_build or args.binary):
        build()
    if not binary.exists():
        sys.exit(f"{binary} not found" + ("" if args.binary else "; run without --no-build"))
    model = ref.build_model()

    print(f"scenario: {ref.SETUP_FILE.relative_to(ROOT)} + {ref.PROFILE_FILE.relative_to(ROOT)}, "
          f"jitter off, {d:g} s from rest; best of {n}")
    print(f"tolerances (scipy, both methods): rtol {args.rtol:g}, atol {args.atol:g} "
          f"(W' 1e-7 J), max step {args.max_step:g} s; "
          + (product_defaults_note() if (args.rtol, args.atol, args.max_step)
             == (PRODUCT_RTOL, PRODUCT_ATOL, PRODUCT_MAX_STEP) else "NOT the product's defaults"))
    print("timing ...", flush=True)
    det = time_product(binary, "detailed", d, n)
    fast = time_product(binary, "fast", d, n)
    sp, failed = {}, {}
    for m in ("LSODA", "Radau"):
        try:
            sp[m] = time_scipy(m, d, n, args.rtol, args.atol, args.max_step, model)
        except (ValueError, RuntimeError, SystemExit) as e:  # reported, not fatal
            failed[m] = f"{type(e).__name__}: {e}"

    print(f"product command: {det['cmd']}")
    print()
    hdr = (f"{'run':<34} {'wall [s]':>9} {'sim s/wall s':>12} {'steps':>9} {'rejected':>8} "
           f"{'evaluations':>11} {'njev':>6} {'nlu':>6} {'end rpm':>8} {'end A':>7}")
    print(hdr)
    print("-" * len(hdr))

    def row(name, wall, steps, rej, evals, njev, nlu, end):
        print(f"{name:<34} {wall:>9.4f} {d / wall:>12.1f} {steps:>9} {rej:>8} {evals:>11} "
              f"{njev:>6} {nlu:>6} {end[0]:>8.3f} {end[1]:>7.4f}")

    row("crankcharge detailed (process)", det["wall"], det["steps"], det["rejected"],
        det["evals"], "-", "-", det["end"])
    row("crankcharge detailed (in-process)", det["inproc"], det["steps"], det["rejected"],
        det["evals"], "-", "-", det["end"])
    for m, s in sp.items():
        row(f"scipy {m} (integration)", s["wall"], s["steps"], "-", s["nfev"], s["njev"], s["nlu"],
            s["end"])
    for m, why in failed.items():
        print(f"{'scipy ' + m + ' (integration)':<34} failed: {why}")
    row("crankcharge fast (process)", fast["wall"], fast["steps"], fast["rejected"],
        fast["evals"], "-", "-", fast["end"])
    print()
    for m, s in sp.items():
        print(f"ratio crankcharge detailed / scipy {m:<5}: {det['wall'] / s['wall']:7.3f} "
              f"(whole process / integration), {det['inproc'] / s['wall']:7.3f} (in-process / "
              f"integration); scipy {m}: {s['calls']} model calls in all, "
              f"{s['solve_s']:.4f} s inside solve_ivp")
    print(f"ratio crankcharge fast / detailed (process): {fast['wall'] / det['wall']:.4f}")
    print()
    print("steps: accepted steps. evaluations: the product's right-hand-side evaluations; scipy's "
          "nfev (LSODA's includes its finite-difference Jacobian columns, Radau's does not: add "
          "14 per njev). 'model calls' also counts event functions and per-step checks. "
          "scipy wall: ref.integrate() with the files already read (segments, events, checks, "
          "0.1-s grid); product process: start-up, loading, integration, trace and summary "
          "written; in-process: summary.json wall_time_s. end rpm / end A: crank speed and "
          "battery current at the last trace row.")


if __name__ == "__main__":
    main()
