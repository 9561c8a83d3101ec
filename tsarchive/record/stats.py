"""Per-channel error figures of a verification record, from the original and its reconstruction.

Definitions (stated in every record):

* error ``e = x' - x`` per sample, in the channel's unit, computed in float64 (``x`` the original,
  ``x'`` the reconstruction); samples missing or non-finite in either are left out of the figures
  (verify itself checks them bit for bit);
* RMS error ``sqrt(mean(e^2))``;
* SNR in dB on the mean-removed original: ``10 log10(sum (x - mean x)^2 / sum e^2)``.  The mean is
  removed so that a constant offset (a temperature near 25 °C) does not inflate the figure; the
  SNR is undefined (None) when there is no error at all or the original is constant.

The worst error of a record comes from ``verify`` (exact, :mod:`tsarchive.exact`); these figures
add the size of the typical error and where the worst one sits.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

SNR_DEFINITION = ("SNR = 10 log10(sum (x - mean x)^2 / sum (x' - x)^2) in dB, on the mean-removed original x "
                  "and the reconstruction x'; undefined when there is no error or x is constant")
RMS_DEFINITION = "RMS error = sqrt(mean((x' - x)^2)), in the channel's unit"
SEGMENT = 64  # samples shown around the worst error


@dataclass(frozen=True)
class ErrorFigures:
    n_compared: int        # samples finite and present in both
    rms_error: float
    snr_db: float | None
    worst_index: int       # sample number of the largest |e| (-1 when nothing was compared or no sample differs)
    errors: np.ndarray     # e over the compared samples (for the histogram)


def _plain(a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """float64 values and the mask of samples present (not masked) in ``a``."""
    present = ~np.ma.getmaskarray(a)
    return np.asarray(np.ma.getdata(a), dtype=np.float64), present


def error_figures(x: np.ndarray, xh: np.ndarray) -> ErrorFigures:
    """RMS error and SNR of ``xh`` against ``x`` (same length); see the module docstring."""
    xf, px = _plain(x)
    hf, ph = _plain(xh)
    keep = px & ph & np.isfinite(xf) & np.isfinite(hf)
    e_all = np.where(keep, hf - xf, 0.0)
    e, xk = e_all[keep], xf[keep]
    n = int(keep.sum())
    if n == 0:
        return ErrorFigures(0, math.nan, None, -1, e)
    noise = float(np.dot(e, e))
    centred = xk - xk.mean()
    signal = float(np.dot(centred, centred))
    snr = 10.0 * math.log10(signal / noise) if noise > 0 and signal > 0 else None
    worst = int(np.argmax(np.abs(e_all))) if noise > 0 else -1
    return ErrorFigures(n, math.sqrt(noise / n), snr, worst, e)


def segment(n: int, at: int, width: int = SEGMENT) -> tuple[int, int]:
    """Sample range ``[a, b)`` of ``width`` samples around ``at``, inside ``0..n``."""
    a = max(0, min(at - width // 2, n - width))
    return a, min(n, a + width)
