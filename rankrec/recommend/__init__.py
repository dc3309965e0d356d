"""Related pages, personal lists and team landing orderings from a published index.

- :func:`related`, :func:`recommend`, :func:`landing` make the lists (:class:`Recommendations`);
- :func:`reader_from_store` and :func:`team_from_store` say whom a list is for;
- :func:`read_previous` and :func:`changes_since` compare a list with an earlier export.
"""

from .audience import Reader, Team, reader_from_store, team_from_store
from .changes import changes_since, read_previous
from .lists import Item, Recommendations, landing, recommend, related

__all__ = [
    "Item",
    "Reader",
    "Recommendations",
    "Team",
    "changes_since",
    "landing",
    "read_previous",
    "reader_from_store",
    "recommend",
    "related",
    "team_from_store",
]
