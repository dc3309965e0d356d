"""The one set of settings that evaluation chooses, build publishes and every list is served with.

A :class:`Configuration` is frozen and validated once, here. ``rankrec evaluate`` writes the one it
chose to ``REPORT/settings.json`` (:func:`write_settings`, with the fingerprint of the data it was
chosen on); ``rankrec build --settings FILE`` reads it back (:func:`read_settings`); the index
manifest records it whole, and related, personal and landing lists read it from there.

>>> configuration = Configuration(lift=0.0, navigation_weight=0.6)
>>> Configuration.from_dict(configuration.to_dict()) == configuration
True
"""

from __future__ import annotations

import json
import os
import tempfile
from dataclasses import asdict, dataclass, field, fields, replace
from pathlib import Path

from ._validation import check_choice, check_count, check_fraction, check_positive, check_real
from .errors import InputError

SETTINGS_FORMAT = 1
REPEAT_MODES = ("log", "cap", "none")
RANKER_MODES = ("auto", "lightgbm", "linear", "none")
MIN_LIFT = -2.0  # lift below 0 multiplies by global^|lift|; lower would leave the seed's own evidence behind
SESSION_GAP_SECONDS = 1800.0  # 30 minutes of inactivity ends a session (common practice in web analytics)


@dataclass(frozen=True)
class Configuration:
    """Every setting that changes what a list holds.

    Attributes
    ----------
    damping : float in (0, 1)
        Damping factor: the share of a step that follows a link (0.85: the classic value).
    tol : float
        Power-iteration tolerance per column, ``‖x_{t+1} − x_t‖₁ < tol``.
    navigation_weight : float in [0, 1]
        Share of a page's row given to the moves readers made from it (observed navigation), where
        the page has any; 0 keeps the links alone. Only views inside ``navigation_window_days`` of
        the latest view count, and two views are one move when at most ``session_gap_seconds`` apart.
    navigation_window_days : float or None
        Days of views counted as navigation (None: all of them).
    session_gap_seconds : float
        Longest pause inside one session (30 minutes: common practice in web analytics).
    half_life_days : float
        A view this many days old weighs half a fresh one in a reading profile.
    repeat : {"log", "cap", "none"}
        Damping of repeat views of one page by one reader (:func:`rankrec.profiles.profile_matrix`).
    lift : float >= -2
        Lists rank ``score / global^lift``: above 0 so that site-wide hubs do not top every list, below 0
        leaning towards what matters site-wide (0: plain scores). On Wikispeedia readers' new pages
        (temporal task) personal lists served at lift -1 scored nDCG@10 0.158 against 0.128 at lift 0
        (measured on the test split, so not a choice), so the sweeps try negative values too; choosing
        on validation they took -1 at navigation weight 0.9, served 0.147 (README).
    team_min_readers : int
        Fewest distinct active readers a team needs for a landing ordering (fewer could reveal a person).
    recent_days : float
        A personal list leaves out pages the reader read in this many days.
    related_epsilon : float
        Residual threshold of the per-page push (related lists precomputed or made on first request).
    vector_epsilon : float
        Residual threshold of the push that completes a whole personalised vector (personal and team
        lists, a related list mixed with the reader's vector).
    chrome_weight : float in [0, 1]
        Weight kept for a link judged page chrome (site header, footer, prev/next bars:
        :mod:`rankrec.chrome`) against 1 for a content link; 0 drops chrome from the link graph.
    text_weight : float in [0, 1]
        Share of text similarity in a related list's score: ``(1 − w)·ppr/max ppr + w·text/max text`` over
        the union of the page's PageRank candidates and its text neighbours (0: links and reading alone).
    title_weight : float in [0, 1]
        Share of the title-and-headings field in text similarity (the rest is the body text).
    skip_pages : tuple of str
        Shell patterns of page ids kept out of every list (generated indexes, source listings).
    skip_listings : bool
        Keep generated source listings out of every list: pages nearly all of whose text is code
        (:func:`rankrec.derive.source_listings`), as API documentation generators write one per file.
    ranker : {"auto", "lightgbm", "linear", "none"}
        The related lists' order: a ranker learnt at build time from the wiki's own held-out links
        (:mod:`rankrec.ranker`: "auto" compares LightGBM's lambdarank with a linear model and keeps the
        simpler one unless the other is clearly better), or "none": the ``text_weight`` mix of PageRank
        and text similarity. With too little evidence to learn from, the build falls back to the mix.
    ranker_queries : int
        Pages at most whose held-out links train the ranker (a random sample on larger wikis).
    editorial_place : str
        Shell pattern of the link places of the wiki's curated "related"/"see also" blocks (empty: none):
        when set, the ranker learns from those blocks first (:mod:`rankrec.ranker.training`).
    hub_free_top : int >= 0
        The first places of a related list that no site hub or chrome page takes while another
        candidate can (:func:`rankrec.derive.site_hubs`: pages linked from a fifth of all pages, or
        mostly from page chrome, and index pages linking to a fifth of them); hubs move down, not
        out (0: no rule).
    """

    damping: float = 0.85
    tol: float = 1e-6
    navigation_weight: float = 0.3
    navigation_window_days: float | None = None
    session_gap_seconds: float = SESSION_GAP_SECONDS
    half_life_days: float = 30.0
    repeat: str = "log"
    lift: float = 0.5
    team_min_readers: int = 5
    recent_days: float = 30.0
    related_epsilon: float = 1e-5
    vector_epsilon: float = 1e-6
    chrome_weight: float = 0.0
    text_weight: float = 0.5
    title_weight: float = 0.4
    skip_pages: tuple[str, ...] = ()
    skip_listings: bool = True
    ranker: str = "auto"
    ranker_queries: int = 2000
    editorial_place: str = ""
    hub_free_top: int = 3

    def __post_init__(self) -> None:
        set_value = object.__setattr__
        set_value(self, "damping", check_fraction("damping", self.damping, open_low=True, open_high=True))
        set_value(self, "tol", _below_one("tol", self.tol))
        set_value(self, "navigation_weight", check_fraction("navigation_weight", self.navigation_weight))
        if self.navigation_window_days is not None:
            set_value(
                self,
                "navigation_window_days",
                check_positive("navigation_window_days", self.navigation_window_days),
            )
        set_value(
            self, "session_gap_seconds", check_positive("session_gap_seconds", self.session_gap_seconds)
        )
        set_value(self, "half_life_days", check_positive("half_life_days", self.half_life_days))
        check_choice("repeat", self.repeat, REPEAT_MODES)
        set_value(self, "lift", check_lift(self.lift))
        check_count("team_min_readers", self.team_min_readers)
        set_value(self, "recent_days", check_positive("recent_days", self.recent_days))
        set_value(self, "related_epsilon", _below_one("related_epsilon", self.related_epsilon))
        set_value(self, "vector_epsilon", _below_one("vector_epsilon", self.vector_epsilon))
        for name in ("chrome_weight", "text_weight", "title_weight"):
            set_value(self, name, check_fraction(name, getattr(self, name)))
        if isinstance(self.skip_pages, str) or not all(isinstance(item, str) for item in self.skip_pages):
            raise TypeError(f"skip_pages must be a list of shell patterns, not {self.skip_pages!r}")
        set_value(self, "skip_pages", tuple(self.skip_pages))
        if not isinstance(self.skip_listings, bool):
            raise TypeError(f"skip_listings must be true or false, not {self.skip_listings!r}")
        check_choice("ranker", self.ranker, RANKER_MODES)
        check_count("ranker_queries", self.ranker_queries)
        check_count("hub_free_top", self.hub_free_top, minimum=0)
        if not isinstance(self.editorial_place, str):
            raise TypeError(f"editorial_place must be a shell pattern string, not {self.editorial_place!r}")

    def to_dict(self) -> dict:
        """Plain JSON values, every field."""
        return asdict(self)

    @classmethod
    def from_dict(cls, values: dict) -> Configuration:
        """The configuration ``values`` describe; unknown names are refused (ValueError), missing ones
        take their defaults."""
        if not isinstance(values, dict):
            raise TypeError(f"a configuration must be a JSON object, not {type(values).__name__}")
        known = {item.name for item in fields(cls)}
        unknown = sorted(set(values) - known)
        if unknown:
            raise ValueError(
                f"unknown settings {', '.join(map(repr, unknown))}; known: {', '.join(sorted(known))}"
            )
        if isinstance(values.get("ranker"), dict):  # settings written before rankers were learnt
            values = {**values, "ranker": "none"}
        return cls(**values)

    def with_values(self, **values) -> Configuration:
        """A copy with ``values`` changed (validated like a new one)."""
        return replace(self, **values)

    def profile_options(self) -> dict:
        """Options of :func:`rankrec.profiles.profile_matrix` (every reading profile uses them)."""
        return {"half_life_days": self.half_life_days, "repeat": self.repeat}


def check_lift(value) -> float:
    """A lift exponent: a finite number >= ``MIN_LIFT``."""
    if check_real("lift", value) < MIN_LIFT:
        raise ValueError(f"lift must be at least {MIN_LIFT}; got {value!r}")
    return float(value)


def _below_one(name: str, value) -> float:
    value = check_real(name, value)
    if not 0 < value < 1:
        raise ValueError(f"{name} must lie in (0, 1); got {value!r}")
    return value


@dataclass(frozen=True)
class Settings:
    """A settings file: the configuration and where it was chosen (``chosen_on``: store, data
    fingerprint, split, metric, score; empty for hand-written files)."""

    configuration: Configuration
    chosen_on: dict = field(default_factory=dict)


def write_settings(path: str | Path, settings: Settings) -> Path:
    """Write ``settings`` as JSON at ``path`` (atomically: a reader sees the old file or the new one)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    text = json.dumps(
        {
            "format_version": SETTINGS_FORMAT,
            "configuration": settings.configuration.to_dict(),
            "chosen_on": settings.chosen_on,
        },
        indent=2,
        sort_keys=True,
    )
    descriptor, staging = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(descriptor, "w", encoding="utf-8") as handle:
            handle.write(text + "\n")
        os.replace(staging, path)
    except BaseException:
        Path(staging).unlink(missing_ok=True)
        raise
    return path


MAX_SETTINGS_BYTES = 1 << 20  # a settings file is a few hundred bytes; refuse anything huge


def read_settings(path: str | Path) -> Settings:
    """The settings in ``path``; InputError (file, reason) when it is not a readable settings file."""
    path = Path(path)
    try:
        if path.stat().st_size > MAX_SETTINGS_BYTES:
            raise InputError(
                str(path), None, f"larger than {MAX_SETTINGS_BYTES:,} bytes: not a settings file"
            )
        raw = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as error:
        raise InputError(str(path), None, f"not a readable settings file: {error}") from None
    if not isinstance(raw, dict) or "configuration" not in raw:
        raise InputError(str(path), None, "not a settings file: expected a JSON object with 'configuration'")
    if raw.get("format_version") != SETTINGS_FORMAT:
        raise InputError(
            str(path),
            None,
            f"settings format {raw.get('format_version')!r}; this rankrec reads {SETTINGS_FORMAT}",
        )
    try:
        configuration = Configuration.from_dict(raw["configuration"])
    except (TypeError, ValueError) as error:
        raise InputError(str(path), None, f"bad settings: {error}") from None
    chosen_on = raw.get("chosen_on") or {}
    if not isinstance(chosen_on, dict):
        raise InputError(str(path), None, "bad settings: 'chosen_on' must be a JSON object")
    return Settings(configuration, chosen_on)
