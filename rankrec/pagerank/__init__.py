"""rankrec's numeric core: PageRank solvers over a prepared link matrix (arrays in, arrays out).

This package imports no other rankrec module.

- :func:`prepare` builds a reusable :class:`Transition` from a sparse adjacency matrix.
- :func:`personalised_pagerank` runs the block power iteration for ``k`` restart distributions at once.
- :func:`combine` mixes leaky vectors into the exact PageRank of a restart mix.
- :func:`push` approximates one seed's (or a few seeds') vector locally.
- :func:`solve_exact` is the direct sparse solve used as a reference on small graphs.
- :func:`mass_on` bounds, for every seed at once, the personalised PageRank mass on a set of pages
  (reverse push), and :func:`change_bound` how far each seed's vector can move when rows change.
"""

from .exact import solve_exact
from .power import combine, personalised_pagerank
from .push import push
from .reach import ReachResult, change_bound, changed_pages, changed_rows, mass_on, row_changes
from .results import ConvergenceWarning, PageRankResult, PushResult
from .transition import Transition, prepare

__all__ = [
    "ConvergenceWarning",
    "PageRankResult",
    "PushResult",
    "ReachResult",
    "Transition",
    "change_bound",
    "changed_pages",
    "changed_rows",
    "combine",
    "mass_on",
    "personalised_pagerank",
    "prepare",
    "push",
    "row_changes",
    "solve_exact",
]
