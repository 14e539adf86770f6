"""Measured differences collected by the checks and printed as one table at the end of the pytest run."""

# (check, source and edition, worst difference, tolerance, unit)
FIGURES: list[tuple[str, str, float, float, str]] = []


def record(check: str, source: str, worst: float, tolerance: float, unit: str) -> None:
    """Keep one measured figure for the summary table (worst = signed difference of largest size)."""
    FIGURES.append((check, source, worst, tolerance, unit))


def worst(values):
    """The signed value of largest magnitude."""
    return max(values, key=abs)
