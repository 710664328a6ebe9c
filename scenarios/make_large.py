"""Invented large networks for the scale benchmark: a scenario folder of any size.

    python -m planner.demo.make_large FOLDER --terminals 1000 [--days 365] [--paths 500]

The network belongs to an invented bank (Harrowmere Mutual, its Ravensholt region). Every
depot serves :data:`PER_DEPOT` machines; crews per depot and weekday are a share of its
machines small enough that the crew limits bind on busy days. Each machine's demand is
lognormal around a weekday profile of its site type, with a level of its own and an AR(1)
drift on the log scale; outage days (``down``) and days the machine ran dry (``dry``, demand
cut at the balance) are marked as a real history would be. The history is written as
``dispense.parquet`` (the format for long histories). All numbers are invented; nothing is
tuned to the planner.
"""
from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

PER_DEPOT = 250
# Mon … Sun (invented): high street, station, village
PROFILES = np.array([[0.95, 0.90, 0.95, 1.05, 1.35, 1.25, 0.55],
                     [1.10, 1.05, 1.05, 1.10, 1.25, 0.75, 0.70],
                     [0.90, 0.85, 0.90, 1.00, 1.30, 1.40, 0.65]])
SITES = ("high street", "station", "village")
VISIT_DAYS = ("Mon|Tue|Wed|Thu|Fri", "Mon|Wed|Fri", "Tue|Thu|Sat", "Mon|Tue|Wed|Thu|Fri|Sat")
# visits a depot's crews can make per weekday, as a share of its machines (Mon … Sun)
CREW_SHARE = (0.2, 0.2, 0.2, 0.2, 0.2, 0.08, 0.0)
LAST_HISTORY_DAY = pd.Timestamp("2026-11-29")            # a Sunday


def write_network(folder: str | Path, terminals: int, *, days: int = 365, paths: int = 500,
                  seed: int = 20_261_203, horizon_days: int = 14) -> Path:
    """Write the scenario folder (``scenario.toml``, ``depots.csv``, ``terminals.csv``,
    ``dispense.parquet``) and return it."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=False)
    rng = np.random.default_rng(seed)
    depot_count = -(-terminals // PER_DEPOT)
    depot_names = [f"Ravensholt {k + 1:02d}" for k in range(depot_count)]
    ids = np.array([f"RVH-{i + 1:05d}" for i in range(terminals)])
    depot = np.array([depot_names[i // PER_DEPOT] for i in range(terminals)])
    site = rng.integers(0, len(SITES), terminals)
    level = np.exp(rng.normal(np.log(5000.0), 0.45, terminals))
    # the limit covers 5–10 days of mean demand, in whole 5,000s; insurance a little below
    capacity = np.ceil(level * rng.uniform(5.0, 10.0, terminals) * 7 / 5 / 5000) * 5000
    insurance = np.minimum(capacity, np.ceil(capacity * 0.9 / 5000) * 5000)
    balance = np.round(insurance * rng.uniform(0.3, 0.8, terminals), -3)

    dates = pd.date_range(end=LAST_HISTORY_DAY, periods=days, freq="D")
    weekday = dates.day_of_week.to_numpy()
    drift = np.zeros((terminals, days))
    shocks = rng.normal(0.0, 0.04, (terminals, days))
    for t in range(1, days):
        drift[:, t] = 0.97 * drift[:, t - 1] + shocks[:, t]
    log_demand = (np.log(level)[:, None] + np.log(PROFILES[site][:, weekday]) + drift
                  + rng.normal(0.0, 0.3, (terminals, days)))
    amount = np.round(np.exp(log_demand), -1)
    status = np.full((terminals, days), "ok", dtype=object)
    down = rng.random((terminals, days)) < 0.01
    dry = ~down & (rng.random((terminals, days)) < 0.008)
    status[down] = "down"
    status[dry] = "dry"
    amount[down] = 0.0
    amount[dry] = np.round(amount[dry] * rng.uniform(0.1, 0.7, int(dry.sum())), -1)

    (folder / "scenario.toml").write_text(
        'name = "Harrowmere Mutual - Ravensholt region (invented, '
        f'{terminals:,} terminals)"\ncurrency = "EUR"\n\n'
        f"[planning]\nhorizon_days = {horizon_days}\nreplenishment = \"swap\"\n\n"
        '[calendar]\nholidays = "DE"\npaydays = ["last_business_day"]\n\n'
        "[costs]\ncarry_rate_annual = 0.05\nvisit_fee = 120\nemergency_visit_fee = 400\n"
        "handling_per_1000 = 0.8\ndry_day_penalty = 600\n\n"
        "[service]\nmax_dry_probability = 0.02\n\n"
        f"[paths]\ncount = {paths}\nseed = {seed % 1_000_003}\n", encoding="utf-8")
    crews = {day: [max(int(round(share * min(PER_DEPOT, terminals - k * PER_DEPOT))), 0)
                   for k in range(depot_count)]
             for day, share in zip(("Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun"),
                                   CREW_SHARE)}
    pd.DataFrame({"depot": depot_names, "max_visits_per_day": crews["Mon"], **crews}).to_csv(
        folder / "depots.csv", index=False)
    pd.DataFrame({"terminal_id": ids, "depot": depot, "capacity": capacity.astype(int),
                  "insurance_limit": insurance.astype(int), "bundle": 1000,
                  "balance_now": balance.astype(int),
                  "visit_days": [VISIT_DAYS[k] for k in rng.integers(0, len(VISIT_DAYS),
                                                                     terminals)],
                  "site": [SITES[k] for k in site]}).to_csv(folder / "terminals.csv",
                                                           index=False)
    pd.DataFrame({"terminal_id": np.repeat(ids, days),
                  "date": np.tile(dates.to_numpy(), terminals),
                  "amount": amount.reshape(-1),
                  "status": status.reshape(-1)}).to_parquet(folder / "dispense.parquet",
                                                            index=False)
    return folder


def _cli() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("folder")
    parser.add_argument("--terminals", type=int, default=1000)
    parser.add_argument("--days", type=int, default=365)
    parser.add_argument("--paths", type=int, default=500)
    parser.add_argument("--seed", type=int, default=20_261_203)
    args = parser.parse_args()
    out = write_network(args.folder, args.terminals, days=args.days, paths=args.paths,
                        seed=args.seed)
    print(f"wrote {out} ({args.terminals:,} terminals, {args.days} days)")


if __name__ == "__main__":
    _cli()
