"""Invented page text: words of an invented vocabulary drawn from Zipf laws, with topics.

The vocabulary is ``size`` distinct made-up words of 3 to 9 lower-case letters. Each topic owns
``TOPIC_WORDS`` words of it. A page's words come, each with probability ``share``, from its topic's
words (Zipf-weighted within the topic), else from the whole vocabulary's Zipf law (exponent 1.1):
pages on one topic share words that the rest of the wiki seldom uses, as related pages do. Everything
is drawn in numpy arrays, a chunk of pages at a time; text is rendered as UTF-8 bytes, words separated
by one space (no comma, quote or line break, so a CSV field holds it unquoted).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

VOCABULARY = 200_000
TOPIC_WORDS = 300
EXPONENT = 1.1
_LONGEST = 9  # letters of the longest invented word


@dataclass(frozen=True)
class Lexicon:
    """The invented vocabulary, its Zipf law, and each topic's own words."""

    words: np.ndarray  # S10: each word followed by a space; then b" " (a page without words)
    overall: np.ndarray  # float64: cumulative Zipf law over the vocabulary
    overall_guide: np.ndarray  # int64: where each of GUIDE equal steps of ``overall`` starts
    within: np.ndarray  # float64: cumulative Zipf law over a topic's words
    topic_words: np.ndarray  # int32 (topics, TOPIC_WORDS): word numbers

    @property
    def size(self) -> int:
        return self.words.size - 1


GUIDE = 1 << 20


def vocabulary(size: int, rng: np.random.Generator) -> np.ndarray:
    """``size`` distinct invented words of 3 to 9 letters (``S9`` bytes), in a random order."""
    found = np.zeros(0, dtype=f"S{_LONGEST}")
    while found.size < size:
        lengths = rng.integers(3, _LONGEST + 1, size=size)
        letters = rng.integers(ord("a"), ord("z") + 1, size=(size, _LONGEST), dtype=np.uint8)
        letters[np.arange(_LONGEST) >= lengths[:, None]] = 0
        drawn = np.concatenate([found, letters.view(f"S{_LONGEST}").ravel()])
        first = np.unique(drawn, return_index=True)[1]
        found = drawn[np.sort(first)]  # the first of each word, in drawing order
    return found[:size]


def _law(count: int, exponent: float) -> np.ndarray:
    weights = 1.0 / np.arange(1, count + 1) ** exponent
    return np.cumsum(weights / weights.sum())


def lexicon(topics: int, rng: np.random.Generator, *, size: int = VOCABULARY, exponent: float = EXPONENT):
    """A vocabulary of ``size`` words and ``topics`` topics of :data:`TOPIC_WORDS` words each."""
    words = np.strings.add(np.r_[vocabulary(size, rng), np.array([b""], dtype="S1")], b" ")
    topic_words = rng.integers(0, size, size=(max(1, topics), TOPIC_WORDS)).astype(np.int32)
    overall = _law(size, exponent)
    guide = np.searchsorted(overall, np.arange(GUIDE + 1) / GUIDE)
    return Lexicon(words, overall, guide, _law(TOPIC_WORDS, exponent), topic_words)


def _zipf(lexicon: Lexicon, uniform: np.ndarray) -> np.ndarray:
    """``searchsorted(lexicon.overall, uniform)``, through the guide table: only the few draws whose
    step of the law holds more than one word are searched."""
    step = (uniform * GUIDE).astype(np.int64)
    found = lexicon.overall_guide[step]
    search = np.flatnonzero(lexicon.overall_guide[step + 1] > found)
    found[search] = np.searchsorted(lexicon.overall, uniform[search])
    return np.minimum(found, lexicon.size - 1)


def draw(lexicon: Lexicon, counts: np.ndarray, topic: np.ndarray, share: float, rng) -> np.ndarray:
    """Word numbers of pages with ``counts`` words on ``topic`` each, page after page (int32)."""
    total = int(counts.sum())
    chosen = _zipf(lexicon, rng.random(total))
    own = np.flatnonzero(rng.random(total) < share)
    rank = np.minimum(np.searchsorted(lexicon.within, rng.random(own.size)), TOPIC_WORDS - 1)
    chosen[own] = lexicon.topic_words[np.repeat(topic, counts)[own], rank]
    return chosen.astype(np.int32)


def render(lexicon: Lexicon, chosen: np.ndarray, counts: np.ndarray, end: bytes = b"\n"):
    """The pages' words joined by single spaces, each page followed by the byte ``end``.

    ``chosen`` and ``counts`` as :func:`draw` gives them. Returns the bytes of every page back to
    back (uint8) and each page's length in bytes, ``end`` included (a page without words is ``end``).
    """
    if len(end) != 1 or end in b"\0 ":
        raise ValueError(f"end must be one byte other than NUL and space; got {end!r}")
    pieces = np.maximum(counts, 1)  # a page without words is one empty word
    numbers = np.full(int(pieces.sum()), lexicon.size, dtype=np.int64)
    numbers[np.repeat(counts > 0, pieces)] = chosen
    grid = lexicon.words[numbers].view(np.uint8).reshape(numbers.size, -1)
    sizes = np.strings.str_len(lexicon.words)[numbers]
    last = np.cumsum(pieces) - 1
    grid[last, sizes[last] - 1] = end[0]  # the last word's space
    lengths = np.add.reduceat(sizes, np.r_[0, last[:-1] + 1]) if counts.size else sizes[:0]
    return grid[grid != 0], lengths


def page_texts(lexicon: Lexicon, counts: np.ndarray, topic: np.ndarray, share: float, rng) -> list[str]:
    """Pages of invented text as :func:`draw` and :func:`render` make them, one str each."""
    flat, _ = render(lexicon, draw(lexicon, counts, topic, share, rng), counts)
    return flat.tobytes().decode("ascii").split("\n")[:-1]


def _child(seed: np.random.SeedSequence, key: int) -> np.random.Generator:
    """The generator of stream ``key`` under ``seed`` (what ``seed.spawn`` would make, by number)."""
    return np.random.default_rng(np.random.SeedSequence(seed.entropy, spawn_key=(*seed.spawn_key, key)))


@dataclass(frozen=True)
class WikiText:
    """The text of every page of a wiki, drawn a chunk of pages at a time.

    ``counts[i]`` words (Poisson around the mean, none on 1% of the pages) on ``topic[i]``, a
    :data:`BODY_SHARE` of them the topic's. A chunk's words come from a stream of their own, so a
    chunk is the same whichever chunks are drawn before it.
    """

    lexicon: Lexicon
    counts: np.ndarray
    topic: np.ndarray
    seed: np.random.SeedSequence

    def chunk(self, number: int, part: slice) -> tuple[np.ndarray, np.ndarray]:
        """Bytes and lengths (:func:`render`, pages ending in a line break) of pages ``part``."""
        counts = self.counts[part]
        rng = _child(self.seed, 1 + number)
        return render(self.lexicon, draw(self.lexicon, counts, self.topic[part], BODY_SHARE, rng), counts)


BODY_SHARE = 0.3
EMPTY_SHARE = 0.01
TOPIC_PAGES = 100  # pages per topic, about


def wiki_text(space_sizes: np.ndarray, words: float, seed: np.random.SeedSequence) -> WikiText:
    """Text for a wiki whose spaces hold ``space_sizes`` pages (in page order), ``words`` a page.

    Each space has one topic per :data:`TOPIC_PAGES` of its pages (at least one); a page's topic is
    one of its space's, drawn uniformly.
    """
    rng = _child(seed, 0)
    pages = int(space_sizes.sum())
    per_space = np.maximum(1, np.round(space_sizes / TOPIC_PAGES).astype(np.int64))
    first = np.r_[0, np.cumsum(per_space)[:-1]]
    space = np.repeat(np.arange(space_sizes.size), space_sizes)
    topic = first[space] + (rng.random(pages) * per_space[space]).astype(np.int64)
    counts = np.where(rng.random(pages) < EMPTY_SHARE, 0, rng.poisson(words, size=pages))
    return WikiText(lexicon(int(per_space.sum()), rng), counts.astype(np.int64), topic, seed)


def corpus(pages: int, words: float, *, seed: int = 0, batch: int = 10_000):
    """Headings and bodies of ``pages`` pages on ``pages // 100`` topics, ``batch`` pages at a time.

    The text benchmark's corpus: a page's topic is drawn uniformly; its headings hold 2 to 11
    words, 70% of them its topic's, its text about ``words`` (Poisson), 30% its topic's; 1% of
    the pages are empty. Yields ``(headings, bodies)`` lists of str, the same for the same arguments.
    """
    setup = np.random.default_rng(seed)
    words_of = lexicon(max(1, pages // TOPIC_PAGES), setup)
    for number, first in enumerate(range(0, pages, batch)):
        count = min(batch, pages - first)
        rng = np.random.default_rng([seed, number])
        empty = rng.random(count) < EMPTY_SHARE
        topic = rng.integers(0, words_of.topic_words.shape[0], size=count)
        heading_counts = np.where(empty, 0, rng.integers(2, 12, size=count))
        body_counts = np.where(empty, 0, rng.poisson(words, size=count))
        yield (
            page_texts(words_of, heading_counts, topic, 0.7, rng),
            page_texts(words_of, body_counts, topic, BODY_SHARE, rng),
        )
