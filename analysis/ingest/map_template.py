"""A starter channel map guessed from log headers.

The guesses follow common naming habits (``_deg``, ``_rpm``, ``_us``, ``roll``,
``yaw_rate``, ``torque``, ``cmd``, ``req``, ...). Every guess is marked
``# GUESS: confirm`` so that the user checks it; columns with no guess are
written commented out and stay ``extra.<name>`` until the user maps them.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from analysis import catalogue
from analysis.ingest.timebase import decimal_comma

GUESS = "# GUESS: confirm"

# Unit suffix tokens -> pint unit string (common practice, no source).
_UNIT_TOKENS: list[tuple[tuple[str, ...], str]] = [
    (("deg", "s"), "deg/s"),
    (("dps",), "deg/s"),
    (("degps",), "deg/s"),
    (("rad", "s"), "rad/s"),
    (("rads",), "rad/s"),
    (("rpm",), "rpm"),
    (("deg",), "deg"),
    (("degrees",), "deg"),
    (("rad",), "rad"),
    (("mm", "s"), "mm/s"),
    (("m", "s2"), "m/s**2"),
    (("ms2",), "m/s**2"),
    (("mps2",), "m/s**2"),
    (("m", "s"), "m/s"),
    (("mps",), "m/s"),
    (("kmh",), "km/h"),
    (("mm",), "mm"),
    (("cm",), "cm"),
    (("nm",), "N*m"),
    (("mnm",), "mN*m"),
    (("g",), "g0"),
]
_TIME_UNITS = {"s": "s", "sec": "s", "ms": "ms", "us": "us", "usec": "us", "ns": "ns"}
_TIME_NAMES = {"t", "time", "stamp", "timestamp", "ts", "tstamp", "clock", "utc"}
_REF = {"ref", "sp", "setpoint", "target", "des", "desired", "goal"}
_REQ = {"req", "request", "requested", "des", "desired", "demand"}
_CMD = {"cmd", "command", "commanded", "out", "output", "sat", "limited"}
_TORQUE = {"torque", "tq", "trq", "tau", "effort"}
_VEL = {"vel", "velocity", "speed", "omega", "rpm", "spd", "w"}
_POS = {"pos", "position", "angle", "ang", "enc", "encoder", "q"}
_LEFT = {"l", "left", "lft"}
_RIGHT = {"r", "right", "rgt"}
_WHEEL = {"wheel", "whl", "wh", "drive"}
_HIP = {"hip", "leg", "knee"}
_LATERAL = {"y", "vy", "lat", "lateral", "side", "sideways"}


def _tokens(name: str) -> list[str]:
    spaced = re.sub(r"([a-z])([A-Z])", r"\1_\2", name)
    return [t for t in re.split(r"[^a-z0-9]+", spaced.lower()) if t]


def _split_digits(tokens: list[str]) -> list[str]:
    out: list[str] = []
    for t in tokens:
        m = re.fullmatch(r"([a-z]+)(\d)", t)
        out += [m.group(1), m.group(2)] if m and t not in ("s2", "ms2", "mps2") else [t]
    return out


def guess_unit(name: str) -> str | None:
    """Pint unit string suggested by a column name's suffix, or None."""
    tokens = _tokens(name)
    for suffix, unit in _UNIT_TOKENS:
        if len(tokens) > len(suffix) and tuple(tokens[-len(suffix) :]) == suffix:
            return unit
    return None


def guess_signal(name: str, actuators: Sequence[str] = ()) -> str | None:
    """Canonical signal suggested by a column name, or None."""
    tokens = set(_split_digits(_tokens(name)))
    is_ref = bool(tokens & _REF)
    side = "l" if tokens & _LEFT else "r" if tokens & _RIGHT else None
    rate = bool(tokens & {"rate", "dot", "gyro", "dps", "omega"})
    for axis, angle, rate_sig, ref in (
        ("x", catalogue.ROLL, catalogue.ROLL_RATE, catalogue.ROLL_REF),
        ("y", catalogue.PITCH, catalogue.PITCH_RATE, catalogue.PITCH_REF),
        ("z", catalogue.YAW, catalogue.YAW_RATE, None),
    ):
        if angle in tokens:
            if rate:
                return catalogue.YAW_RATE_REF if (is_ref and axis == "z") else rate_sig
            return ref if (is_ref and ref) else angle
        if "gyro" in tokens and axis in tokens:
            return rate_sig
    if tokens & {"acc", "accel", "imu"} and not tokens & (_TORQUE | _POS):
        for axis, sig in (
            ("x", catalogue.ACCEL_X),
            ("y", catalogue.ACCEL_Y),
            ("z", catalogue.ACCEL_Z),
        ):
            if axis in tokens:
                return sig
    actuator = None
    if tokens & _WHEEL and side:
        actuator = f"wheel_{side}"
    elif tokens & _HIP and side and not tokens & {"len", "length", "height"}:
        actuator = f"hip_{side}"
    elif tokens & _TORQUE and side:
        actuator = f"wheel_{side}"  # a torque with a side and no joint named: the wheels
    if actuator and (not actuators or actuator in actuators):
        if tokens & _TORQUE:
            if tokens & _REQ:
                return catalogue.actuator_signal(actuator, catalogue.TORQUE_REQ)
            if tokens & _CMD:
                return catalogue.actuator_signal(actuator, catalogue.TORQUE_CMD)
            return catalogue.actuator_signal(actuator, catalogue.TORQUE)
        if tokens & _VEL:
            return catalogue.actuator_signal(actuator, catalogue.VEL)
        if tokens & _POS:
            return catalogue.actuator_signal(actuator, catalogue.POS)
    if "leg" in tokens and side and tokens & {"len", "length", "l", "mm", "m"}:
        return catalogue.leg_length(side)
    if tokens & {"height", "h"} and is_ref:
        return catalogue.HEIGHT_REF
    velocity = tokens & {"vel", "speed", "vx", "vy", "velocity"} or (
        "v" in tokens and tokens & ({"x"} | _LATERAL)
    )
    if velocity and not actuator:
        lateral = bool(tokens & _LATERAL)
        if is_ref:
            return None if lateral else catalogue.VEL_X_REF
        return catalogue.VEL_Y if lateral else catalogue.VEL_X
    return None


def guess_time(columns: Sequence[str], first_row: dict[str, object]) -> tuple[str, str, str] | None:
    """(column, time_unit, time_origin) guessed from names and the first value, or None."""
    for col in columns:
        tokens = _tokens(col)
        if not tokens or not (set(tokens) & _TIME_NAMES):
            continue
        unit = _TIME_UNITS.get(tokens[-1])
        value = first_row.get(col)
        if isinstance(value, str) and re.match(r"\d{4}-\d\d-\d\dT?", value.strip()):
            return col, "iso8601", "epoch"
        try:
            v = abs(float(value))  # type: ignore[arg-type]
        except (TypeError, ValueError):
            v = 0.0
        # Unix time now is about 1.7e9 s: magnitude tells the unit (common practice, no source).
        epoch_unit = next(
            (u for u, lo in (("ns", 1e17), ("us", 1e14), ("ms", 1e11), ("s", 1e8)) if v >= lo), None
        )
        origin = "epoch" if epoch_unit else "boot"
        return col, unit or epoch_unit or "s", origin
    return None


@dataclass
class FileHeader:
    """Columns and first data row of one log file."""

    path: Path
    columns: list[str]
    first_row: dict[str, object]


def file_glob(name: str) -> str:
    """A glob for the file and its siblings of other runs: ``*_imu.csv*`` for
    ``run7_imu.csv.gz``; ``*imu.csv*`` when the name has no ``_`` or ``-`` part."""
    stem, _, rest = name.partition(".")
    ext = rest.split(".")[0] if rest else ""
    m = re.search(r"[_-][A-Za-z][A-Za-z0-9]*$", stem)
    tail = m.group(0) if m else stem
    return f"*{tail}.{ext}*" if ext else f"*{tail}*"


def template(headers: Sequence[FileHeader], actuators: Sequence[str] = ()) -> str:
    """Channel-map TOML text for the files, every guess marked for the user."""
    out = [
        "# Starter channel map written by `outrigger map-template`.",
        "# Check every line marked GUESS, then delete the marker. Columns left",
        "# commented out are kept as extra.<column> until you map them.",
        "# Signals and units: see README, 'Channel map'.",
        "",
    ]
    used: set[str] = set()
    seen: set[str] = set()  # each signal mapped once across the whole map
    for h in headers:
        stem = re.sub(r"[^A-Za-z0-9_]+", "_", h.path.name.split(".")[0]).strip("_") or "log"
        name = re.sub(r"^\d+_?", "", stem) or "log"
        while name in used:
            name += "_2"
        used.add(name)
        time = guess_time(h.columns, h.first_row)
        mapped: dict[str, tuple[str, str]] = {}
        for col in h.columns:
            if time and col == time[0]:
                continue
            sig = guess_signal(col, actuators)
            if sig and sig not in seen:
                seen.add(sig)
                entry = catalogue.lookup(sig, (sig.split(".")[0],))
                unit = guess_unit(col) or (entry.unit if entry else "")
                mapped[col] = (sig, unit)
        torques = sum(1 for s, _ in mapped.values() if "torque" in s)
        torque_file = bool(set(_tokens(h.path.name)) & _TORQUE)
        kind = "torque" if torque_file or (torques and torques >= len(mapped) / 2) else "state"
        commas = [c for c, v in h.first_row.items() if decimal_comma(v)]
        if commas:
            out += [
                f"# {h.path.name} writes numbers with a decimal comma ({commas[0]} = "
                f"{h.first_row[commas[0]]!r}).",
                "# Outrigger reads decimal points: export the log with '.' as the decimal",
                "# mark, or convert it (replace each decimal ',' with '.' in number fields).",
            ]
        out += [
            "[[source]]",
            f'name = "{name}"',
            f'files = "{file_glob(h.path.name)}"   {GUESS}',
        ]
        out.append(f'kind = "{kind}"   {GUESS}')
        if time:
            out.append(f'time_column = "{time[0]}"   {GUESS}')
            out.append(f'time_unit = "{time[1]}"   {GUESS}')
            out.append(f'time_origin = "{time[2]}"   {GUESS}')
        else:
            out += [
                'time_column = "?"   # name the time column',
                'time_unit = "s"   # s | ms | us | ns | iso8601',
                'time_origin = "boot"',
            ]
        out.append("")
        out.append("[source.columns]")
        for col in h.columns:
            if time and col == time[0]:
                continue
            key = (
                col if re.fullmatch(r"[A-Za-z0-9_-]+", col) else '"' + col.replace('"', '\\"') + '"'
            )
            if col in mapped:
                sig, unit = mapped[col]
                out.append(f'{key} = {{ signal = "{sig}", unit = "{unit}" }}   {GUESS}')
            else:
                out.append(
                    f'# {key} = {{ signal = "?", unit = "?" }}   # no guess; kept as extra.{col}'
                )
        out.append("")
    return "\n".join(out)
