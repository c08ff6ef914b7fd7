"""Generate the invented demo data sets that ship with bendwise.

Every number written here is simulated. The scenarios (an optical sensor, an
oven process trial, a dose-response assay, a load-strain test) are made up for
learning the tool; none comes from a real lab or a real measurement.

Usage (from anywhere):

    python datasets/make_datasets.py            # rewrite the CSVs next to this file
    python datasets/make_datasets.py --out DIR  # write them into DIR instead

The output is deterministic: the same numpy version gives byte-identical files
on every run. Each file is written to a temporary file in the target folder and
then moved into place with ``os.replace``, so a reader never sees half a file.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
from collections.abc import Callable, Sequence
from pathlib import Path

import numpy as np

RNG_SEED = 20240917

HERE = Path(__file__).resolve().parent

Row = Sequence[str]


def _rng(stream: int) -> np.random.Generator:
    """One independent random stream per file, so editing one file leaves the others alone."""
    return np.random.default_rng([RNG_SEED, stream])


# ---------------------------------------------------------------------------
# (a) sensor_calibration.csv -- the main demo
# ---------------------------------------------------------------------------
SENSOR_LEVELS_MG_L = (0.0, 2.5, 5.0, 10.0, 20.0, 40.0, 60.0, 80.0)
SENSOR_DAYS = ("day1", "day2", "day3")
SENSOR_DAY_TEMP_C = {"day1": 22.4, "day2": 23.6, "day3": 22.9}
SENSOR_BLANK_MV = 14.0
SENSOR_SLOPE_MV_PER_MG_L = 9.6
SENSOR_BEND_MV_PER_MG2_L2 = 0.036  # the response flattens towards the top
SENSOR_TEMP_MV_PER_C = 1.8  # small positive drift with instrument temperature
SENSOR_TEMP_REF_C = 23.0
SENSOR_CV = 0.022  # spread grows with the level ...
SENSOR_FLOOR_MV = 0.5  # ... on top of a small constant floor


def sensor_rows(stream: int = 1, day_temps: dict[str, float] | None = None) -> list[Row]:
    rng = _rng(stream)
    rows: list[Row] = []
    day_temps = SENSOR_DAY_TEMP_C if day_temps is None else day_temps
    for day in day_temps:
        for i, conc in enumerate(SENSOR_LEVELS_MG_L, start=1):
            temp = day_temps[day] + rng.uniform(-1.3, 1.3)
            temp = round(temp, 1)
            mean = (
                SENSOR_BLANK_MV
                + SENSOR_SLOPE_MV_PER_MG_L * conc
                - SENSOR_BEND_MV_PER_MG2_L2 * conc**2
            )
            sd = np.hypot(SENSOR_CV * mean, SENSOR_FLOOR_MV)
            signal = mean + SENSOR_TEMP_MV_PER_C * (temp - SENSOR_TEMP_REF_C) + rng.normal(0.0, sd)
            rows.append((f"STD{i:02d}", f"{conc:.1f}", f"{signal:.2f}", day, f"{temp:.1f}"))
    return rows


# (a2) sensor_calibration_run2.csv -- the same sensor and standards, three later days: an
# independent run of the same truth, for confirming a model chosen on the first run
SENSOR_RUN2_DAY_TEMP_C = {"day4": 23.1, "day5": 22.2, "day6": 23.8}


def sensor_run2_rows() -> list[Row]:
    return sensor_rows(stream=5, day_temps=SENSOR_RUN2_DAY_TEMP_C)


# ---------------------------------------------------------------------------
# (b) process_trial.csv -- linear in the setpoint, shifted by the crew on shift
# ---------------------------------------------------------------------------
TRIAL_SETPOINTS_C = (150, 160, 170, 180, 190, 200)
# Which shift ran each of the four replicates: deliberately unbalanced.
TRIAL_SHIFT_PLAN = {
    150: ("night", "night", "night", "night"),
    160: ("late", "late", "late", "late"),
    170: ("early", "early", "night", "early"),
    180: ("night", "late", "night", "night"),
    190: ("late", "late", "early", "late"),
    200: ("early", "early", "early", "early"),
}
TRIAL_SHIFT_EFFECT_PCT = {"early": 0.0, "late": 2.2, "night": -2.8}
TRIAL_INTERCEPT_PCT = 61.0
TRIAL_SLOPE_PCT_PER_C = 0.12
TRIAL_SD_PCT = 0.4


def trial_rows() -> list[Row]:
    rng = _rng(2)
    rows: list[Row] = []
    run = 0
    for sp in TRIAL_SETPOINTS_C:
        for shift in TRIAL_SHIFT_PLAN[sp]:
            run += 1
            y = (
                TRIAL_INTERCEPT_PCT
                + TRIAL_SLOPE_PCT_PER_C * (sp - TRIAL_SETPOINTS_C[0])
                + TRIAL_SHIFT_EFFECT_PCT[shift]
                + rng.normal(0.0, TRIAL_SD_PCT)
            )
            rows.append((f"R{run:02d}", f"{sp:d}", f"{y:.2f}", shift))
    return rows


# ---------------------------------------------------------------------------
# (c) straight_line.csv -- a clean straight line, constant spread
# ---------------------------------------------------------------------------
LINE_DOSES_UG = (0.0, 5.0, 10.0, 20.0, 30.0, 40.0)
LINE_REPLICATES = 3
LINE_INTERCEPT_AU = 0.052
LINE_SLOPE_AU_PER_UG = 0.0185
LINE_SD_AU = 0.012


def line_rows() -> list[Row]:
    rng = _rng(3)
    rows: list[Row] = []
    for dose in LINE_DOSES_UG:
        for _ in range(LINE_REPLICATES):
            y = LINE_INTERCEPT_AU + LINE_SLOPE_AU_PER_UG * dose + rng.normal(0.0, LINE_SD_AU)
            rows.append((f"{dose:.1f}", f"{y:.3f}"))
    return rows


# ---------------------------------------------------------------------------
# (d) no_replicates.csv -- every load applied once, mild curvature
# ---------------------------------------------------------------------------
NOREP_N = 18
NOREP_LOAD_RANGE_KN = (0.5, 12.0)
NOREP_SLOPE_UM_PER_KN = 41.0
NOREP_CURVE_UM_PER_KN2 = 0.85
NOREP_OFFSET_UM = 3.0
NOREP_SD_UM = 2.5


def norep_rows() -> list[Row]:
    rng = _rng(4)
    lo, hi = NOREP_LOAD_RANGE_KN
    # An even grid jittered a little, kept distinct after rounding to 0.01 kN.
    grid = np.linspace(lo, hi, NOREP_N)
    step = grid[1] - grid[0]
    loads = np.round(grid + rng.uniform(-0.3 * step, 0.3 * step, NOREP_N), 2)
    rows: list[Row] = []
    for load in loads:
        y = (
            NOREP_OFFSET_UM
            + NOREP_SLOPE_UM_PER_KN * load
            + NOREP_CURVE_UM_PER_KN2 * load**2
            + rng.normal(0.0, NOREP_SD_UM)
        )
        rows.append((f"{load:.2f}", f"{y:.1f}"))
    return rows


# ---------------------------------------------------------------------------
# (e) multi_day_calibration.csv -- a straight line measured on five days, each day shifted
# ---------------------------------------------------------------------------
MULTI_DAYS = ("mon", "tue", "wed", "thu", "fri")
MULTI_LEVELS_UG_L = (0.0, 1.0, 2.0, 5.0, 10.0, 20.0)
MULTI_REPLICATES = 3
MULTI_BLANK_AU = 0.012
MULTI_SLOPE_AU_PER_UG_L = 0.0485
MULTI_DAY_SD_AU = 0.025  # each day's baseline shifts by a normal offset with this SD ...
MULTI_SD_AU = 0.006  # ... on top of the scatter of repeats within a day


def multi_day_rows() -> list[Row]:
    rng = _rng(6)
    offsets = rng.normal(0.0, MULTI_DAY_SD_AU, len(MULTI_DAYS))
    rows: list[Row] = []
    for day, offset in zip(MULTI_DAYS, offsets, strict=True):
        for conc in MULTI_LEVELS_UG_L:
            for rep in range(1, MULTI_REPLICATES + 1):
                y = MULTI_BLANK_AU + MULTI_SLOPE_AU_PER_UG_L * conc + offset + rng.normal(0.0, MULTI_SD_AU)
                rows.append((day, f"{conc:.1f}", str(rep), f"{y:.4f}"))
    return rows


# ---------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------
FILES: dict[str, tuple[tuple[str, ...], Callable[[], list[Row]]]] = {
    "sensor_calibration.csv": (
        ("standard_id", "conc_mg_l", "signal_mv", "run_day", "temp_c"),
        sensor_rows,
    ),
    "sensor_calibration_run2.csv": (
        ("standard_id", "conc_mg_l", "signal_mv", "run_day", "temp_c"),
        sensor_run2_rows,
    ),
    "process_trial.csv": (("run_id", "setpoint_c", "yield_pct", "work_shift"), trial_rows),
    "straight_line.csv": (("dose_ug", "response_au"), line_rows),
    "no_replicates.csv": (("load_kn", "strain_um"), norep_rows),
    "multi_day_calibration.csv": (("day", "conc_ug_l", "repeat", "absorbance"), multi_day_rows),
}


def _render(header: Sequence[str], rows: list[Row]) -> bytes:
    lines = [",".join(header)] + [",".join(r) for r in rows]
    return ("\n".join(lines) + "\n").encode("ascii")


def write_atomic(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` via a temp file in the same folder and ``os.replace``."""
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o644)  # mkstemp creates 0600; these are ordinary shared files
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Write the invented bendwise demo CSVs.")
    parser.add_argument(
        "--out",
        type=Path,
        default=HERE,
        help="folder to write into (default: the folder holding this script)",
    )
    args = parser.parse_args(argv)
    out: Path = args.out
    out.mkdir(parents=True, exist_ok=True)
    for name, (header, make) in FILES.items():
        write_atomic(out / name, _render(header, make()))
    return 0


if __name__ == "__main__":
    sys.exit(main())
