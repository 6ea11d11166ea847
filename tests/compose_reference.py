#!/usr/bin/python3
"""Cross-checks of vfcoach's composition analysis against reference libraries.

Run by tests/check_compose.sh as:  compose_reference.py VFCOACH WORKDIR

Each check names its reference.  Images are rendered here (invented scenes)
or come from Debian's packages: scikit-image's sample data and opencv-doc's
example pictures.  Exit status 1 when a check fails.
"""
import json
import math
import os
import subprocess
import sys

import cv2
import numpy as np
import skimage.data

VF, WORK = sys.argv[1], sys.argv[2]
BUILDING = "/usr/share/doc/opencv-doc/examples/data/building.jpg"
failures = []


def check(ok, msg):
    print(("ok    " if ok else "FAIL  ") + msg)
    if not ok:
        failures.append(msg)


def inspect(path, saliency=None):
    cmd = [VF, "inspect"] + (["--saliency", saliency] if saliency else []) + [path]
    out = subprocess.run(cmd, capture_output=True, text=True)
    if out.returncode != 0:
        raise SystemExit("vfcoach inspect failed on %s: %s" % (path, out.stderr.strip()))
    return json.loads(out.stdout.strip().splitlines()[-1])


def write(name, img):
    p = os.path.join(WORK, name)
    cv2.imwrite(p, img)
    return p


def horizon_image(w, h, deg, yf, seed):
    """Sky over a textured sea, the boundary through (w/2, yf*h) at deg
    (+: right end higher), anti-aliased by coverage; BGR uint8."""
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[0:h, 0:w].astype(np.float64)
    th = math.radians(deg)
    d = (x + 0.5 - 0.5 * w) * math.sin(th) + (y + 0.5 - yf * h) * math.cos(th)
    sea = np.clip(d + 0.5, 0, 1)
    t = y / h
    sky = np.stack([230 - 10 * t, 160 + 60 * t, 120 + 80 * t], -1)
    along = (x + 0.5 - 0.5 * w) * math.cos(th) - (y + 0.5 - yf * h) * math.sin(th)
    wave = 10 * np.sin(0.9 * np.sqrt(np.maximum(d, 0)) + 0.02 * along) * (0.3 + t)
    water = np.stack([110 + wave, 70 + wave, 30 + wave], -1)
    img = sky * (1 - sea[..., None]) + water * sea[..., None]
    img += rng.normal(0, 2.0, img.shape)
    return np.clip(np.rint(img), 0, 255).astype(np.uint8)


# ---- 1. Hough peak against OpenCV's standard Hough transform ------------------
# Reference: cv2.HoughLines (OpenCV 4.6, Debian python3-opencv) on the Canny
# edges of the same picture, in the same normal form x cos(t) + y sin(t) = r
# with the origin at the top-left pixel.  Its grid is 0.25 degree and 1 px,
# so the two strongest lines must agree to within half a degree and 2 px.
def hough_checks():
    cases = [(640, 480, -12.0, 0.40), (640, 480, 3.5, 0.62), (1280, 720, -4.0, 0.33),
             (1280, 720, 9.0, 0.55), (960, 540, 14.0, 0.50), (800, 600, -0.7, 0.45)]
    for i, (w, h, deg, yf) in enumerate(cases):
        img = horizon_image(w, h, deg, yf, 10 + i)
        p = write("hough%d.png" % i, img)
        mine = inspect(p)["hough"]
        grey = cv2.cvtColor(img, cv2.COLOR_BGR2GRAY)
        edges = cv2.Canny(cv2.GaussianBlur(grey, (5, 5), 1.2), 40, 100)
        lines = cv2.HoughLines(edges, 1, math.pi / 720, max(50, w // 4))
        if lines is None or mine is None:
            check(False, "hough %dx%d %.1f deg: a line from both (mine %s, OpenCV %s)"
                  % (w, h, deg, mine, lines is not None))
            continue
        r_cv, t_cv = float(lines[0][0][0]), math.degrees(float(lines[0][0][1]))
        t_me, r_me = mine["theta_deg"], mine["rho"]
        dt = t_me - t_cv
        if dt > 90:  # the same line can be written with theta +- 180, rho negated
            dt, r_cv = dt - 180, -r_cv
        elif dt < -90:
            dt, r_cv = dt + 180, -r_cv
        check(abs(dt) <= 0.5 and abs(r_me - r_cv) <= 2.0,
              "hough %dx%d %+.1f deg: mine theta %.3f rho %.2f, OpenCV theta %.3f rho %.2f"
              % (w, h, deg, t_me, r_me, t_cv, r_cv))


def wall_image(w, h, deg, xf, seed):
    """A wall's edge: dark left, light right, through (xf*w, h/2), leaning
    with a camera roll of deg (+: its top to the left); BGR uint8."""
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[0:h, 0:w].astype(np.float64)
    th = math.radians(deg)
    d = (x + 0.5 - xf * w) * math.cos(th) - (y + 0.5 - 0.5 * h) * math.sin(th)
    lit = np.clip(d + 0.5, 0, 1)
    v = 60 + 120 * lit + rng.normal(0, 2.0, lit.shape)
    return cv2.cvtColor(np.clip(np.rint(v), 0, 255).astype(np.uint8), cv2.COLOR_GRAY2BGR)


def hough_vertical_checks():
    # The vertical family, same reference and bounds: a single wall edge,
    # so both transforms have one strongest line.
    for i, (w, h, deg, xf) in enumerate([(640, 480, 4.0, 0.45), (1280, 720, -7.5, 0.6),
                                        (960, 540, 12.0, 0.35)]):
        img = wall_image(w, h, deg, xf, 30 + i)
        p = write("wall%d.png" % i, img)
        j = inspect(p)
        mine = j["hough"]
        edges = cv2.Canny(cv2.cvtColor(img, cv2.COLOR_BGR2GRAY), 40, 100)
        lines = cv2.HoughLines(edges, 1, math.pi / 720, h // 4)
        if lines is None or mine is None:
            check(False, "hough vertical %dx%d %.1f deg: a line from both" % (w, h, deg))
            continue
        r_cv, t_cv = float(lines[0][0][0]), math.degrees(float(lines[0][0][1]))
        t_me, r_me = mine["theta_deg"], mine["rho"]
        dt = t_me - t_cv
        if dt > 90:
            dt, r_cv = dt - 180, -r_cv
        elif dt < -90:
            dt, r_cv = dt + 180, -r_cv
        check(abs(dt) <= 0.5 and abs(r_me - r_cv) <= 2.0 and j["level_source"] == "verticals"
              and abs(j["tilt_deg"] - deg) <= 0.5,
              "hough vertical %dx%d %+.1f deg: mine theta %.3f rho %.2f (tilt %s, %s), "
              "OpenCV theta %.3f rho %.2f" % (w, h, deg, t_me, r_me, j["tilt_deg"], j["level_source"],
                                              t_cv, r_cv))


# ---- 2. saliency map against OpenCV's spectral residual ------------------------
# Reference: cv2.saliency.StaticSaliencySpectralResidual_create() (opencv
# contrib, Debian python3-opencv), the same method (Hou & Zhang 2007).  Both
# maps at 64x64, compared by Pearson correlation.  Small differences are
# expected (their grey is BT.601 on the full frame resized bilinearly; ours
# is BT.709 luma box-averaged), so the bound is a correlation of 0.8.
def saliency_checks():
    imgs = {
        "astronaut": skimage.data.astronaut()[..., ::-1],
        "coffee": skimage.data.coffee()[..., ::-1],
        "chelsea": skimage.data.chelsea()[..., ::-1],
        "rocket": skimage.data.rocket()[..., ::-1],
        "camera": cv2.cvtColor(skimage.data.camera(), cv2.COLOR_GRAY2BGR),
        "coins": cv2.cvtColor(skimage.data.coins(), cv2.COLOR_GRAY2BGR),
        "building": cv2.imread(BUILDING),
    }
    sr = cv2.saliency.StaticSaliencySpectralResidual_create()
    for name, img in imgs.items():
        img = np.ascontiguousarray(img)
        p = write("sal_%s.png" % name, img)
        pgm = os.path.join(WORK, "sal_%s.pgm" % name)
        inspect(p, pgm)
        mine = cv2.imread(pgm, cv2.IMREAD_UNCHANGED).astype(np.float64) / 65535.0
        ok, ref = sr.computeSaliency(img)
        ref = cv2.resize(ref.astype(np.float64), (64, 64), interpolation=cv2.INTER_AREA)
        r = float(np.corrcoef(mine.ravel(), ref.ravel())[0, 1])
        check(ok and r >= 0.8, "saliency %s: correlation with OpenCV's spectral residual %.3f"
              % (name, r))


# ---- 3. level on a real photograph rotated by known angles ----------------------
# The bound: the estimate moves by the applied rotation within 0.5
# degree.  building.jpg (Debian opencv-doc) rotated with cv2.warpAffine about
# its centre (positive = counter-clockwise, which raises a line's right end),
# cropped to the same centred window free of the rotated borders.
def rotation_checks():
    src = cv2.imread(BUILDING)
    h, w = src.shape[:2]
    amax = math.radians(9.5)
    cw = int(w * math.cos(amax) - h * math.sin(amax))
    ch = int(h * math.cos(amax) - w * math.sin(amax) * 0.5)
    ch = min(ch, int(h - w * math.sin(amax)))
    x0, y0 = (w - cw) // 2, (h - ch) // 2
    tilts = {}
    for a in [-9, -6, -4, -2, -1, 0, 1, 2, 3, 5, 7, 9]:
        m = cv2.getRotationMatrix2D((w / 2.0, h / 2.0), a, 1.0)
        r = cv2.warpAffine(src, m, (w, h), flags=cv2.INTER_LINEAR)
        p = write("rot%+d.png" % a, r[y0:y0 + ch, x0:x0 + cw])
        j = inspect(p)
        tilts[a] = j["tilt_deg"]
        print("      building rotated %+d deg: tilt %s (%s)" % (a, j["tilt_deg"], j["level_source"]))
    base = tilts[0]
    check(base is not None, "building.jpg: a level is found (%s)" % base)
    if base is None:
        return
    worst = 0.0
    for a, t in tilts.items():
        if t is None:
            check(False, "building.jpg rotated %+d deg: no level" % a)
            continue
        worst = max(worst, abs((t - base) - a))
    check(worst <= 0.5, "building.jpg rotations: estimate follows the rotation, worst error %.3f deg"
          % worst)


# ---- 4. subject focus against OpenCV's Laplacian -----------------------------
# Reference: cv2.Laplacian(grey, CV_64F) (kernel [0 1 0; 1 -4 1; 0 1 0],
# reflect-101 border); subject focus = its variance inside the reported
# subject box over its variance on the whole frame.  Our box is snapped to
# analysis cells, so 10 % agreement is asked.
def focus_checks():
    rng = np.random.default_rng(7)
    for i, (sharp_subject, xf, yf) in enumerate([(True, 0.35, 0.4), (False, 0.6, 0.55),
                                                  (True, 0.7, 0.3)]):
        w, h = 960, 640
        tex = rng.normal(128, 40, (h, w)).clip(0, 255).astype(np.uint8)
        tex = cv2.GaussianBlur(tex, (0, 0), 1.0).astype(np.float64)
        # a bright textured disc that stands out from a dim textured backdrop
        y, x = np.mgrid[0:h, 0:w]
        disc = ((x - xf * w) ** 2 + (y - yf * h) ** 2) <= (0.12 * h) ** 2
        scene = tex * 0.35 + 20
        scene[disc] = tex[disc] * 0.6 + 100
        # defocus (Gaussian, sigma 3 px) either the subject with its outline
        # or everything else, blended through a soft mask
        soft = cv2.GaussianBlur(scene, (0, 0), 3.0)
        near = cv2.GaussianBlur(disc.astype(np.float64), (0, 0), 6.0)
        near = np.clip(near * 2.0, 0, 1)
        img = scene * near + soft * (1 - near) if sharp_subject else soft * near + scene * (1 - near)
        img = img.clip(0, 255).astype(np.uint8)
        p = write("focus%d.png" % i, cv2.cvtColor(img, cv2.COLOR_GRAY2BGR))
        j = inspect(p)
        if j["subject"] is None or j["subject_focus"] is None:
            check(False, "focus case %d: subject and focus reported" % i)
            continue
        s = j["subject"]
        lap = cv2.Laplacian(img, cv2.CV_64F)
        x0 = int(round((s["x"] - s["w"] / 2) * w)); x1 = int(round((s["x"] + s["w"] / 2) * w))
        y0 = int(round((s["y"] - s["h"] / 2) * h)); y1 = int(round((s["y"] + s["h"] / 2) * h))
        ref = lap[max(0, y0):y1, max(0, x0):x1].var() / lap.var()
        rel = abs(j["subject_focus"] - ref) / ref
        check(rel <= 0.10 and (j["subject_focus"] > 1) == sharp_subject,
              "focus case %d (%s subject): ours %.3f, OpenCV Laplacian %.3f (%.1f %%)"
              % (i, "sharp" if sharp_subject else "soft", j["subject_focus"], ref, 100 * rel))


hough_checks()
hough_vertical_checks()
saliency_checks()
rotation_checks()
focus_checks()
if failures:
    print("%d check(s) failed" % len(failures))
    sys.exit(1)
print("all composition cross-checks passed")
