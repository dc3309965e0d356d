"""The invented wiki: spaces of heavy-tailed sizes, pages with titles and ids, links.

Pages are held in arrays, grouped by space (space ``s`` holds pages
``space_start[s]:space_start[s + 1]``). Strings are UTF-8 ``bytes`` arrays (numpy ``S``
dtype), which numpy joins and gathers fast. Links are a CSR adjacency without self-links
or repeated pairs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from urllib.parse import quote

import numpy as np

from . import _words

DANGLING_SHARE = 0.07  # pages without out-links
ARCHIVED_SHARE = 0.05
RESTRICTED_SHARE = 0.07
CROSS_SPACE_SHARE = 0.2  # links whose target is drawn from the whole wiki, not the page's space
MAX_OUT_DEGREE = 1000


@dataclass(frozen=True)
class Wiki:
    ids: np.ndarray  # S: page id, e.g. b"ops/runbooks/backup-weekly-runbook"
    quoted_ids: np.ndarray  # S: the id percent-encoded for URLs
    titles: np.ndarray  # S
    tags: np.ndarray  # S: ";"-joined
    space: np.ndarray  # int16, index into space_names
    space_names: tuple[str, ...]
    space_start: np.ndarray  # int64, len(space_names) + 1
    archived: np.ndarray  # bool
    group: np.ndarray  # int8: index into group_names, -1 = everyone may see the page
    group_names: tuple[str, ...]
    popularity: np.ndarray  # float64 > 0: how often a page is chosen as a link target or a read
    indptr: np.ndarray  # int64, CSR of links
    targets: np.ndarray  # int32

    @property
    def size(self) -> int:
        return len(self.ids)

    @property
    def links(self) -> int:
        return len(self.targets)

    @property
    def out_degree(self) -> np.ndarray:
        return np.diff(self.indptr)


def space_count(pages: int) -> int:
    """How many spaces a wiki of ``pages`` pages has: 3 for tiny wikis, all 16 from ~1,000 pages."""
    return min(len(_words.SPACES), max(3, round(2 * math.log2(pages / 10)) + 3))


def _table(words, shown=False, prefix="", suffix="") -> np.ndarray:
    text = [prefix + (_words.shown(word) if shown else word.lower()) + suffix for word in words]
    return np.array([t.encode() for t in text], dtype="S")


def _quoted_table(words, suffix="") -> np.ndarray:
    return np.array([(quote(word.lower()) + suffix).encode() for word in words], dtype="S")


def _join(*parts: np.ndarray | bytes) -> np.ndarray:
    result = parts[0]
    for part in parts[1:]:
        result = np.strings.add(result, part)
    return result


def _repeat_rank(codes: np.ndarray) -> np.ndarray:
    """For each element, how many equal elements come before it (0 for the first)."""
    order = np.argsort(codes, kind="stable")
    ordered = codes[order]
    starts = np.flatnonzero(np.r_[True, ordered[1:] != ordered[:-1]])
    lengths = np.diff(np.r_[starts, len(codes)])
    rank_sorted = np.arange(len(codes)) - np.repeat(starts, lengths)
    rank = np.empty(len(codes), dtype=np.int64)
    rank[order] = rank_sorted
    return rank


def _space_sizes(pages: int, rng: np.random.Generator) -> np.ndarray:
    count = space_count(pages)
    weights = rng.permutation((np.arange(count) + 1.0) ** -1.1)  # Zipf-like: a few big spaces
    return 1 + rng.multinomial(pages - count, weights / weights.sum())


def _titles(sizes: np.ndarray, rng: np.random.Generator):
    """Topic, qualifier, kind and code-name indexes per page, unique within each space."""
    n_qual, n_kind = len(_words.QUALIFIERS), len(_words.KINDS)
    topics, quals, kinds, codes, repeats = [], [], [], [], []
    offset = 0
    for space, size in zip(_words.SPACES, sizes, strict=False):
        n_topic = len(_words.SPACE_TOPICS[space])
        base = n_topic * n_qual * n_kind
        span = base if size <= base // 2 else base * (1 + len(_words.CODENAMES))
        combo = rng.choice(span, size=int(size), replace=bool(size > span))
        rest = combo % base
        topics.append(offset + rest // (n_qual * n_kind))
        quals.append((rest // n_kind) % n_qual)
        kinds.append(rest % n_kind)
        codes.append(combo // base)
        repeats.append(_repeat_rank(combo))
        offset += n_topic
    return tuple(np.concatenate(parts) for parts in (topics, quals, kinds, codes, repeats))


def _names(space, topic, qual, kind, code, repeat):
    space_names = _words.SPACES[: int(space.max()) + 1]
    all_topics = [t for s in _words.SPACES for t in _words.SPACE_TOPICS[s]]
    folders = [
        [
            f"{s}/{_words.SUBFOLDER_KINDS[k]}/" if k in _words.SUBFOLDER_KINDS else f"{s}/"
            for k in _words.KINDS
        ]
        for s in space_names
    ]
    folder_table = np.array([f.encode() for row in folders for f in row], dtype="S")
    folder_quoted = np.array([quote(f).encode() for row in folders for f in row], dtype="S")
    folder = space.astype(np.int64) * len(_words.KINDS) + kind
    code_slug = np.r_[np.array([b""], dtype="S"), _table(_words.CODENAMES, suffix="-")]
    code_shown = np.r_[np.array([b""], dtype="S"), _table(_words.CODENAMES, shown=True, suffix=" ")]
    number = (repeat + 1).astype("S")
    slug_suffix = np.where(repeat > 0, np.strings.add(b"-", number), b"")
    title_suffix = np.where(repeat > 0, np.strings.add(b" ", number), b"")
    slug = _join(
        code_slug[code],
        _table(all_topics, suffix="-")[topic],
        _table(_words.QUALIFIERS, suffix="-")[qual],
        _table(_words.KINDS)[kind],
        slug_suffix,
    )
    quoted_slug = _join(
        code_slug[code],
        _quoted_table(all_topics, "-")[topic],
        _quoted_table(_words.QUALIFIERS, "-")[qual],
        _quoted_table(_words.KINDS)[kind],
        slug_suffix,
    )
    titles = _join(
        code_shown[code],
        _table(all_topics, shown=True, suffix=" ")[topic],
        _table(_words.QUALIFIERS, shown=True, suffix=" ")[qual],
        _table(_words.KINDS, shown=True)[kind],
        title_suffix,
    )
    ids = np.strings.add(folder_table[folder], slug)
    quoted_ids = np.strings.add(folder_quoted[folder], quoted_slug)
    return space_names, ids, quoted_ids, titles


def _tags(topic, kind, rng):
    all_topics = [t for s in _words.SPACES for t in _words.SPACE_TOPICS[s]]
    extra = rng.integers(-2 * len(_words.EXTRA_TAGS), len(_words.EXTRA_TAGS), size=len(topic))
    extra_table = _table(_words.EXTRA_TAGS, prefix=";")
    extra_tag = np.where(extra >= 0, extra_table[np.maximum(extra, 0)], b"")
    return _join(_table(all_topics, suffix=";")[topic], _table(_words.KINDS)[kind], extra_tag)


def _restrictions(space, space_names, rng):
    """One access group for ~7% of pages, mostly in the spaces that groups guard."""
    present = [g for g, s in _words.GROUP_SPACES.items() if s == "" or s in space_names]
    guarded = {
        space_names.index(s): i for i, g in enumerate(present) if (s := _words.GROUP_SPACES[g]) in space_names
    }
    space_group = np.full(len(space_names), present.index("leadership"), dtype=np.int8)
    for space_index, group_index in guarded.items():
        space_group[space_index] = group_index
    weight = np.where(space_group[space] == present.index("leadership"), 0.25, 12.0)
    count = max(1, round(RESTRICTED_SHARE * len(space)))
    keys = np.log(weight) + rng.gumbel(size=len(space))  # Gumbel top-k: weighted draw without replacement
    chosen = np.argpartition(-keys, count - 1)[:count]
    group = np.full(len(space), -1, dtype=np.int8)
    group[chosen] = space_group[space[chosen]]
    used = sorted(set(group[chosen].tolist()))
    remap = np.full(len(present), -1, dtype=np.int8)
    remap[used] = np.arange(len(used))
    group[chosen] = remap[group[chosen]]
    return group, tuple(present[i] for i in used)


def _links(space_start, space, popularity, rng):
    pages = len(space)
    degree = 1 + np.floor(rng.lognormal(2.0, 0.9, size=pages)).astype(np.int64)
    np.minimum(degree, min(pages - 1, MAX_OUT_DEGREE), out=degree)
    dangling = rng.choice(pages, size=max(1, round(DANGLING_SHARE * pages)), replace=False)
    degree[dangling] = 0
    source = np.repeat(np.arange(pages, dtype=np.int64), degree)
    cumulative = np.cumsum(popularity)
    before = np.r_[0.0, cumulative]
    cross = rng.random(len(source)) < CROSS_SPACE_SHARE
    own = space[source]
    low = np.where(cross, 0.0, before[space_start[own]])
    high = np.where(cross, cumulative[-1], before[space_start[own + 1]])
    value = low + rng.random(len(source)) * (high - low)
    del cross, low, high
    target = np.minimum(np.searchsorted(cumulative, value, side="right"), pages - 1)
    del value
    keep = target != source
    key = source[keep] * pages + target[keep]
    key.sort(kind="stable")  # radix sort; np.unique's hashing is slower here
    key = key[np.r_[True, key[1:] != key[:-1]]]
    del source, target, keep
    indptr = np.zeros(pages + 1, dtype=np.int64)
    np.cumsum(np.bincount(key // pages, minlength=pages), out=indptr[1:])
    return indptr, (key % pages).astype(np.int32)


def build_wiki(pages: int, rng: np.random.Generator) -> Wiki:
    """Draw the pages and links of an invented wiki of ``pages`` pages."""
    sizes = _space_sizes(pages, rng)
    space = np.repeat(np.arange(len(sizes), dtype=np.int16), sizes)
    space_start = np.r_[0, np.cumsum(sizes)].astype(np.int64)
    topic, qual, kind, code, repeat = _titles(sizes, rng)
    space_names, ids, quoted_ids, titles = _names(space, topic, qual, kind, code, repeat)
    tags = _tags(topic, kind, rng)
    popularity = rng.pareto(1.6, size=pages) + 1.0  # heavy tail: a few pages draw most links
    hub_kinds = [_words.KINDS.index(k) for k in ("overview", "index", "handbook")]
    popularity[np.isin(kind, hub_kinds)] *= 3.0
    archived = rng.random(pages) < ARCHIVED_SHARE
    group, group_names = _restrictions(space, space_names, rng)
    indptr, targets = _links(space_start, space, popularity, rng)
    return Wiki(
        ids=ids,
        quoted_ids=quoted_ids,
        titles=titles,
        tags=tags,
        space=space,
        space_names=space_names,
        space_start=space_start,
        archived=archived,
        group=group,
        group_names=group_names,
        popularity=popularity,
        indptr=indptr,
        targets=targets,
    )
