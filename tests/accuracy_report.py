#!/usr/bin/python3
"""Accuracy report of the composition analysis over the demo scenes.

Usage: accuracy_report.py VFCOACH FRAMES

Runs `vfcoach --headless --source demo[:tabletop] --size WxH --frames N`,
whose JSON lines carry the scene's ground truth ("truth": the rendered
horizon angle and height, the subject's box), and compares each frame's
measurements with it.  Bounds, from the issue (for rendered horizons and a
single salient subject on a quiet background):
  level       mean absolute error <= 0.3 deg, max <= 1 deg
  horizon_y   within 0.02 of the truth
  subject     centre within 5 % of the frame diagonal
The tabletop jug on its seamless backdrop is such a subject; the harbour's
boat sits on a textured sea, so there its numbers are reported and only
held to the bound at the median.  A measurement missing where the truth has
one counts against its detection rate, which must reach 95 %.
Exit status 1 when a bound is exceeded.
"""
import json
import math
import statistics
import subprocess
import sys

VF, FRAMES = sys.argv[1], int(sys.argv[2])
failures = []


def run(source, size):
    cmd = [VF, "--headless", "--source", source, "--size", size, "--frames", str(FRAMES)]
    out = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    if out.returncode != 0:
        raise SystemExit("vfcoach failed (%s): %s" % (" ".join(cmd), out.stderr.strip()[:300]))
    rows = [json.loads(l) for l in out.stdout.splitlines() if l.startswith("{")]
    if len(rows) < FRAMES // 2:
        raise SystemExit("vfcoach printed %d frames of %d for %s %s" % (len(rows), FRAMES, source, size))
    return rows


def num(v):
    return v if isinstance(v, (int, float)) and math.isfinite(v) else None


def bound(ok, what):
    if not ok:
        failures.append(what)
    return "ok" if ok else "FAIL"


print("%-9s %-9s %6s | %-27s | %-16s | %-30s | %s" % (
    "scene", "size", "frames", "level err deg mean/max (det)", "horizon_y max", "subject err/diag med/max (det)",
    "motion px/s med"))
for source, scene, subject_strict in (("demo", "harbour", False), ("demo:tabletop", "tabletop", True)):
    for size in ("640x480", "1920x1080"):
        w, h = (int(v) for v in size.split("x"))
        diag = math.hypot(w, h)
        rows = run(source, size)
        lev, hy, sub, mot = [], [], [], []
        n_lev = n_hy = n_sub = 0
        for r in rows:
            t = r.get("truth") or {}
            td, ty = num(t.get("horizon_deg")), num(t.get("horizon_y"))
            if td is not None:
                n_lev += 1
                if num(r.get("tilt_deg")) is not None:
                    lev.append(abs(r["tilt_deg"] - td))
            if ty is not None:
                n_hy += 1
                if num(r.get("horizon_y")) is not None:
                    hy.append(abs(r["horizon_y"] - ty))
            if num(t.get("subject_x")) is not None:
                n_sub += 1
                s = r.get("subject")
                if s:
                    sub.append(math.hypot((s["x"] - t["subject_x"]) * w, (s["y"] - t["subject_y"]) * h) / diag)
            if num(r.get("motion_px_s")) is not None:
                mot.append(r["motion_px_s"])
        det_l = len(lev) / n_lev if n_lev else 1.0
        det_h = len(hy) / n_hy if n_hy else 1.0
        det_s = len(sub) / n_sub if n_sub else 1.0
        cells = []
        if lev:
            m, x = statistics.mean(lev), max(lev)
            cells.append("%.3f/%.3f (%3.0f%%) %s" % (m, x, 100 * det_l,
                         bound(m <= 0.3 and x <= 1.0 and det_l >= 0.95, "%s %s level" % (scene, size))))
        else:
            cells.append("none (%s)" % bound(n_lev == 0, "%s %s level missing" % (scene, size)))
        if hy:
            x = max(hy)
            cells.append("%.4f %s" % (x, bound(x <= 0.02 and det_h >= 0.95, "%s %s horizon_y" % (scene, size))))
        else:
            cells.append("none (%s)" % bound(n_hy == 0, "%s %s horizon_y missing" % (scene, size)))
        if sub:
            med, x = statistics.median(sub), max(sub)
            ok = (x if subject_strict else med) <= 0.05 and det_s >= 0.95
            cells.append("%.4f/%.4f (%3.0f%%) %s" % (med, x, 100 * det_s,
                         bound(ok, "%s %s subject" % (scene, size))))
        else:
            cells.append("none (%s)" % bound(n_sub == 0, "%s %s subject missing" % (scene, size)))
        cells.append("%.1f" % statistics.median(mot) if mot else "-")
        print("%-9s %-9s %6d | %-27s | %-16s | %-30s | %s" % (scene, size, len(rows), *cells))

if failures:
    print("accuracy: %d bound(s) exceeded: %s" % (len(failures), "; ".join(failures)))
    sys.exit(1)
print("accuracy: every bound holds")
