"""rankrec's numeric core: PageRank solvers over a prepared link matrix (arrays in, arrays out).

This package imports no other rankrec module.

- :func:`prepare` builds a reusable :class:`Transition` from a sparse adjacency matrix.
- :func:`personalised_pagerank` runs the block power iteration for ``k`` restart distributions at once.
- :func:`combine` mixes leaky vectors into the exact PageRank of a restart mix.
- :func:`push` approximates one seed's (or a few seeds') vector locally.
- :func:`solve_exact` is the direct sparse solve used as a reference on small graphs.
"""

from .exact import solve_exact
from .power import combine, personalised_pagerank
from .push import push
from .results import ConvergenceWarning, PageRankResult, PushResult
from .transition import Transition, prepare

__all__ = [
    "ConvergenceWarning",
    "PageRankResult",
    "PushResult",
    "Transition",
    "combine",
    "personalised_pagerank",
    "prepare",
    "push",
    "solve_exact",
]
