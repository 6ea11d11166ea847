"""Cross-check of vfcoach's tone measurements against reference libraries.

Writes scikit-image sample photographs (skimage.data, Debian python3-skimage)
as PNG, runs `vfcoach analyze` on them and compares, per photo:

  sharpness      cv2.Laplacian(luma, cv2.CV_64F).var()  (OpenCV 4.6, default
                 border BORDER_REFLECT_101, kernel [0 1 0; 1 -4 1; 0 1 0]
                 for ksize=1)                                 within 1 %
  colourfulness  Hasler & Suesstrunk 2003 eq. (3) in numpy     within 1 %
  clip_high/low  fractions of luma >= 250 / <= 5 in numpy      within 0.5 %
  exposure_ev    log2(mean relative luminance / 0.18), sRGB decoded per
                 IEC 61966-2-1 over every pixel in numpy       within 0.05 EV

The luma is 8-bit BT.709 (ITU-R BT.709-6 3.2) on the sRGB codes, rounded the
way the tone pass documents it: (13933 R + 46871 G + 4732 B + 32768) >> 16.

Also, through the same command line: uniform grey images at whole stops
around middle grey (code = sRGB encoding of 0.18 * 2^k, IEC 61966-2-1) must
read exposure_ev = k within 0.1 stop, and a frame with known shares of
clipped pixels must read them within 0.5 % (the acceptance criteria).

Usage: laplacian_ref.py VFCOACH.  Exit status 1 on any mismatch.
"""
import json
import os
import subprocess
import sys
import tempfile

import cv2
import numpy as np
import skimage.data

PHOTOS = ["camera", "astronaut", "coffee", "chelsea", "rocket", "coins", "moon",
          "immunohistochemistry", "hubble_deep_field"]


def srgb_decode(v):
    v = v / 255.0
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)


def srgb_encode(lin):
    return 12.92 * lin if lin <= 0.0031308 else 1.055 * lin ** (1 / 2.4) - 0.055


def synthetic():
    """(name, rgb image, expected exposure stops or None)."""
    out = []
    for k in range(-4, 3):
        code = int(round(255 * srgb_encode(0.18 * 2.0 ** k)))
        out.append(("grey_ev%+d" % k, np.full((120, 160, 3), code, np.uint8), float(k)))
    clip = np.full((100, 100, 3), 128, np.uint8)
    flat = clip.reshape(-1, 3)
    flat[:300] = 250
    flat[300:500] = 255
    flat[500:700] = 249
    flat[700:1800] = 5
    flat[1800:1900] = 0
    flat[1900:2000] = 6
    out.append(("clip_5_12", clip, None))
    return out


def reference(rgb):
    r, g, b = (rgb[..., i].astype(np.int64) for i in range(3))
    luma = ((13933 * r + 46871 * g + 4732 * b + 32768) >> 16).astype(np.uint8)
    sharp = cv2.Laplacian(luma, cv2.CV_64F).var()
    rg = (r - g).astype(np.float64)
    yb = 0.5 * (r + g) - b
    m = np.sqrt(rg.std() ** 2 + yb.std() ** 2) + 0.3 * np.sqrt(rg.mean() ** 2 + yb.mean() ** 2)
    lin = 0.2126 * srgb_decode(r) + 0.7152 * srgb_decode(g) + 0.0722 * srgb_decode(b)
    ev = np.log2(lin.mean() / 0.18)
    return {"sharpness": sharp, "colourfulness": m, "exposure_ev": ev,
            "clip_high": float((luma >= 250).mean()), "clip_low": float((luma <= 5).mean())}


def main():
    vf = sys.argv[1]
    fails = 0
    with tempfile.TemporaryDirectory(prefix="vfcoach-lap-") as tmp:
        files, refs = [], {}
        for name in PHOTOS:
            img = getattr(skimage.data, name)()
            if img.ndim == 2:
                img = np.stack([img] * 3, axis=-1)
            path = os.path.join(tmp, name + ".png")
            cv2.imwrite(path, cv2.cvtColor(img, cv2.COLOR_RGB2BGR))
            files.append(path)
            refs[path] = reference(img)
        expect_ev = {}
        for name, img, ev in synthetic():
            path = os.path.join(tmp, name + ".png")
            cv2.imwrite(path, cv2.cvtColor(img, cv2.COLOR_RGB2BGR))
            files.append(path)
            refs[path] = reference(img)
            if ev is not None:
                expect_ev[path] = ev
        out = subprocess.run([vf, "analyze"] + files, capture_output=True, text=True)
        if out.returncode != 0:
            print("check_laplacian: vfcoach analyze failed:", out.stderr.strip())
            return 1
        got = {}
        for line in out.stdout.splitlines():
            j = json.loads(line)
            got[j["file"]] = j
        print("%-22s %12s %12s %7s %8s %8s %7s %7s" % ("photo", "sharp", "cv2", "diff%",
              "M", "M_ref", "EV", "EV_ref"))
        for path in files:
            j, ref = got.get(path), refs[path]
            name = os.path.basename(path)
            if j is None:
                print("check_laplacian: no result for", name)
                fails += 1
                continue
            d_sharp = abs(j["sharpness"] - ref["sharpness"]) / max(ref["sharpness"], 1e-9) * 100
            if ref["sharpness"] == 0:
                d_sharp = 0.0 if j["sharpness"] == 0 else 100.0
            d_m = abs(j["colourfulness"] - ref["colourfulness"]) / max(ref["colourfulness"], 1e-9) * 100
            print("%-22s %12.3f %12.3f %7.4f %8.3f %8.3f %7.3f %7.3f" % (
                name, j["sharpness"], ref["sharpness"], d_sharp, j["colourfulness"],
                ref["colourfulness"], j["exposure_ev"], ref["exposure_ev"]))
            checks = [
                ("sharpness vs cv2.Laplacian var", d_sharp <= 1.0),
                ("colourfulness vs Hasler-Suesstrunk",
                 d_m <= 1.0 or abs(j["colourfulness"] - ref["colourfulness"]) < 1e-3),
                ("exposure_ev vs full-frame numpy", abs(j["exposure_ev"] - ref["exposure_ev"]) <= 0.05),
                ("clip_high", abs(j["clip_high"] - ref["clip_high"]) <= 0.005),
                ("clip_low", abs(j["clip_low"] - ref["clip_low"]) <= 0.005),
            ]
            if path in expect_ev:  # acceptance: whole stops within 0.1
                checks.append(("exposure_ev %+d stop(s) within 0.1" % expect_ev[path],
                               abs(j["exposure_ev"] - expect_ev[path]) <= 0.1))
            if name.startswith("clip_"):  # 500 and 1200 of 10000 pixels
                checks.append(("clip_high 5 %", abs(j["clip_high"] - 0.05) <= 0.005))
                checks.append(("clip_low 12 %", abs(j["clip_low"] - 0.12) <= 0.005))
            for what, ok in checks:
                if not ok:
                    print("check_laplacian: FAIL %s: %s" % (name, what))
                    fails += 1
    print("check_laplacian: %s" % ("ok" if fails == 0 else "%d mismatches" % fails))
    return 1 if fails else 0


if __name__ == "__main__":
    sys.exit(main())
