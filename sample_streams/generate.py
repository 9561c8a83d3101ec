"""Make the demo recordings in this folder (deterministic: fixed seeds, no clock, no network).

Invented scenario: three bench logs from the fictional *Brackwater Lane test
lab*, qualifying an equally fictional controller board ("unit 7").

* ``climate_soak.csv``  -- a 36 h damp-heat soak (85 degC / 85 %RH) in a
  climate chamber, logged every 2 s with two decimals and an ISO 8601 time
  column: chamber, board and room temperatures plus chamber humidity, with a
  door opening half way through.
* ``shaker_run.npy``    -- a 3-axis accelerometer on the shaker fixture at
  2000 Hz for 60 s (float32, m/s^2, columns x, y, z): a sine sweep, an 11 ms
  half-sine shock at 30 s, then broadband random vibration.  A ``.npy``
  file has no time axis, so read it with a rate of 2000 Hz.
* ``psu_ripple.parquet`` -- output voltage and load current of the bench
  supply at 10 kHz for 20 s (100 Hz ripple and harmonics, load steps with
  ringing), logged at 0.1 mV / 0.1 mA; units in the Parquet field metadata.

Usage: ``python sample_streams/generate.py [OUTDIR]`` (default: this folder).
Only numpy and pyarrow are needed.

The files are the same bytes on every machine (with the same numpy and
pyarrow): no CPU-dispatched elementary function or FFT is used.  sin, cos and
exp are the polynomials below and the vibration is shaped by recursive
filters run in plain Python floats, so every value comes from correctly
rounded +, -, *, /, sqrt and rint.  numpy's ``Generator.standard_normal``
draws the noise (its stream is stable across machines for a numpy version).
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np

START_SOAK = np.datetime64("2031-04-02T06:00:00", "s")
START_PSU = np.datetime64("2031-05-14T13:20:00", "ns")

SOAK_HOURS = 36.0
SOAK_STEP_S = 2
SHAKER_RATE = 2000
SHAKER_SECONDS = 60
PSU_RATE = 10_000
PSU_SECONDS = 20


# ----------------------------------------------------------- machine-independent elementary functions
# np.sin, np.exp, np.log, hypot/arctan2 and the FFT dispatch to CPU-specific SIMD or libm code whose last
# bit differs between machines.  Everything below is built from +, -, *, / and rint only (one numpy ufunc
# call per step), each a correctly rounded IEEE-754 operation (IEEE 754-2008, clause 5.4), so the same
# float64 inputs give the same bits on every conforming machine.  Accuracy is a few ulp, which the
# invented data does not need; repeatability is the point.
_HALF_PI_HI = 1.5707963267341256      # pi/2 split (Cody & Waite 1980): 33 leading bits, k * _HI is exact
_HALF_PI_LO = 6.077100506506192e-11   # pi/2 - _HALF_PI_HI
_LN2_HI = 0.6931471804855391          # ln 2 split the same way
_LN2_LO = 7.440617110012397e-11
_INV_FACT = [1 / math.factorial(k) for k in range(20)]   # int / int: Python rounds the exact quotient once


def _horner(r: np.ndarray, coefs: list[float]) -> np.ndarray:
    acc = np.full_like(r, coefs[-1])
    for c in reversed(coefs[:-1]):
        acc = acc * r
        acc = acc + c
    return acc


def _sin_cos(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """sin(x) and cos(x): x = k*pi/2 + r with |r| <= pi/4, Taylor polynomials of r*r (degree 19 / 18)."""
    x = np.asarray(x, dtype=np.float64)
    k = np.rint(x * (2.0 / math.pi))
    r = x - k * _HALF_PI_HI
    r = r - k * _HALF_PI_LO
    r2 = r * r
    s = r * _horner(r2, [-c if i % 2 else c for i, c in enumerate(_INV_FACT[1::2])])
    c = _horner(r2, [-c if i % 2 else c for i, c in enumerate(_INV_FACT[0::2])])
    quad = np.remainder(k, 4.0)                       # exact for integer-valued k
    sin = np.select([quad == 0, quad == 1, quad == 2], [s, c, -s], -c)
    cos = np.select([quad == 0, quad == 1, quad == 2], [c, -s, -c], s)
    return sin, cos


def _sin(x) -> np.ndarray:
    return _sin_cos(x)[0]


def _cos(x) -> np.ndarray:
    return _sin_cos(x)[1]


def _exp(x) -> np.ndarray:
    """exp(x): x = k*ln2 + r with |r| <= ln2/2, Taylor polynomial of degree 16, times 2**k (exact)."""
    x = np.clip(np.asarray(x, dtype=np.float64), -700.0, 700.0)   # results stay normal numbers
    k = np.rint(x / 0.6931471805599453)
    r = x - k * _LN2_HI
    r = r - k * _LN2_LO
    return np.ldexp(_horner(r, _INV_FACT[:17]), k.astype(np.int64))


def _first_order(x: np.ndarray, dt: float, tau: float, y0: float) -> np.ndarray:
    """Discrete first-order lag y' = (x - y) / tau (exact for piecewise-constant input)."""
    a = float(_exp(-dt / tau))
    y = np.empty_like(x)
    prev = y0
    for i, v in enumerate(x.tolist()):
        prev = a * prev + (1.0 - a) * v
        y[i] = prev
    return y


def _interp(x: np.ndarray, xp: list[float], fp: list[float]) -> np.ndarray:
    """Piecewise-linear interpolation (like np.interp, inside [xp[0], xp[-1]]) from single IEEE operations."""
    xp_a, fp_a = np.asarray(xp, dtype=np.float64), np.asarray(fp, dtype=np.float64)
    i = np.clip(np.searchsorted(xp_a, x, side="right") - 1, 0, len(xp_a) - 2)
    slope = (fp_a[i + 1] - fp_a[i]) / (xp_a[i + 1] - xp_a[i])
    return slope * (x - xp_a[i]) + fp_a[i]


def climate_soak(rng: np.random.Generator) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Times (datetime64[s]) and the four logged channels of the soak."""
    n = int(SOAK_HOURS * 3600 / SOAK_STEP_S)
    t_h = np.arange(n) * SOAK_STEP_S / 3600.0
    # Set-points: 1 h at room, 2 h ramp to 85 degC, dwell to 33 h, 2 h ramp down.
    temp_sp = _interp(t_h, [0, 1, 3, 33, 35, 36], [23, 23, 85, 85, 23, 23])
    rh_sp = _interp(t_h, [0, 3, 4, 32.5, 33.5, 36], [45, 45, 85, 85, 40, 40])
    # Door opened for 90 s at 20 h 10 min: air exchange with the room.
    door = ((t_h >= 20 + 10 / 60) & (t_h < 20 + 11.5 / 60)).astype(float)
    chamber = _first_order(temp_sp - 38.0 * door, SOAK_STEP_S, 240.0, 23.0)
    chamber += 0.15 * _sin(2 * np.pi * t_h * 60 / 7.3) + 0.03 * rng.standard_normal(n)
    rh = _first_order(rh_sp - 40.0 * door, SOAK_STEP_S, 420.0, 45.0)
    rh += 0.5 * _sin(2 * np.pi * t_h * 60 / 11.0 + 0.4) + 0.2 * rng.standard_normal(n)
    # The board is powered 45 min of every hour during the dwell: 1.8 K self-heating.
    powered = ((t_h >= 3.5) & (t_h < 33) & ((t_h * 60) % 60 < 45)).astype(float)
    board = _first_order(chamber + 1.8 * powered, SOAK_STEP_S, 1100.0, 23.0) + 0.04 * rng.standard_normal(n)
    # Room: daily swing plus an air-conditioning cycle of 25 min.
    room = (22.0 + 1.4 * _sin(2 * np.pi * (t_h - 9.0) / 24.0)
            + 0.3 * (((t_h * 60) % 25) / 25 - 0.5) + 0.05 * rng.standard_normal(n))
    times = START_SOAK + np.arange(n).astype("timedelta64[s]") * SOAK_STEP_S
    return times, {"chamber_temp [degC]": chamber, "board_temp [degC]": board,
                   "room_temp [degC]": room, "chamber_rh [%RH]": np.clip(rh, 0.0, 100.0)}


MOUNTS = [(240.0, 12.0, 0.08), (310.0, 9.0, 0.05), (180.0, 10.0, 1.0)]   # (f_n Hz, Q, coupling) per axis


def _transmissibility(f: np.ndarray, fn: float, q: float) -> tuple[np.ndarray, np.ndarray]:
    """Real and imaginary part of H = (1 + i r/Q) / (1 - r^2 + i r/Q), r = f/fn: a base-excited
    single-degree-of-freedom mount, in real arithmetic (no complex division, hypot or arctan2)."""
    c = (f / fn) / q
    d = 1.0 - (f / fn) ** 2
    den = d * d + c * c
    return (d + c * c) / den, (c * d - c) / den


def _biquad(x: list[float], b: tuple[float, float, float], a: tuple[float, float]) -> list[float]:
    """Direct form I recursion y[n] = b0 x[n] + b1 x[n-1] + b2 x[n-2] - a1 y[n-1] - a2 y[n-2] in Python floats."""
    b0, b1, b2 = b
    a1, a2 = a
    x1 = x2 = y1 = y2 = 0.0
    out = []
    for v in x:
        y = b0 * v + b1 * x1 + b2 * x2 - a1 * y1 - a2 * y2
        out.append(y)
        x2, x1, y2, y1 = x1, v, y1, y
    return out


def _bilinear(num: tuple[float, float, float], den: tuple[float, float, float], f0: float, fs: float):
    """Digital biquad of the analog H(s) = (n2 s^2 + n1 s + n0) / (d2 s^2 + d1 s + d0), matched at f0
    (bilinear transform with frequency pre-warping, s = c (1 - z^-1) / (1 + z^-1))."""
    w = 2 * math.pi * f0
    sn, cs = _sin_cos(np.array([w / (2 * fs)]))
    c = w * float(cs[0]) / float(sn[0])
    (n2, n1, n0), (d2, d1, d0) = num, den
    B = (n2 * c * c + n1 * c + n0, 2 * (n0 - n2 * c * c), n2 * c * c - n1 * c + n0)
    A = (d2 * c * c + d1 * c + d0, 2 * (d0 - d2 * c * c), d2 * c * c - d1 * c + d0)
    return tuple(v / A[0] for v in B), (A[1] / A[0], A[2] / A[0])


def _random_vibration(noise: np.ndarray, fs: float, fn: float, q: float) -> np.ndarray:
    """White noise band-limited to 20-800 Hz (2nd-order Butterworth high- and low-pass) through the mount."""
    wl, wh, wn = 2 * math.pi * 20.0, 2 * math.pi * 800.0, 2 * math.pi * fn
    r2 = 2.0 ** 0.5
    x = noise.tolist()
    x = _biquad(x, *_bilinear((1.0, 0.0, 0.0), (1.0, r2 * wl, wl * wl), 20.0, fs))
    x = _biquad(x, *_bilinear((0.0, 0.0, wh * wh), (1.0, r2 * wh, wh * wh), 800.0, fs))
    x = _biquad(x, *_bilinear((0.0, wn / q, wn * wn), (1.0, wn / q, wn * wn), fn, fs))
    return np.array(x)


def shaker_run(rng: np.random.Generator) -> np.ndarray:
    """(n, 3) float32 acceleration in m/s^2 (x, y, z), z is the drive axis."""
    fs, n = SHAKER_RATE, SHAKER_RATE * SHAKER_SECONDS
    t = np.arange(n) / fs
    g = 9.80665
    # 0-28 s: log sine sweep 10 -> 500 Hz at 2 g (drive signal, before the fixture).
    t_sw = 28.0
    k = 3.912023005428146 / t_sw                      # ln(500 / 10), written out: no libm call
    in_sweep = t < t_sw
    grow = _exp(k * np.minimum(t, t_sw))
    f_inst = np.where(in_sweep, 10 * grow, 0.0)
    sin_ph, cos_ph = _sin_cos(2 * np.pi * 10 * (grow - 1) / k)
    drive = np.zeros((n, 3))
    for axis, (fn, q, couple) in enumerate(MOUNTS):
        re, im = _transmissibility(np.maximum(f_inst, 1.0), fn, q)
        # |H| sin(phase + arg H) = Im(H e^(i phase)) = Re H sin(phase) + Im H cos(phase)
        drive[:, axis] = np.where(in_sweep, couple * 2 * g * (re * sin_ph + im * cos_ph), 0.0)
    # 32-60 s: random vibration, flat 20-800 Hz, shaped by the same mounts.
    seg = (t >= 32.0)
    m = int(seg.sum())
    for axis, (fn, q, couple) in enumerate(MOUNTS):
        x = _random_vibration(rng.standard_normal(m), fs, fn, q)
        rms = math.sqrt(math.fsum((x * x).tolist()) / m)    # fsum: exactly rounded, order-free
        drive[seg, axis] = couple * 1.5 * g * x / rms
    # 30 s: 50 g half-sine shock of 11 ms on z, with fixture ringing at 180 Hz on every axis.
    t_s = t - 30.0
    pulse = np.where((t_s >= 0) & (t_s < 0.011), _sin(np.pi * np.clip(t_s, 0, 0.011) / 0.011), 0.0)
    ring = np.where(t_s >= 0.011, _exp(-np.maximum(t_s - 0.011, 0) / 0.035)
                    * _sin(2 * np.pi * 180.0 * (t_s - 0.011)), 0.0)
    for axis, couple in enumerate([0.12, 0.07, 1.0]):
        drive[:, axis] += couple * 50 * g * (pulse + 0.35 * ring)
    # Sensor: bias, 50 Hz pickup, white noise.
    drive += np.array([0.04, -0.03, 0.02]) + 0.02 * _sin(2 * np.pi * 50 * t)[:, None]
    drive += 0.05 * rng.standard_normal((n, 3))
    return drive.astype(np.float32)


def psu_ripple(rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Times (int64 ns since the epoch), output voltage [V] and load current [A]."""
    fs, n = PSU_RATE, PSU_RATE * PSU_SECONDS
    t = np.arange(n) / fs
    # Load schedule: 0.5 A, steps, a pulse and a ramp; edges slew over 50 us.
    load = _interp(t, [0, 4, 4.00005, 8, 8.00005, 12, 12.00005, 14, 14.00005, 15, 19, 19.00005, 20],
                     [0.5, 0.5, 2.0, 2.0, 0.5, 0.5, 3.0, 3.0, 0.5, 0.5, 2.5, 0.5, 0.5])
    ripple = (0.008 * _sin(2 * np.pi * 100 * t) + 0.003 * _sin(2 * np.pi * 200 * t + 0.7)
              + 0.0012 * _sin(2 * np.pi * 300 * t + 1.9))
    v = 12.0 - 0.02 * load + ripple * (0.6 + 0.4 * load / 3.0)
    v += 0.002 * _sin(2 * np.pi * 1730 * t + 0.3)  # regulator ripple, aliased
    for t_step, d_i in [(4, 1.5), (8, -1.5), (12, 2.5), (14, -2.5), (19, -2.0)]:
        tau = t - t_step
        v -= np.where(tau >= 0, 0.04 * d_i * _exp(-np.maximum(tau, 0) / 8e-4)
                      * _cos(2 * np.pi * 1200 * tau), 0.0)
    v += 0.0015 * rng.standard_normal(n)
    i = load * (1 + 0.004 * _sin(2 * np.pi * 100 * t)) + 0.002 * rng.standard_normal(n)
    times = START_PSU.astype(np.int64) + np.arange(n, dtype=np.int64) * (10**9 // fs)
    return times, np.round(v, 4), np.round(i, 4)


def _write_soak_csv(path: Path, times: np.ndarray, cols: dict[str, np.ndarray]) -> None:
    stamps = np.datetime_as_string(times, unit="s").tolist()
    fmt = ",".join(["%sZ"] + ["%.2f"] * len(cols)) + "\n"
    rows = zip(stamps, *(c.tolist() for c in cols.values()))
    with open(path, "w", encoding="ascii", newline="\n") as f:
        f.write(",".join(["time", *cols]) + "\n")
        f.write("".join(fmt % row for row in rows))


def _write_psu_parquet(path: Path, times: np.ndarray, v: np.ndarray, i: np.ndarray) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    schema = pa.schema([pa.field("time", pa.timestamp("ns", tz="UTC")),
                        pa.field("v_out", pa.float64(), metadata={b"unit": b"V"}),
                        pa.field("i_load", pa.float64(), metadata={b"unit": b"A"})])
    table = pa.Table.from_arrays([pa.array(times, type=pa.timestamp("ns", tz="UTC")), pa.array(v), pa.array(i)],
                                 schema=schema)
    pq.write_table(table, path, compression="zstd")


def generate(outdir: Path) -> list[Path]:
    """Write the three demo recordings into ``outdir``; return their paths."""
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    soak = outdir / "climate_soak.csv"
    _write_soak_csv(soak, *climate_soak(np.random.default_rng(20310402)))
    shaker = outdir / "shaker_run.npy"
    with open(shaker, "wb") as f:
        np.save(f, shaker_run(np.random.default_rng(60_2000)), allow_pickle=False)
    psu = outdir / "psu_ripple.parquet"
    _write_psu_parquet(psu, *psu_ripple(np.random.default_rng(10_000_20)))
    return [soak, shaker, psu]


if __name__ == "__main__":
    target = Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).resolve().parent
    for p in generate(target):
        print(f"{p}  {p.stat().st_size / 1e6:.2f} MB")
