"""``outrigger calibrate RUN``: check the robot profile against what the run's logs show."""

from __future__ import annotations

import argparse
import json

from server.cli.main import add_data_option, data_dir


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    """Add the ``calibrate`` command."""
    p = sub.add_parser(
        "calibrate",
        help="estimate wheel radius, track width, gyro bias and accelerometer tilt from a run",
        description=(
            "Estimate the effective wheel radius and track width (straight and turning "
            "stretches), gyro bias and accelerometer tilt (standstill) from a stored run, "
            "and say where the profile differs by more than the stated tolerance. "
            "Exit 1 when any estimate differs."
        ),
    )
    p.add_argument("run", metavar="RUN", help="run id (see `outrigger runs`)")
    p.add_argument("--json", action="store_true", help="print SI values as JSON")
    add_data_option(p)
    p.set_defaults(func=_calibrate)


def _fmt(value: float | None) -> str:
    return "n/a" if value is None else f"{value:.3g}"


def _calibrate(args: argparse.Namespace) -> int:
    from analysis.archive.objstore import open_archive
    from analysis.detect import pictures

    archive = open_archive(data_dir(args))
    result = pictures.calibration(archive, args.run)
    differs = any(row["differs"] for row in result["estimates"])
    if args.json:
        print(json.dumps({"run": args.run, **result["si"]}, indent=2))
        return 1 if differs else 0
    print(f"Calibration check of run {args.run} against profile {result['profile']!r}:")
    for row in result["estimates"]:
        unit = f" {row['unit']}" if row["unit"] else ""
        verdict = {True: "DIFFERS", False: "ok", None: "not estimated"}[row["differs"]]
        tol = f"{row['tolerance']:.3g} {row['tolerance_unit']}".rstrip()
        line = (
            f"  {row['label']:<44} {_fmt(row['estimate']):>9}{unit}  profile {_fmt(row['profile'])}"
            f"{unit}  (tolerance {tol}, {row['samples']} samples)  {verdict}"
        )
        print(line + (f"  [{row['note']}]" if row["note"] and row["differs"] is None else ""))
    fixed = result["corrected_profile"]
    if fixed:
        print("Suggested profile values ([robot] table):")
        for key, value in fixed.items():
            print(f"  {key} = {value:.4g}")
    return 1 if differs else 0
