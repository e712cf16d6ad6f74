"""Write the demonstration data folder that ``make demo`` turns into a site.

The scenario is invented: the laboratory and field team of a small regional
water utility keep their calibration curves, instrument checks and plant
records as CSV files with TOML sidecars. Every number comes from a seeded
random generator, so running this script again rewrites every CSV, sidecar and
``site.toml`` byte for byte::

    python example_project/generate.py        # from the repository root, or
    python generate.py                        # from inside this folder

Only the standard library and numpy are used. Each dataset draws from its own
generator (seeded from ``SEED`` and the dataset's name), so adding or changing
one dataset leaves the numbers of the others untouched.
"""

from __future__ import annotations

import zlib
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import numpy.typing as npt

HERE = Path(__file__).resolve().parent
SEED = 20240629

FloatArray = npt.NDArray[np.float64]
# One CSV column: header, values, decimals (None for a text column).
Column = tuple[str, Sequence[str] | Sequence[float] | FloatArray, int | None]


def rng_for(name: str) -> np.random.Generator:
    """A generator of its own for each dataset, stable across runs and platforms."""
    return np.random.default_rng([SEED, zlib.crc32(name.encode("utf-8"))])


def fmt(value: object, decimals: int | None, decimal_mark: str = ".") -> str:
    """Format one cell the way an instrument prints it: a fixed number of decimals."""
    if decimals is None:
        return str(value)
    if not isinstance(value, int | float | np.floating):
        raise TypeError(f"expected a number, got {value!r}")
    text = f"{float(value):.{decimals}f}"
    if text.startswith("-") and float(text) == 0.0:
        text = text[1:]  # never "-0.00"
    return text.replace(".", decimal_mark)


def write_csv(relpath: str, columns: Sequence[Column], delimiter: str = ",", decimal_mark: str = ".") -> None:
    """Write a CSV with LF line endings; cells never contain the delimiter, so no quoting."""
    n = len(columns[0][1])
    if any(len(values) != n for _, values, _ in columns):
        raise ValueError(f"{relpath}: columns differ in length")
    lines = [delimiter.join(name for name, _, _ in columns)]
    for i in range(n):
        cells = [fmt(values[i], decimals, decimal_mark) for _, values, decimals in columns]
        if any(delimiter in cell for cell in cells):
            raise ValueError(f"{relpath}: a cell contains the delimiter {delimiter!r}")
        lines.append(delimiter.join(cells))
    write_text(relpath, "\n".join(lines) + "\n")


def write_text(relpath: str, text: str) -> None:
    path = HERE / relpath
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8", newline="\n")


def replicate(levels: Sequence[float], times: int) -> FloatArray:
    """Each level repeated ``times`` in a row (standards read in triplicate, say)."""
    return np.repeat(np.asarray(levels, dtype=np.float64), times)


# --------------------------------------------------------------------------- site


SITE_TOML = '''\
title = "Water laboratory: calibration, instrument checks and plant records"
description = """
Regression reports for the laboratory and field team of a small regional water
utility. The folder holds three kinds of work:

- **calibration** — the laboratory's calibration curves for nutrients and
  disinfectant (absorbance against standard concentration);
- **field** — field kits and online sensors checked against the laboratory or a
  reference instrument on the same samples;
- **operations** — plant records: pumping energy, chlorine decay in a bottle
  test, dosing-pump and filter backwash checks.

*All numbers are invented for demonstration; they were produced by
`generate.py` in the data folder and describe no real utility, place or
instrument.*
"""
theme = "default"
offer_source = true   # offer each original CSV as a download on its page
ignore = ["*.draft.csv"]   # work in progress stays in the folder but out of the site

[defaults]            # applied to every dataset unless its sidecar says otherwise
level = 0.95
'''


# -------------------------------------------------------------------- calibration


def nitrate_uv() -> None:
    rng = rng_for("calibration/nitrate_uv")
    nitrate = replicate([0.0, 0.5, 1.0, 2.0, 3.0, 5.0], 3)
    absorbance = 0.006 + 0.195 * nitrate + rng.normal(0.0, 0.004, nitrate.size)
    write_csv("calibration/nitrate_uv.csv", [("nitrate", nitrate, 2), ("absorbance", absorbance, 3)])
    write_text(
        "calibration/nitrate_uv.toml",
        '''\
title = "Nitrate by UV absorbance at 220 nm"
description = """
Six nitrate standards, each read three times in a 10 mm quartz cell against a
reagent blank. The line converts a sample's absorbance into nitrate-nitrogen.

Three river samples were read twice each; their mean absorbances are listed
under `calibrate`, and the page gives each one's nitrate with an interval. As a
calibration, the page reads every standard back from the line and tests whether
a straight line is enough.
"""
tags = ["calibration", "nutrients"]
purpose = "calibration"
model = "absorbance ~ nitrate"
units = { nitrate = "mg/L N", absorbance = "AU" }
# Measured absorbances to turn back into nitrate (inverse prediction).
calibrate = [0.132, 0.418, 0.771]
# Each value above is the mean of this many readings of the same sample, which
# narrows the interval compared with a single reading.
readings = 2
# The laboratory's acceptance criteria for this curve, judged on the page
# (`sitegen build --enforce` exits with 3 when one is not met).
requirements.min_r_squared = 0.995
requirements.max_residual_sd = 0.01
requirements.back_calculated_within_percent = 15
requirements.lowest_within_percent = 20
''',
    )


def iron_ferrozine() -> None:
    """Standards over two decades whose scatter grows with the level: weighting matters here."""
    rng = rng_for("calibration/iron_ferrozine")
    iron = replicate([0.02, 0.05, 0.1, 0.2, 0.5, 1.0, 2.0], 3)
    absorbance = (0.0015 + 0.412 * iron) * (1.0 + rng.normal(0.0, 0.035, iron.size)) + rng.normal(
        0.0, 0.0004, iron.size
    )
    write_csv("calibration/iron_ferrozine.csv", [("iron", iron, 3), ("absorbance", absorbance, 4)])
    write_text(
        "calibration/iron_ferrozine.toml",
        '''\
title = "Iron by ferrozine at 562 nm: calibration with a chosen weighting"
description = """
Seven iron standards from 0.02 to 2 mg/L, each prepared and read three times in a
50 mm cell. The scatter of the readings grows with the concentration, so an
unweighted line reads the low standards back poorly; the page compares the
weightings and uses the one that reads the standards back best.
"""
tags = ["calibration", "metals"]
purpose = "calibration"
model = "absorbance ~ iron"
units = { iron = "mg/L Fe", absorbance = "AU" }
weighting = "choose"
# Two tap-water samples, each the mean of two readings, read back through the chosen line.
calibrate = [0.031, 0.262]
readings = 2
''',
    )


def phosphate_molybdenum_blue() -> None:
    rng = rng_for("calibration/phosphate_molybdenum_blue")
    phosphate = replicate([0.0, 0.1, 0.2, 0.4, 0.6, 0.8, 1.0], 2)
    absorbance = 0.004 + 0.780 * phosphate - 0.085 * phosphate**2 + rng.normal(0.0, 0.003, phosphate.size)
    write_csv(
        "calibration/phosphate_molybdenum_blue.csv",
        [("phosphate", phosphate, 2), ("absorbance", absorbance, 3)],
    )
    write_text(
        "calibration/phosphate_molybdenum_blue.toml",
        '''\
title = "Orthophosphate by molybdenum blue at 880 nm"
description = """
Seven standards in duplicate. The colour bends slightly towards the top of the
range, so the model adds a squared term; compare its coefficient with zero to
judge whether a straight line would have done.
"""
tags = ["calibration", "nutrients"]
model = "absorbance ~ phosphate + I(phosphate**2)"
units = { phosphate = "mg/L P", absorbance = "AU" }
# Term shown for this dataset in the per-tag comparison (here the linear term;
# without this key the first term after the intercept is used, the same one).
compare = "phosphate"
''',
    )


def free_chlorine_dpd() -> None:
    rng = rng_for("calibration/free_chlorine_dpd")
    chlorine = replicate([0.0, 0.25, 0.5, 1.0, 1.5, 2.0, 2.5], 3)
    absorbance = 0.003 + 0.212 * chlorine + rng.normal(0.0, 0.004, chlorine.size)
    write_csv(
        "calibration/free_chlorine_dpd.csv",
        [("chlorine", chlorine, 2), ("absorbance", absorbance, 3)],
    )
    write_text(
        "calibration/free_chlorine_dpd.toml",
        '''\
title = "Free chlorine by DPD photometer at 515 nm"
description = """
Seven chlorine standards read three times each on the bench photometer. The page
predicts the absorbance expected at the chlorine levels the treatment works
aims for, with intervals at 99 % instead of the site's usual 95 %.
"""
tags = ["calibration", "disinfection"]
model = "absorbance ~ chlorine"
units = { chlorine = "mg/L Cl2", absorbance = "AU" }
level = 0.99                      # overrides [defaults] level in site.toml
predict_at = [0.2, 0.5, 1.0, 2.0] # chlorine values at which to predict absorbance
''',
    )


def ammonium_fluorescence() -> None:
    rng = rng_for("calibration/ammonium_fluorescence")
    ammonium = replicate([0.02, 0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0], 3)
    expected = 12.0 + 3150.0 * ammonium
    # The scatter grows with the signal: about 2.5 % of it, plus a small floor.
    signal = expected + rng.normal(0.0, 1.0, ammonium.size) * np.hypot(0.025 * expected, 1.0)
    weight = 1.0 / ammonium**2
    write_csv(
        "calibration/ammonium_fluorescence.csv",
        [("ammonium", ammonium, 3), ("signal", signal, 1), ("weight", weight, 4)],
    )
    write_text(
        "calibration/ammonium_fluorescence.toml",
        '''\
title = "Ammonium by fluorescence, 0.02 to 5 mg/L N"
description = """
Eight standards spanning more than two decades, in triplicate. The spread of the
readings grows with concentration (a constant relative error), so an ordinary
fit would let the top standards dominate the low end, where most samples lie.

The `weight` column holds 1/concentration², and the fit is weighted with it.
Robust (HC3) standard errors are shown beside the usual ones as a check.
"""
tags = ["calibration", "nutrients"]
model = "signal ~ ammonium"
units = { ammonium = "mg/L N", signal = "RFU", weight = "(mg/L N)⁻²" }
weights = "weight"   # weighted least squares, weights taken from this column
robust = true        # also report heteroscedasticity-robust (HC3) standard errors
''',
    )


# -------------------------------------------------------------------------- field


def nitrate_kit_vs_lab() -> None:
    rng = rng_for("field/nitrate_kit_vs_lab")
    n = 30
    true = np.exp(rng.uniform(np.log(0.3), np.log(9.0), n))
    sd_lab = 0.12
    sd_kit = sd_lab * np.sqrt(1.5)  # the kit's error variance is 1.5 × the laboratory's
    lab = true + rng.normal(0.0, sd_lab, n)
    kit = 0.10 + 0.95 * true + rng.normal(0.0, sd_kit, n)
    samples = [f"N{i + 1:02d}" for i in range(n)]
    write_csv(
        "field/nitrate_kit_vs_lab.csv",
        [("sample", samples, None), ("lab", lab, 2), ("kit", kit, 1)],
    )
    write_text(
        "field/nitrate_kit_vs_lab.toml",
        '''\
title = "Nitrate: field test kit against the laboratory method"
description = """
Thirty samples from wells and streams, each measured on site with the colour-card
test kit and later in the laboratory by UV absorbance. If the kit agrees with
the laboratory, the line has slope 1 and intercept 0; the page tests both,
separately and together.

Both methods carry measurement error, so the page also draws lines that do not
treat the laboratory value as exact.
"""
tags = ["method-comparison", "nutrients"]
model = "kit ~ lab"
units = { lab = "mg/L N", kit = "mg/L N" }
# Linear hypotheses on the coefficients; a comma makes a joint test.
claims = ["lab = 1", "Intercept = 0", "lab = 1, Intercept = 0"]
lines = ["reverse", "orthogonal", "deming", "geometric_mean"]
# For the Deming line: variance of the kit's measurement error divided by the
# variance of the laboratory's (from replicate readings of a control sample).
error_ratio = 1.5
# What the kit must achieve to replace the laboratory for screening: no
# proportional or constant difference, and a bias within ±0.3 mg/L N or ±10 %
# (the larger) at the two levels that decide action.
requirements.slope_interval_includes = 1
requirements.intercept_interval_includes = 0
requirements.max_bias = { at = [2.0, 5.0], limit = 0.3, limit_percent = 10 }
''',
    )


def ammonium_analyser_vs_lab() -> None:
    """An online analyser against the laboratory: proportional bias, one spoilt sample."""
    rng = rng_for("field/ammonium_analyser_vs_lab")
    n = 42
    true = np.exp(rng.uniform(np.log(0.05), np.log(1.6), n))
    lab = true * (1.0 + rng.normal(0.0, 0.03, n)) + rng.normal(0.0, 0.006, n)
    analyser = 0.008 + 1.06 * true * (1.0 + rng.normal(0.0, 0.04, n)) + rng.normal(0.0, 0.008, n)
    analyser[27] = lab[27] + 0.42  # a sample bottle left open: the analyser read it before it changed
    samples = [f"A{i + 1:02d}" for i in range(n)]
    write_csv(
        "field/ammonium_analyser_vs_lab.csv",
        [("sample", samples, None), ("lab", lab, 3), ("analyser", analyser, 3)],
    )
    write_text(
        "field/ammonium_analyser_vs_lab.toml",
        '''\
title = "Ammonium: online analyser against the laboratory (method comparison)"
description = """
Forty-two grab samples of treated water, each read by the online ammonium
analyser at the moment of sampling and by the laboratory's indophenol method the
same day. The question is whether the analyser can replace the laboratory at the
plant's action levels of 0.2 and 0.5 mg/L N.

Sample A28 stood open before the laboratory read it; it is left in to show that
the Passing–Bablok line barely moves for one outlying pair.
"""
tags = ["method-comparison", "nutrients"]
purpose = "comparison"
model = "analyser ~ lab"
units = { lab = "mg/L N", analyser = "mg/L N" }
# The plant's action levels: the bias of the analyser is estimated at each.
decision_levels = [0.2, 0.5]
# The differences grow with the level, so show them in percent as well.
percent_differences = true
lines = ["passing_bablok", "deming"]
error_ratio = 1.5
''',
    )


def turbidity_sensors() -> None:
    rng = rng_for("field/turbidity_sensors")
    units = {"unit A": (0.05, 0.98), "unit B": (0.02, 1.01), "unit C": (0.12, 1.09)}
    names: list[str] = []
    reference: list[float] = []
    reading: list[float] = []
    for name, (offset, slope) in units.items():
        ref = np.exp(rng.uniform(np.log(0.2), np.log(12.0), 15))
        read = offset + slope * ref + rng.normal(0.0, 1.0, ref.size) * (0.04 + 0.005 * ref)
        names += [name] * ref.size
        reference += ref.tolist()
        reading += read.tolist()
    write_csv(
        "field/turbidity_sensors.csv",
        [("sensor", names, None), ("reference", reference, 2), ("reading", reading, 2)],
    )
    write_text(
        "field/turbidity_sensors.toml",
        '''\
title = "Turbidity: three new sensor units against the reference turbidimeter"
description = """
Before installing three new turbidity sensors, each was run beside the
laboratory's reference turbidimeter on fifteen samples from raw to filtered
water. One line is fitted per unit, and the page tests whether the three units
share a slope (they should, if they are interchangeable).
"""
tags = ["sensor", "turbidity"]
model = "reading ~ reference"
units = { reference = "NTU", reading = "NTU" }
group = "sensor"   # the text column naming the unit: one line per unit
''',
    )


def conductivity_probe_check() -> None:
    rng = rng_for("field/conductivity_probe_check")
    standards = [84.0, 147.0, 447.0, 1413.0, 2764.0, 5000.0]
    dates = ["2024-03-04", "2024-03-11", "2024-03-18"]
    day: list[str] = []
    standard: list[float] = []
    for d in dates:
        day += [d] * len(standards)
        standard += standards
    std = np.asarray(standard)
    probe = 2.0 + 0.988 * std + rng.normal(0.0, 1.0, std.size) * (3.0 + 0.001 * std)
    write_csv(
        "field/conductivity_probe_check.csv",
        [("check_date", day, None), ("standard", std, 1), ("probe", probe, 1)],
        delimiter=";",
        decimal_mark=",",
    )
    write_text(
        "field/conductivity_probe_check.toml",
        '''\
title = "Conductivity probe: weekly check against standard solutions"
description = """
The field conductivity probe is read in six standard solutions every Monday
for three weeks. The probe's logger exports with semicolons between fields and
a decimal comma; the sidecar's `delimiter` and `decimal` keys say so.
"""
tags = ["sensor", "conductivity"]
model = "probe ~ standard"
units = { standard = "µS/cm", probe = "µS/cm" }
claims = ["standard = 1", "Intercept = 0", "standard = 1, Intercept = 0"]
delimiter = ";"   # field separator used by the logger's export
decimal = ","     # decimal mark used by the logger's export
''',
    )


def chlorine_kit_vs_lab() -> None:
    rng = rng_for("field/chlorine_kit_vs_lab")
    n = 24
    true = rng.uniform(0.05, 1.8, n)
    true[16] = 0.50
    lab = true + rng.normal(0.0, 0.02, n)
    kit = 0.02 + 0.97 * true + rng.normal(0.0, 0.05, n)
    # Row 17: the kit showed 0.48, and 4.80 was keyed into the spreadsheet.
    lab[16] = 0.50
    kit[16] = 4.80
    samples = [f"C{i + 1:02d}" for i in range(n)]
    write_csv(
        "field/chlorine_kit_vs_lab.csv",
        [("sample", samples, None), ("lab", lab, 2), ("kit", kit, 2)],
    )
    write_text(
        "field/chlorine_kit_vs_lab.toml",
        '''\
title = "Free chlorine: pocket kit against the laboratory (with a keying error)"
description = """
Twenty-four samples from the distribution network, read with the pocket DPD kit
at the tap and with the laboratory photometer.

**Row 17 is wrong on purpose.** The kit showed 0.48 mg/L, but 4.80 was typed
into the spreadsheet. It is left in so that you can see how one keying
error shows up in the residuals, leverage and Cook's distance, and how much it
moves the line.
"""
tags = ["method-comparison", "disinfection"]
model = "kit ~ lab"
units = { lab = "mg/L Cl2", kit = "mg/L Cl2" }
claims = ["lab = 1", "Intercept = 0"]
''',
    )


def intake_turbidity_log() -> None:
    rng = rng_for("field/intake_turbidity_log")
    n = 7 * 288  # one week, a reading every 5 minutes
    minutes = np.arange(n) * 5.0
    days = minutes / 1440.0
    # Raw-water turbidity: a slowly wandering baseline with a daily rhythm and
    # two rain events (fast rise, slow fall).
    wander = np.zeros(n)
    step = rng.normal(0.0, 0.03, n)
    for i in range(1, n):
        wander[i] = 0.985 * wander[i - 1] + step[i]
    log_t = np.log(3.5) + 0.15 * np.sin(2.0 * np.pi * (days - 0.3)) + wander
    for start, peak in ((2.3, 12.0), (5.1, 6.0)):
        since = days - start
        rise = np.clip(since / 0.08, 0.0, 1.0)
        fall = np.exp(-np.clip(since - 0.08, 0.0, None) / 0.6)
        log_t += np.log1p((peak - 1.0) * rise * fall * (since > 0))
    turbidity = np.exp(log_t)
    reference = turbidity * (1.0 + rng.normal(0.0, 0.01, n))
    online = 0.15 + 1.04 * turbidity + rng.normal(0.0, 1.0, n) * (0.05 + 0.02 * turbidity)
    stamps = [f"2024-04-{1 + int(m // 1440):02d}T{int(m % 1440) // 60:02d}:{int(m % 60):02d}" for m in minutes]
    write_csv(
        "field/intake_turbidity_log.csv",
        [("time", stamps, None), ("reference", reference, 2), ("online", online, 2)],
    )
    write_text(
        "field/intake_turbidity_log.toml",
        '''\
title = "Intake turbidity: trial sensor against the reference analyser, one week"
description = """
A trial online sensor was mounted on the raw-water intake beside the reference
analyser, both logging every five minutes for a week (2,016 pairs). Two rain
events push the turbidity from a few NTU to over 30, which gives the line its
range.

Two cautions for reading the page: consecutive readings are not independent
(turbidity changes slowly), so the intervals are narrower than they should be;
and the scatter grows with turbidity, so the largest residuals cluster in the
storm peaks.
"""
tags = ["sensor", "turbidity"]
model = "online ~ reference"
units = { reference = "NTU", online = "NTU" }
''',
    )


# --------------------------------------------------------------------- operations


def pump_energy() -> None:
    rng = rng_for("operations/pump_energy")
    n = 36
    flow = rng.uniform(120.0, 260.0, n)
    head = 34.0 + 1.6e-4 * flow**2 + rng.normal(0.0, 1.5, n)  # system curve + reservoir level
    efficiency = 0.74 - 0.2 * ((flow - 200.0) / 200.0) ** 2
    power_kw = 9.81 * (flow / 3600.0) * head / efficiency + 1.8  # hydraulic power + auxiliaries
    energy = power_kw + rng.normal(0.0, 0.4, n)  # kWh in one hour of running
    write_csv(
        "operations/pump_energy.csv",
        [("flow", flow, 1), ("head", head, 1), ("energy", energy, 1)],
    )
    write_text(
        "operations/pump_energy.toml",
        '''\
title = "Booster pump: energy per hour against flow and head"
description = """
Thirty-six hourly records from the booster station: mean flow, mean delivered
head and the energy meter's reading for the hour. Two predictors, so the page
shows a coefficient for each: the extra energy per m³/h of flow at the same
head, and per metre of head at the same flow.

Head rises with flow along the system curve, so the two predictors are
correlated; expect wider intervals than either would have alone.
"""
tags = ["pumps", "energy"]
model = "energy ~ flow + head"
units = { flow = "m³/h", head = "m", energy = "kWh" }
# With more than one predictor, each point is a table naming every predictor.
predict_at = [{ flow = 180.0, head = 40.0 }, { flow = 240.0, head = 44.0 }]
compare = "flow"   # term shown for this dataset in the per-tag comparison
''',
    )


def chlorine_decay() -> None:
    rng = rng_for("operations/chlorine_decay")
    times = [0.0, 10.0, 20.0, 30.0, 45.0, 60.0, 90.0, 120.0, 180.0, 240.0, 300.0, 360.0]
    bottle: list[str] = []
    minutes: list[float] = []
    for b in ("A", "B"):
        bottle += [b] * len(times)
        minutes += times
    t = np.asarray(minutes)
    chlorine = 1.25 * np.exp(-0.0021 * t) * np.exp(rng.normal(0.0, 0.02, t.size))
    write_csv(
        "operations/chlorine_decay.csv",
        [("bottle", bottle, None), ("minutes", t, 0), ("chlorine", chlorine, 2)],
    )
    write_text(
        "operations/chlorine_decay.toml",
        '''\
title = "Chlorine decay in a bottle test of treated water"
description = """
Two amber bottles of treated water, dosed at the works and kept at 15 °C in the
dark; free chlorine read at intervals over six hours. Chlorine decays roughly
exponentially, so its logarithm falls on a straight line: the slope is minus
the first-order decay constant (per minute).
"""
tags = ["disinfection"]
model = "np.log(chlorine) ~ minutes"
units = { minutes = "min", chlorine = "mg/L Cl2" }
''',
    )


def dosing_pump() -> None:
    rng = rng_for("operations/dosing_pump")
    stroke_rate = replicate([20.0, 30.0, 40.0, 50.0, 60.0, 70.0, 80.0, 90.0, 100.0, 120.0], 2)
    delivered = 0.52 * stroke_rate + rng.normal(0.0, 1.0, stroke_rate.size) * (0.3 + 0.004 * stroke_rate)
    write_csv(
        "operations/dosing_pump.csv",
        [("stroke_rate", stroke_rate, 0), ("delivered", delivered, 1)],
    )
    write_text(
        "operations/dosing_pump.toml",
        '''\
title = "Coagulant dosing pump: delivered volume against stroke rate"
description = """
Drawdown-cylinder check of the coagulant dosing pump at ten stroke rates, two
timed runs each. A pump that is not stroking delivers nothing, so the line is
forced through the origin (`- 1` in the model removes the intercept); its slope
is the volume per stroke.
"""
tags = ["pumps", "dosing"]
model = "delivered ~ stroke_rate - 1"
units = { stroke_rate = "strokes/min", delivered = "mL/min" }
''',
    )


def backwash_expansion() -> None:
    """No sidecar: two numeric columns, so the tool fits the second against the first."""
    rng = rng_for("operations/backwash_expansion")
    rate = np.arange(25.0, 58.0, 2.5)
    expansion = -17.0 + 0.88 * rate + rng.normal(0.0, 1.0, rate.size)
    write_csv(
        "operations/backwash_expansion.csv",
        [("backwash_rate", rate, 1), ("bed_expansion", expansion, 1)],
    )


def dosing_pump_draft() -> None:
    """A half-finished run kept beside the others; site.toml's ignore list keeps it off the site."""
    rng = rng_for("operations/dosing_pump.draft")
    stroke_rate = np.array([20.0, 40.0, 60.0])
    delivered = 0.52 * stroke_rate + rng.normal(0.0, 1.0, stroke_rate.size)
    write_csv(
        "operations/dosing_pump.draft.csv",
        [("stroke_rate", stroke_rate, 0), ("delivered", delivered, 1)],
    )


DATASETS = (
    nitrate_uv,
    iron_ferrozine,
    phosphate_molybdenum_blue,
    free_chlorine_dpd,
    ammonium_fluorescence,
    nitrate_kit_vs_lab,
    ammonium_analyser_vs_lab,
    turbidity_sensors,
    conductivity_probe_check,
    chlorine_kit_vs_lab,
    intake_turbidity_log,
    pump_energy,
    chlorine_decay,
    dosing_pump,
    backwash_expansion,
)


def main() -> None:
    write_text("site.toml", SITE_TOML)
    for make in DATASETS:
        make()
    dosing_pump_draft()
    print(f"wrote {len(DATASETS)} datasets and site.toml under {HERE}")


if __name__ == "__main__":
    main()
