"""Write the tiny scenario used by fast tests: 3 terminals, 1 depot, 12 weeks of history.

Invented data (Kestrel Valley Bank, town of Brenholm). Run: ``python -m planner.demo.make_tiny``.
Seeded, so the files are the same on every run.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

OUT = Path(__file__).with_name("tiny")
SEED = 7


def main() -> None:
    rng = np.random.default_rng(SEED)
    OUT.mkdir(exist_ok=True)
    (OUT / "scenario.toml").write_text(
        'name = "Kestrel Valley Bank - Brenholm (tiny)"\n'
        'currency = "EUR"\n\n'
        "[planning]\nhorizon_days = 14\nreplenishment = \"swap\"\n\n"
        "[calendar]\nholidays = \"DE\"\npaydays = [\"last_business_day\"]\n\n"
        "[costs]\ncarry_rate_annual = 0.05\nvisit_fee = 120\nemergency_visit_fee = 400\n"
        "handling_per_1000 = 0.8\ndry_day_penalty = 600\n\n"
        "[costs.visit_fee_by_weekday]\nSat = 180\n\n"
        "[service]\nmax_dry_probability = 0.05\n\n"
        "[paths]\ncount = 200\nseed = 11\n"
    )
    terminals = pd.DataFrame({
        "terminal_id": ["BRH-001", "BRH-002", "BRH-003"],
        "depot": "Brenholm",
        "capacity": [120000, 80000, 60000],
        "insurance_limit": [100000, 80000, 60000],
        "bundle": [2000, 2000, 1000],
        "balance_now": [42000, 30000, 18000],
        "visit_days": ["Mon|Tue|Wed|Thu|Fri", "Mon|Wed|Fri", "Tue|Thu|Sat"],
        "site": ["shopping centre", "station", "village"],
    })
    terminals.to_csv(OUT / "terminals.csv", index=False)
    pd.DataFrame({"depot": ["Brenholm"], "max_visits_per_day": [2]}).to_csv(
        OUT / "depots.csv", index=False)
    dates = pd.date_range("2026-09-07", periods=84, freq="D")
    profiles = {"BRH-001": (9000, [0.9, 0.9, 1.0, 1.1, 1.4, 1.5, 0.4]),
                "BRH-002": (6000, [1.2, 1.1, 1.1, 1.1, 1.3, 0.7, 0.6]),
                "BRH-003": (3000, [0.9, 0.9, 0.9, 1.0, 1.2, 1.3, 0.8])}
    rows = []
    for tid, (level, week) in profiles.items():
        noise = 0.0
        for d in dates:
            noise = 0.5 * noise + rng.normal(0, 0.15)
            amount = round(level * week[d.weekday()] * np.exp(noise), -1)
            rows.append((tid, d.date().isoformat(), amount, "ok"))
    frame = pd.DataFrame(rows, columns=["terminal_id", "date", "amount", "status"])
    frame.loc[(frame.terminal_id == "BRH-002") & (frame.date == "2026-10-14"), "status"] = "down"
    frame.loc[(frame.terminal_id == "BRH-002") & (frame.date == "2026-10-14"), "amount"] = 0
    frame.loc[(frame.terminal_id == "BRH-003") & (frame.date == "2026-11-07"), "status"] = "dry"
    frame.loc[(frame.terminal_id == "BRH-003") & (frame.date == "2026-11-07"), "amount"] = 1200
    frame = frame[~((frame.terminal_id == "BRH-001") & (frame.date == "2026-10-20"))]
    frame.to_csv(OUT / "dispense.csv", index=False)


if __name__ == "__main__":
    main()
