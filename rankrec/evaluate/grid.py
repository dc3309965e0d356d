"""The values ``rankrec evaluate`` sweeps (:class:`Grid`), and the names of its grids and splits: here,
apart from :mod:`.sweeps`, so that the command line shows the defaults without the sweeps' imports."""

from __future__ import annotations

from dataclasses import dataclass

from ..configuration import Configuration

SPLIT_NAMES = ("temporal", "last-n", "sessions", "links", "editorial")
GRID_NAMES = ("damping", "lift", "half_life_days", "navigation_weight", "text_weight", "title_weight")


@dataclass(frozen=True)
class Grid:
    """The values each sweep tries (common practice: damping around the classic 0.85; half-lives from a
    week to a year; navigation weight, lift and text weight over their whole useful range: lift below 0
    leans towards pages important site-wide, above 0 away from them)."""

    damping: tuple[float, ...] = (0.5, 0.7, 0.85, 0.95)
    lift: tuple[float, ...] = (-1.0, -0.5, 0.0, 0.25, 0.5, 0.75, 1.0)
    half_life_days: tuple[float, ...] = (7.0, 30.0, 90.0, 365.0)
    navigation_weight: tuple[float, ...] = (0.0, 0.3, 0.6, 0.9)
    text_weight: tuple[float, ...] = (0.0, 0.25, 0.5, 0.75)
    title_weight: tuple[float, ...] = (0.4,)

    def __post_init__(self) -> None:
        for name in GRID_NAMES:
            values = tuple(float(value) for value in getattr(self, name))
            if not values:
                raise ValueError(f"grid {name} must hold at least one value; got {getattr(self, name)!r}")
            for value in values:  # Configuration validates each value's range
                Configuration(**{name: value})
            object.__setattr__(self, name, values)

    @property
    def solves(self) -> int:
        """Upper bound of the index builds (damping × lift, half-life × navigation weight, damping × lift
        again, then text weight × lift when related lists mix text or a ranker, and the hub rule)."""
        return (
            2 * len(self.damping) * len(self.lift)
            + len(self.half_life_days) * len(self.navigation_weight)
            + len(self.text_weight) * len(self.lift)
            + 1
        )  # an upper bound
