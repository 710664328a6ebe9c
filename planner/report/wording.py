"""Fixed wording shared by the HTML report and the spreadsheet (README, "Cautions")."""

CAUTIONS = (
    "Plans are decision support: a person reviews every plan before any dispatch.",
    "Cash-in-transit work carries risk to people: follow local law, the insurer's terms and "
    "licensed security practice, which always win over any plan.",
    "Plans say when and where cash moves: treat this report as confidential, keep run folders "
    "private, and vary visit patterns as your security policy requires.",
)

PART_LABELS = {
    "carry": "carry cost of cash held",
    "visit": "visit fees",
    "handling": "handling of cash loaded and returned",
    "dry_penalty": "dry-day penalties",
    "shortfall_penalty": "shortfall penalties",
    "total": "total",
}
