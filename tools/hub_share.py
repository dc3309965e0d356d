"""Share of served related lists with a hub or chrome page in their top 3, over every page of an index.

A hub is what ``rankrec evaluate`` counts in its "lists with a hub in their top 3" figure and what
serving keeps out of a list's first places (:func:`rankrec.derive.site_hubs`, stored in the index): a page
linked from a fifth of all pages, or from a twentieth with mostly page-chrome links, or a general index
or contents page linking to a fifth of them. The lists are those
the index serves a public viewer (:func:`rankrec.recommend.related`)::

    .venv/bin/python tools/hub_share.py --index DIR
"""

from __future__ import annotations

import argparse

import numpy as np

from rankrec.errors import RankrecError
from rankrec.index import load_index
from rankrec.recommend import related


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--index", required=True, help="the index folder")
    parser.add_argument("--show", type=int, default=10, metavar="N", help="hub pages to name")
    args = parser.parse_args(argv)
    index = load_index(args.index)
    hubs = {index.pages[int(number)] for number in np.flatnonzero(index.hubs)}
    with_hub, lists, counts = 0, 0, {}
    for number in range(index.size):
        page = index.pages[number]
        try:
            items = related(index, page, k=3).items
        except RankrecError:
            continue
        if not items:
            continue
        lists += 1
        found = [item.page for item in items if item.page in hubs]
        with_hub += bool(found)
        for name in found:
            counts[name] = counts.get(name, 0) + 1
    share = with_hub / lists if lists else float("nan")
    print(f"hub pages: {len(hubs)}; related lists: {lists}")
    print(f"with a hub in the top 3: {with_hub} ({share:.1%})")
    for name, count in sorted(counts.items(), key=lambda item: -item[1])[: args.show]:
        print(f"  {name}  {count}")
    return 0 if np.isfinite(share) else 1


if __name__ == "__main__":
    raise SystemExit(main())
