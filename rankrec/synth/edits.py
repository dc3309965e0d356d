"""A day's edits to a synthetic wiki (:func:`rankrec.synth.synthesize`'s output), for rebuild tests and
benchmarks: a share of the pages each gain a sentence and a link to another page of the wiki. The
sentence is made of words of the page's own text (a revision about its own subject), or, on a page
without text, says that it was revised.

A Markdown wiki's page files are edited in place (the next import of the folder reads the new snapshot);
a wiki of tables gets ``edits/pages.csv`` (the edited pages' rows, text extended) and ``edits/links.csv``
(their links, the new one last: an edge list import replaces the out-links of the pages it lists) to
import after the first import.

>>> import tempfile, pathlib
>>> from rankrec.synth import synthesize
>>> with tempfile.TemporaryDirectory() as tmp:
...     wiki = synthesize(pathlib.Path(tmp) / "wiki", pages=200, seed=1, layout="tables").out_dir
...     edited = edit_wiki(wiki, share=0.05, seed=2)
...     rows = (wiki / "edits" / "links.csv").read_text().splitlines()
>>> len(edited), rows[0], len({row.split(",")[0] for row in rows[1:]})
(10, 'source,target', 10)
"""

from __future__ import annotations

import csv
import os
from pathlib import Path

import numpy as np

SENTENCE = "This page was revised."
WORDS = 12  # words of the page's own text in its new sentence


def _pick(count: int, share: float, rng: np.random.Generator) -> np.ndarray:
    if not 0 < share <= 1:
        raise ValueError(f"share must be in (0, 1], got {share!r}")
    return np.sort(rng.choice(count, max(1, round(count * share)), replace=False))


def _other(number: int, count: int, rng: np.random.Generator) -> int:
    """A page number other than ``number`` (``count`` > 1 pages)."""
    other = int(rng.integers(count - 1))
    return other + (other >= number)


def _sentence(text: str, rng: np.random.Generator) -> str:
    """:data:`WORDS` words drawn from ``text`` (:data:`SENTENCE` when it has none)."""
    words = text.split()
    if not words:
        return SENTENCE
    return " ".join(words[int(number)] for number in rng.integers(len(words), size=WORDS)) + "."


def _edit_markdown(pages: Path, share: float, rng: np.random.Generator) -> list[str]:
    files = sorted(pages.rglob("*.md"))
    edited = []
    for number in _pick(len(files), share, rng).tolist():
        path, other = files[number], files[_other(number, len(files), rng)]
        link = os.path.relpath(other, path.parent)
        body = path.read_text(encoding="utf-8")
        prose = body.split("---", 2)[-1]  # after the front matter
        sentence = _sentence(" ".join(word for word in prose.split() if word.isalpha()), rng)
        path.write_text(body + f"\n{sentence} See [{other.stem}]({link}).\n", encoding="utf-8")
        edited.append(path.relative_to(pages).with_suffix("").as_posix())
    return edited


def _edit_tables(wiki: Path, share: float, rng: np.random.Generator) -> list[str]:
    with open(wiki / "pages.csv", newline="", encoding="utf-8") as source:
        reader = csv.reader(source)
        header = next(reader)
        rows = list(reader)
    text = header.index("text") if "text" in header else None
    chosen = _pick(len(rows), share, rng)
    ids = [rows[number][0] for number in chosen.tolist()]
    links: dict[str, list[str]] = {page: [] for page in ids}
    with open(wiki / "links.csv", newline="", encoding="utf-8") as source:
        for row in csv.reader(source):
            if row and row[0] in links:
                links[row[0]].append(row[1])
    (wiki / "edits").mkdir(exist_ok=True)
    with open(wiki / "edits" / "pages.csv", "w", newline="", encoding="utf-8") as pages:
        written = csv.writer(pages)
        written.writerow(header)
        for number in chosen.tolist():
            row = list(rows[number])
            if text is not None:
                row[text] = f"{row[text]} {_sentence(row[text], rng)}".strip()
            written.writerow(row)
    with open(wiki / "edits" / "links.csv", "w", newline="", encoding="utf-8") as edges:
        written = csv.writer(edges)
        written.writerow(["source", "target"])
        number_of = dict(zip(ids, chosen.tolist(), strict=True))
        for page in ids:
            new = rows[_other(number_of[page], len(rows), rng)][0]
            written.writerows([page, target] for target in [*links[page], new])
    return ids


def edit_wiki(wiki: str | Path, *, share: float = 0.01, seed: int = 0) -> list[str]:
    """Edit ``share`` of the pages of the synthetic wiki at ``wiki`` (module docstring); return their ids."""
    wiki = Path(wiki)
    rng = np.random.default_rng(seed)
    if (wiki / "pages").is_dir():
        return _edit_markdown(wiki / "pages", share, rng)
    return _edit_tables(wiki, share, rng)
