#!/usr/bin/python3
"""Independent reference values for bench/metrics.go (PSNR, SSIM, MAE on BT.601 luma).

Run with Debian's interpreter (a pyenv python may come first in PATH):

    /usr/bin/python3 bench/testdata/reference_metrics.py            # recompute reference_metrics.json
    /usr/bin/python3 bench/testdata/reference_metrics.py --regen    # also rebuild the PNG fixtures

Needs Debian 12 packages python3-skimage (scikit-image 0.19.x), python3-numpy, python3-scipy,
python3-pil, and opencv-doc for --regen (source images in /usr/share/doc/opencv-doc/examples/data).

The fixtures are small crops of opencv-doc images and deterministic derivatives of them. They are
committed, so the Go test needs neither Python nor opencv-doc. The reference numbers come from
scikit-image, which shares no code with our Go/OpenCV implementation:

  * luma: Y = 0.299 R + 0.587 G + 0.114 B in float64, no rounding, no studio-range offset
    (BT.601 luma weights); single-channel fixtures are used as they are.
  * SSIM: skimage.metrics.structural_similarity(gaussian_weights=True, sigma=1.5,
    use_sample_covariance=False, data_range=255). With truncate=3.5 this is an 11x11 Gaussian
    window, and skimage averages the SSIM map after cropping (11-1)/2 = 5 pixels from every border,
    i.e. over the 'valid' window positions, the same region as the 'valid' filter2 calls in the
    MATLAB code published with Wang et al. 2004. No downsampling is applied.
  * PSNR: skimage.metrics.peak_signal_noise_ratio(data_range=255).
  * MAE: numpy mean of |Ya - Yb|.
"""
import json
import os
import sys

import numpy as np
import scipy
import skimage
from PIL import Image
from scipy import ndimage
from skimage.metrics import peak_signal_noise_ratio, structural_similarity

HERE = os.path.dirname(os.path.abspath(__file__))
FIX = os.path.join(HERE, "metrics")
SRC = "/usr/share/doc/opencv-doc/examples/data"

# (name, file a, file b, what b is)
PAIRS = [
    ("identical", "graf1_crop.png", "graf1_crop.png", "same file twice"),
    ("graf1_blur", "graf1_crop.png", "graf1_blur.png", "Gaussian blur sigma 1.2 per channel"),
    ("graf1_shift", "graf1_crop.png", "graf1_shift.png", "same scene cropped 2 px right, 1 px down"),
    ("graf1_noise", "graf1_crop.png", "graf1_noise.png", "additive Gaussian noise sd 8, seed 7"),
    ("baboon_jpeg", "baboon_crop.png", "baboon_jpeg30.png", "JPEG quality 30 round trip (Pillow)"),
    ("graf_gray_view", "graf1_gray.png", "graf3_gray.png", "8-bit gray, other viewpoint"),
]

W, H = 192, 160  # fixture size (small on purpose)


def regen():
    os.makedirs(FIX, exist_ok=True)
    g1 = np.asarray(Image.open(os.path.join(SRC, "graf1.png")).convert("RGB"))
    x0, y0 = 300, 240
    crop = g1[y0:y0 + H, x0:x0 + W]
    save(crop, "graf1_crop.png")
    blur = np.stack([ndimage.gaussian_filter(crop[..., c].astype(np.float64), 1.2, mode="reflect")
                     for c in range(3)], axis=-1)
    save(np.clip(np.rint(blur), 0, 255).astype(np.uint8), "graf1_blur.png")
    save(g1[y0 + 1:y0 + 1 + H, x0 + 2:x0 + 2 + W], "graf1_shift.png")
    rng = np.random.default_rng(7)
    noisy = crop.astype(np.float64) + rng.normal(0.0, 8.0, crop.shape)
    save(np.clip(np.rint(noisy), 0, 255).astype(np.uint8), "graf1_noise.png")

    bab = np.asarray(Image.open(os.path.join(SRC, "baboon.jpg")).convert("RGB"))
    bcrop = bab[200:200 + H, 160:160 + W]
    save(bcrop, "baboon_crop.png")
    import io
    buf = io.BytesIO()
    Image.fromarray(bcrop).save(buf, format="JPEG", quality=30)
    buf.seek(0)
    save(np.asarray(Image.open(buf).convert("RGB")), "baboon_jpeg30.png")

    for src, dst in (("graf1.png", "graf1_gray.png"), ("graf3.png", "graf3_gray.png")):
        im = Image.open(os.path.join(SRC, src)).convert("L")
        a = np.asarray(im)[y0:y0 + H, x0:x0 + W]
        Image.fromarray(a, mode="L").save(os.path.join(FIX, dst), optimize=True)


def save(rgb, name):
    Image.fromarray(np.ascontiguousarray(rgb), mode="RGB").save(os.path.join(FIX, name), optimize=True)


def luma(path):
    a = np.asarray(Image.open(path))
    if a.ndim == 2:
        return a.astype(np.float64)
    a = a[..., :3].astype(np.float64)  # RGB order from Pillow
    return 0.299 * a[..., 0] + 0.587 * a[..., 1] + 0.114 * a[..., 2]


def main():
    if "--regen" in sys.argv[1:]:
        regen()
    rows = []
    for name, fa, fb, what in PAIRS:
        ya, yb = luma(os.path.join(FIX, fa)), luma(os.path.join(FIX, fb))
        ssim = structural_similarity(ya, yb, gaussian_weights=True, sigma=1.5,
                                     use_sample_covariance=False, data_range=255)
        if np.array_equal(ya, yb):
            psnr = None  # +Inf; JSON has no infinity
        else:
            psnr = float(peak_signal_noise_ratio(ya, yb, data_range=255))
        rows.append({"name": name, "a": fa, "b": fb, "derivation": what,
                     "width": int(ya.shape[1]), "height": int(ya.shape[0]),
                     "ssim": float(ssim), "psnr_db": psnr,
                     "mae": float(np.mean(np.abs(ya - yb)))})
    out = {
        "generator": "bench/testdata/reference_metrics.py",
        "scikit_image": skimage.__version__, "numpy": np.__version__, "scipy": scipy.__version__,
        "luma": "0.299 R + 0.587 G + 0.114 B, float64",
        "ssim_call": "structural_similarity(gaussian_weights=True, sigma=1.5, "
                     "use_sample_covariance=False, data_range=255)",
        "psnr_call": "peak_signal_noise_ratio(data_range=255); null means +Inf (identical)",
        "pairs": rows,
    }
    with open(os.path.join(HERE, "reference_metrics.json"), "w") as f:
        json.dump(out, f, indent=1)
        f.write("\n")
    for r in rows:
        print(f"{r['name']:16s} ssim={r['ssim']:.6f} psnr={r['psnr_db']} mae={r['mae']:.4f}")


if __name__ == "__main__":
    main()
