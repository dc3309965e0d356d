"""Helpers shared by the command modules: progress bars, pseudonymised user ids, opening an index."""

from __future__ import annotations

import argparse
from contextlib import contextmanager
from pathlib import Path

from ._output import print_rows


def progress_bar(description: str, unit: str, total: int | None = None):
    from tqdm import tqdm

    return tqdm(total=total, desc=description, unit=unit, unit_scale=True, leave=False, disable=None)


@contextmanager
def step_bars():
    """A ``progress(step, done, total)`` callback drawing one bar per step; closes them at the end."""
    bars: dict = {}

    def progress(step: str, done: int, total: int) -> None:
        bar = bars.get(step)
        if bar is None:
            bar = bars[step] = progress_bar(step, "it", total or None)
        bar.update(done - bar.n)

    try:
        yield progress
    finally:
        for bar in bars.values():
            bar.close()


def worker_count(text: str) -> int:
    """``--workers``' argparse type: a whole number of at least 1."""
    try:
        count = int(text)
    except ValueError:
        count = 0
    if count < 1:
        raise argparse.ArgumentTypeError(f"must be a whole number of at least 1; got {text!r}")
    return count


def add_cluster_option(parser: argparse.ArgumentParser, work: str, *, reads_folder: bool = True) -> None:
    """``--cluster``: run ``work`` as tasks of a Dask cluster (:mod:`rankrec.cluster`); ``reads_folder``:
    the tasks read the index folder (else what they need is sent to each worker)."""
    needs = "see the index folder at the same path" if reads_folder else "have the memory for the evidence"

    def address(text: str):
        from .cluster import cluster_address
        from .errors import UsageError

        try:
            return cluster_address(text)
        except UsageError as error:
            raise argparse.ArgumentTypeError(str(error)) from error

    parser.add_argument(
        "--cluster",
        type=address,
        metavar="ADDRESS",
        help=f"run {work} on a Dask cluster: tcp://HOST:PORT (a running scheduler; its workers must run "
        f"this rankrec and {needs}) or local:N (N worker processes started here); needs pip install "
        "'rankrec[cluster]'",
    )


def pseudonym_key(args: argparse.Namespace) -> bytes | None:
    from .privacy import load_key

    return None if args.pseudonym_key is None else load_key(args.pseudonym_key)


def stored_user(args: argparse.Namespace, user: str) -> str:
    """The id ``user`` is stored under: its keyed pseudonym when ``--pseudonym-key`` is given."""
    from .privacy import stored_id

    return stored_id(pseudonym_key(args), user)


def open_index(args: argparse.Namespace, *, need_store: bool):
    """The index, and its store (checked current) from --wiki or the manifest (None: not needed, absent)."""
    from .index import load_index
    from .store import Store

    index = load_index(args.index)
    wiki = args.wiki or index.manifest.store
    if args.wiki is None and not need_store and not Path(wiki).is_file():
        return index, None
    store = Store(wiki, create=False)
    try:
        index.check_current(store)
    except BaseException:
        store.close()
        raise
    return index, store


def list_urls(args: argparse.Namespace, store):
    """Page id -> URL for a Markdown list: ``--url-template``, else the store's URLs (None: no store)."""
    from .export import url_of

    template = getattr(args, "url_template", None)
    if template is None and store is None:
        return lambda page: None
    return url_of({} if template is not None else store.page_urls(), template)


def print_list(result, format: str, url=None, *, heading: str | None = None) -> None:
    """A list as rows (table, JSON, CSV) or, for ``md``, a Markdown heading and a bulleted list of links
    (``url(page)``; an item without a URL gives its title and page id), each with its reason."""
    from .blocks import escaped_title

    if format != "md":
        print_rows(result.rows(), format)
        return
    lines = [f"## {heading}", ""] if heading else []
    for item in result.items:
        title = escaped_title(item.title or item.page)
        target = None if url is None else url(item.page)
        shown = f"[{title}]({target})" if target else f"{title} (`{item.page}`)"
        lines.append(f"- {shown}: {item.reason}")
    print("\n".join(lines))
