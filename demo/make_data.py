"""Generate the demo data: refrigerated deliveries from five depots, one row per delivery.

The scenario is invented. Every number comes from ``numpy.random.default_rng(seed)``, so the
same ``rows`` and ``seed`` always give the same frame, and running this file always writes the
same bytes to ``tui/demo/deliveries.csv`` (the demo data ships with the ``remnant`` command)::

    python demo/make_data.py            # 4000 rows, seed 7
    python demo/make_data.py --rows 500 --seed 1 --out small.csv

The signal is built so that a residual chain has something to find at each step: a broad
additive trend a linear stage catches, then rush hours, a heat threshold for heavy loads and
road works scaling with distance that only trees catch. See ``demo/README.md``.

It also writes ``tui/demo/delay_causes.csv``, the multiclass demo: the same deliveries with the
main cause of each one's delay (none, rush traffic, road works, a cooling stop, a yard queue).
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

DEPOTS = ("Saltmarsh", "Copperhill", "Lindenyard", "Brackenfield", "Kestrel Point")
DEPOT_SHARE = (0.34, 0.24, 0.18, 0.14, 0.10)
# Minutes each depot adds to lateness, all else equal (yard congestion, loading bays).
DEPOT_DELAY = {
    "Saltmarsh": 0.0,
    "Copperhill": 6.0,
    "Lindenyard": -4.0,
    "Brackenfield": 11.0,
    "Kestrel Point": 3.0,
}
# Typical route length from each depot, in km (rural depots drive further).
DEPOT_REACH = {
    "Saltmarsh": 28.0,
    "Copperhill": 40.0,
    "Lindenyard": 22.0,
    "Brackenfield": 55.0,
    "Kestrel Point": 34.0,
}
FIRST_DAY = np.datetime64("2023-03-01")
DAYS = 548  # about 18 months
HEAT_LIMIT_C = 27.0
HEAVY_LOAD_KG = 1800.0
SENSOR_GAP = {"door_open_min": 0.06, "compressor_duty": 0.07}
#: where the demo data lives: package data of the workbench, so it ships with remnant
DEFAULT_OUT = Path(__file__).resolve().parent.parent / "tui" / "demo" / "deliveries.csv"
#: the multiclass demo: the main cause of each delivery's delay, beside the deliveries
CAUSES_OUT = DEFAULT_OUT.with_name("delay_causes.csv")
#: the causes a dispatcher records, in the order their log-odds are built below
CAUSES = ("none", "rush_traffic", "road_works", "cooling_stop", "yard_queue")
# How much each depot's loading yard makes a queue the main cause (log-odds, Saltmarsh 0).
YARD_QUEUE = {
    "Saltmarsh": 0.0,
    "Copperhill": 1.6,
    "Lindenyard": -1.3,
    "Brackenfield": 2.6,
    "Kestrel Point": 0.6,
}


def _dates(rng: np.random.Generator, rows: int) -> np.ndarray:
    """Return ``rows`` sorted day offsets from FIRST_DAY, with fewer deliveries at weekends."""
    day = np.arange(DAYS)
    weekday = (day + _weekday_of_first_day()) % 7
    weight = np.where(weekday == 6, 0.35, np.where(weekday == 5, 0.6, 1.0))
    return np.sort(rng.choice(day, size=rows, p=weight / weight.sum()))


def _weekday_of_first_day() -> int:
    """Return the weekday of FIRST_DAY, Monday 0 to Sunday 6."""
    return int(pd.Timestamp(FIRST_DAY).weekday())


def _features(rng: np.random.Generator, rows: int) -> pd.DataFrame:
    """Return the feature columns before any sensor reading is blanked out."""
    offset = _dates(rng, rows)
    date = FIRST_DAY + offset.astype("timedelta64[D]")
    weekday = (offset + _weekday_of_first_day()) % 7
    depot = rng.choice(np.array(DEPOTS), size=rows, p=DEPOT_SHARE)
    reach = np.array([DEPOT_REACH[d] for d in depot])
    distance = np.clip(reach * rng.lognormal(0.0, 0.5, rows), 2.0, 220.0)
    stops = np.clip(1 + rng.poisson(1.0 + distance / 12.0), 1, 16)
    load = np.clip(rng.gamma(4.0, 380.0, rows) + 60.0 * stops, 150.0, 3400.0)
    hour = rng.choice(np.arange(5, 22), size=rows, p=_hour_share())
    season = np.sin(2 * np.pi * (offset - 51) / 365.25)  # peaks near late July
    daytime = 3.5 * np.exp(-(((hour - 15) / 4.0) ** 2))  # warmest mid afternoon
    temp = 13.5 + 11.0 * season + daytime + rng.normal(0.0, 3.0, rows)
    driver_years = np.clip(rng.gamma(2.0, 4.5, rows), 0.2, 38.0)
    road_works = rng.random(rows) < 0.12 + 0.08 * (season > 0)
    door_open = stops * rng.gamma(6.0, 0.45, rows) + rng.exponential(1.5, rows)
    effort = (
        -0.4
        + 0.11 * (temp - 15.0)
        + 0.0007 * (load - 1500.0)
        + 0.05 * door_open
        + rng.normal(0.0, 0.45, rows)
    )
    compressor = 1 / (1 + np.exp(-effort))
    return pd.DataFrame(
        {
            "delivery_date": pd.to_datetime(date).strftime("%Y-%m-%d"),
            "depot": depot,
            "distance_km": distance.round(1),
            "stops": stops.astype(int),
            "load_kg": load.round(0),
            "outside_temp_c": temp.round(1),
            "hour": hour.astype(int),
            "weekday": weekday.astype(int),
            "driver_years": driver_years.round(1),
            "road_works": road_works,
            "door_open_min": door_open.round(1),
            "compressor_duty": compressor.round(3),
        }
    )


def _hour_share() -> np.ndarray:
    """Return the share of departures in each hour from 5 to 21: a busy morning, a smaller afternoon."""
    hour = np.arange(5, 22)
    share = 0.3 + np.exp(-(((hour - 8) / 2.2) ** 2)) + 0.6 * np.exp(-(((hour - 16) / 2.5) ** 2))
    return share / share.sum()


def _heavy_in_heat(frame: pd.DataFrame) -> np.ndarray:
    """Return True where a heavy load travelled on a hot day."""
    return (
        (frame["outside_temp_c"] > HEAT_LIMIT_C) & (frame["load_kg"] > HEAVY_LOAD_KG)
    ).to_numpy()


def _minutes_late(rng: np.random.Generator, frame: pd.DataFrame) -> np.ndarray:
    """Return minutes late: an additive trend, then rush hours, heat and road works, then noise."""
    distance = frame["distance_km"].to_numpy()
    hour = frame["hour"].to_numpy()
    workday = frame["weekday"].to_numpy() < 5
    trend = (
        -12.0
        + 0.32 * distance
        + 2.6 * frame["stops"].to_numpy()
        + 0.004 * frame["load_kg"].to_numpy()
        - 0.55 * frame["driver_years"].to_numpy()
        + frame["depot"].map(DEPOT_DELAY).to_numpy()
    )
    morning = (hour >= 7) & (hour <= 9)
    evening = (hour >= 16) & (hour <= 18)
    rush = np.where(workday, 1.0, 0.3) * (22.0 * morning + 30.0 * evening)
    heat = 38.0 * _heavy_in_heat(frame)
    works = frame["road_works"].to_numpy() * (2.0 + 0.5 * distance)
    noise = rng.normal(0.0, 1.0, len(frame)) * (2.5 + 0.07 * distance)
    return (trend + rush + heat + works + noise).round(1)


def _out_of_band(rng: np.random.Generator, frame: pd.DataFrame) -> np.ndarray:
    """Return 0/1: did the cargo leave its temperature band, drawn from a logistic model."""
    logit = (
        -3.6
        + 0.09 * (frame["door_open_min"].to_numpy() - 8.0)
        + 4.0 * (frame["compressor_duty"].to_numpy() - 0.6)
        + 0.06 * (frame["outside_temp_c"].to_numpy() - 14.0)
        + 0.0006 * (frame["load_kg"].to_numpy() - 1500.0)
        + 2.8 * _heavy_in_heat(frame)
        + rng.normal(0.0, 0.5, len(frame))
    )
    return (rng.random(len(frame)) < 1 / (1 + np.exp(-logit))).astype(int)


def _blank_sensors(rng: np.random.Generator, frame: pd.DataFrame) -> None:
    """Blank out sensor readings at random, the same share within every outcome group.

    Rows are grouped by ``cargo_out_of_band`` and by quintile of ``minutes_late``; in each group
    exactly the column's share of readings is blanked, at random. A missing reading therefore
    says nothing about either target: the gaps cannot leak the answer.
    """
    quintile = pd.qcut(frame["minutes_late"], 5, labels=False).to_numpy()
    group = frame["cargo_out_of_band"].to_numpy() * 5 + quintile
    for column, share in SENSOR_GAP.items():
        blank = np.zeros(len(frame), dtype=bool)
        for value in np.unique(group):
            members = np.flatnonzero(group == value)
            count = round(share * len(members))
            blank[rng.choice(members, size=count, replace=False)] = True
        frame.loc[blank, column] = np.nan


def make_deliveries(rows: int = 4000, seed: int = 7) -> pd.DataFrame:
    """Generate the refrigerated-deliveries demo data.

    Parameters
    ----------
    rows : int
        Number of deliveries (rows).
    seed : int
        Seed for ``numpy.random.default_rng``; the same seed gives the same frame.

    Returns
    -------
    pandas.DataFrame
        One row per delivery, in date order, with columns ``delivery_id``, ``delivery_date``,
        ``depot``, ``distance_km``, ``stops``, ``load_kg``, ``outside_temp_c``, ``hour``,
        ``weekday``, ``driver_years``, ``road_works``, ``door_open_min``, ``compressor_duty``
        (both with some values missing), and the targets ``minutes_late`` and
        ``cargo_out_of_band``.
    """
    rng = np.random.default_rng(seed)
    frame = _features(rng, rows)
    frame["minutes_late"] = _minutes_late(rng, frame)
    frame["cargo_out_of_band"] = _out_of_band(rng, frame)
    _blank_sensors(rng, frame)
    frame.insert(0, "delivery_id", [f"D{i:05d}" for i in range(1, rows + 1)])
    return frame


def _cause_log_odds(frame: pd.DataFrame) -> np.ndarray:
    """Return one column of log-odds per cause in ``CAUSES``: what makes each the main delay cause."""
    distance = frame["distance_km"].to_numpy()
    hour = frame["hour"].to_numpy()
    workday = frame["weekday"].to_numpy() < 5
    rush = np.where(workday, 1.0, 0.3) * (((hour >= 7) & (hour <= 9)) | ((hour >= 16) & (hour <= 18)))
    works = frame["road_works"].to_numpy(dtype=float)
    heat = _heavy_in_heat(frame)
    return np.column_stack([
        3.2 - 0.032 * distance - 0.16 * frame["stops"].to_numpy() + 0.08 * frame["driver_years"].to_numpy(),
        -1.3 + 4.2 * rush,
        -4.8 + works * (5.1 + 0.04 * distance),
        -3.0 + 7.2 * heat + 0.08 * (frame["outside_temp_c"].to_numpy() - 14.0),
        -2.6 + frame["depot"].map(YARD_QUEUE).to_numpy() + 0.16 * frame["stops"].to_numpy(),
    ])


def make_delay_causes(rows: int = 4000, seed: int = 7) -> pd.DataFrame:
    """Generate the multiclass demo data: the deliveries' features and the main cause of each delay.

    Parameters
    ----------
    rows, seed : int
        As for ``make_deliveries``: the same deliveries, row for row.

    Returns
    -------
    pandas.DataFrame
        The columns of ``make_deliveries`` without its two targets, and the target ``delay_cause``:
        one of ``CAUSES``, drawn for each row from the softmax of ``_cause_log_odds`` with a random
        stream of its own (the deliveries' draws are not changed by it).
    """
    frame = make_deliveries(rows=rows, seed=seed).drop(columns=["minutes_late", "cargo_out_of_band"])
    logits = _cause_log_odds(frame)
    probability = np.exp(logits - logits.max(axis=1, keepdims=True))
    probability /= probability.sum(axis=1, keepdims=True)
    draw = np.random.default_rng([seed, 16]).random(len(frame))[:, None]
    chosen = (draw > probability.cumsum(axis=1)).sum(axis=1).clip(0, len(CAUSES) - 1)
    frame["delay_cause"] = np.array(CAUSES)[chosen]
    return frame


# ----------------------------------------------------------------------------- vehicle-months
#: where the vehicle-month demo data lives, beside the deliveries
VEHICLE_MONTHS_OUT = DEFAULT_OUT.parent / "vehicle_months.csv"
#: compressor models of the refrigerated fleet; "FrostLine 2" struggles in heat
COMPRESSORS = ("Polar 400", "FrostLine 2", "Coldwell C")
#: the outside temperature (monthly mean, C) above which a FrostLine 2 raises far more alarms
COMPRESSOR_HEAT_C = 22.0


def make_vehicle_months(vehicles: int = 400, seed: int = 11) -> pd.DataFrame:
    """Generate the vehicle-month demo data: temperature alarms of the refrigerated fleet.

    One row per vehicle and month over a year. ``months_in_service`` is the share of the month the
    vehicle was on the road (the exposure: part months for vehicles in the workshop, joining or
    leaving), and ``temperature_alarms`` the count of cargo-temperature alarms it raised, drawn
    from a Poisson law whose rate per month in service grows on the log scale with the vehicle's
    age, the month's outside temperature and the doors opened per day (what a poisson GLM
    catches), times a jump for FrostLine 2 compressors in hot months and a bend for old vehicles
    on long daily distances (what trees then find).

    Returns
    -------
    pandas.DataFrame
        Columns ``vehicle_id``, ``month``, ``depot``, ``compressor``, ``vehicle_age_years``,
        ``outside_temp_c``, ``door_openings_per_day``, ``km_per_day``, ``months_in_service``
        and ``temperature_alarms``.
    """
    rng = np.random.default_rng(seed)
    depot = rng.choice(DEPOTS, size=vehicles, p=DEPOT_SHARE)
    compressor = rng.choice(COMPRESSORS, size=vehicles, p=(0.45, 0.3, 0.25))
    age = rng.uniform(0.5, 12.0, vehicles).round(1)
    rows = vehicles * 12
    month = np.tile(np.arange(1, 13), vehicles)
    who = np.repeat(np.arange(vehicles), 12)
    temp = (11 + 10 * np.sin((month - 4) / 12 * 2 * np.pi) + rng.normal(0, 2.5, rows)).round(1)
    doors = rng.gamma(6.0, 2.0, rows).round(1)
    km = rng.gamma(8.0, 22.0, rows).round(0)
    service = np.where(rng.random(rows) < 0.8, 1.0, rng.uniform(0.05, 1.0, rows)).round(2)
    log_rate = (-1.6 + 0.07 * age[who] + 0.045 * temp + 0.035 * doors
                + np.where(depot[who] == "Brackenfield", 0.25, 0.0))
    hot_frostline = (compressor[who] == "FrostLine 2") & (temp > COMPRESSOR_HEAT_C)
    log_rate = log_rate + 1.1 * hot_frostline + 0.6 * ((age[who] > 8) & (km > 220))
    alarms = rng.poisson(service * np.exp(log_rate))
    return pd.DataFrame({
        "vehicle_id": [f"V{i + 1:04d}" for i in who], "month": month, "depot": depot[who],
        "compressor": compressor[who], "vehicle_age_years": age[who], "outside_temp_c": temp,
        "door_openings_per_day": doors, "km_per_day": km, "months_in_service": service,
        "temperature_alarms": alarms,
    })


def write_csv(frame: pd.DataFrame, path: Path) -> None:
    """Write ``frame`` as CSV: booleans as true/false, missing values as empty cells."""
    out = frame.copy()
    out["road_works"] = out["road_works"].map({True: "true", False: "false"})
    out.to_csv(path, index=False, na_rep="", lineterminator="\n")


def main(argv: list[str] | None = None) -> int:
    """Write the demo CSV; return the process exit status."""
    parser = argparse.ArgumentParser(description="Generate the refrigerated-deliveries demo data.")
    parser.add_argument(
        "--rows", type=int, default=4000, help="number of deliveries (default 4000)"
    )
    parser.add_argument("--seed", type=int, default=7, help="random seed (default 7)")
    parser.add_argument(
        "--out",
        type=Path,
        default=DEFAULT_OUT,
        help="CSV file to write (default: deliveries.csv next to this script)",
    )
    parser.add_argument(
        "--causes-out",
        type=Path,
        default=CAUSES_OUT,
        help="CSV file for the multiclass demo, the delay causes (default: delay_causes.csv beside it)",
    )
    parser.add_argument("--vehicle-months", action="store_true",
                        help="write the vehicle-month alarm counts instead (vehicle_months.csv beside the deliveries)")
    args = parser.parse_args(argv)
    if args.vehicle_months:
        out = VEHICLE_MONTHS_OUT if args.out == DEFAULT_OUT else args.out
        months = make_vehicle_months()
        months.to_csv(out, index=False, lineterminator="\n")
        print(f"wrote {len(months)} rows to {out.name}")
        return 0
    frame = make_deliveries(rows=args.rows, seed=args.seed)
    write_csv(frame, args.out)
    print(f"wrote {len(frame)} rows to {args.out.name}")
    if args.causes_out is not None:
        causes = make_delay_causes(rows=args.rows, seed=args.seed)
        write_csv(causes, args.causes_out)
        print(f"wrote {len(causes)} rows to {args.causes_out.name}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
