"""Ask the service every (viewer, page) list question of the demo wiki and look for leaks.

Imports the invented demo wiki into ``--folder`` and builds its index, then serves it in-process
(FastAPI TestClient, no rate limit) with one front-end token and its viewer key. Viewers: nobody
(the token alone), every user of the store, and two users the store does not know; each named by
a freshly signed X-Rankrec-Viewer assertion. Asked, with ``k`` pages each:

- related: every (viewer, page) pair, and a few ids close to each restricted page;
- personal: every (viewer, user) pair (only the viewer's own list may answer 200);
- landing: every (viewer, team) pair, and an unknown team;
- search: every (viewer, prefix) pair, the prefixes being "" and each space.

What the viewer may see is worked out from the store (pages' and users' access groups), not from
the index. Each body is checked for: a restricted page id or title the viewer may not see (a team's
landing also no page some member may not see); "you read ..." naming a page the viewer never read
(or any "you read" without a known viewer); "read by N" counts that are not banded, or a count in
a refusal; and a status other than the expected one. A page the viewer may not see must answer the
bytes that a "twin" wiki answers, built from the same files without the pages that viewer's groups
may not see (for the page itself and three ids close to it).

    python tools/leak_probe.py [--folder /tmp/probe13/leak] [-k 100] [--viewers N]

Prints the requests tried and the leaks found; exits 1 on any leak or unexpected status.
"""

from __future__ import annotations

import argparse
import csv
import re
import shutil
import statistics
import sys
import time
import warnings
from collections import Counter, defaultdict
from pathlib import Path
from urllib.parse import quote

PROJECT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(PROJECT))

from api.app import create_app  # noqa: E402
from api.settings import ServiceSettings  # noqa: E402
from rankrec.build import build_index  # noqa: E402
from rankrec.demo import demo_sources  # noqa: E402
from rankrec.importer import import_sources  # noqa: E402
from rankrec.store import Store  # noqa: E402
from rankrec.tokens import add_token, add_viewer_key, viewer_assertion  # noqa: E402

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    from fastapi.testclient import TestClient

UNKNOWN_VIEWERS = ("u99990", "visitor-new")
READ_VIA = re.compile(r"^you read (.+), which links here$")
READ_BY = re.compile(r"read by (\d+)")
TITLED = re.compile(
    r"^(?:via|linked from|similar text to|closely connected to|you read) (.+?)(?:, which links here)?$"
)


def _make_wiki(folder: Path, source: Path, hidden: set[str]) -> tuple[Path, Path]:
    """Store and index of the demo files without the pages in ``hidden`` (and their views)."""
    files = folder / "files"
    shutil.copytree(source / "pages", files / "pages")
    for page in hidden:  # a page's id is its path without the suffix (.md, .markdown, ...)
        (found,) = (files / "pages").glob(f"{page}.*")
        found.unlink()
    with open(source / "views.csv", newline="") as into, open(files / "views.csv", "w", newline="") as out:
        rows = csv.reader(into)
        writer = csv.writer(out)
        writer.writerow(next(rows))
        writer.writerows(row for row in rows if row[1] not in hidden)
    for name in ("teams.csv", "groups.csv"):
        shutil.copy(source / name, files / name)
    wiki = folder / "wiki.db"
    kinds = {"pages": "markdown", "views.csv": "views", "teams.csv": "teams", "groups.csv": "groups"}
    with Store(wiki) as store:
        import_sources(store, [(files / name, kind) for name, kind in kinds.items()], strict=True)
    with Store(wiki, create=False) as store:
        build_index(store, folder / "index")
    return wiki, folder / "index"


def _truth(wiki: Path) -> dict:
    """What the store says: pages, titles, page and user groups, who read what, teams."""
    with Store(wiki, create=False) as store, store.reading():
        rows, pages = store.present_pages()
        titles = {page: title for page, (title, _, _) in zip(pages, store.page_table(), strict=True)}
        by_row = dict(zip(rows.tolist(), pages, strict=True))
        page_groups = defaultdict(set)
        for row, group in store.page_group_pairs():
            page_groups[by_row[row]].add(group)
        user_rows, users = store.users()
        user_of = dict(zip(user_rows.tolist(), users, strict=True))
        user_groups = defaultdict(set)
        for row, group in store.memberships("group"):
            user_groups[user_of[row]].add(group)
        teams = defaultdict(set)
        for row, team in store.memberships("team"):
            teams[team].add(user_of[row])
        reads = defaultdict(set)
        viewer_rows, page_rows, _ = store.view_arrays()
        for user, page in zip(viewer_rows.tolist(), page_rows.tolist(), strict=True):
            if page in by_row:
                reads[user_of[user]].add(by_row[page])
    spaces = sorted({page.split("/")[0] for page in pages})
    return {
        "pages": pages,
        "titles": titles,
        "page_groups": page_groups,
        "user_groups": user_groups,
        "teams": teams,
        "reads": reads,
        "users": users,
        "spaces": spaces,
    }


def _hidden_for(truth: dict, groups: frozenset[str]) -> set[str]:
    """Pages a reader in ``groups`` may not see (a page's groups: a reader needs one of them)."""
    return {page for page, needed in truth["page_groups"].items() if not needed & groups}


def _close_to(page: str) -> list[str]:
    """Ids one edit away from ``page``, and one a prefix of it."""
    return [page[:-1] + ("x" if page[-1] != "x" else "y"), page + "-", page[:-2]]


class Probe:
    """The checks of one answer, and what they found."""

    def __init__(self, truth: dict) -> None:
        self.truth = truth
        self.tried, self.leaks, self.statuses = 0, [], Counter()
        self._patterns: dict[frozenset, tuple] = {}
        every_title = list(truth["titles"].values())
        # a title that is part of another page's title cannot be looked for as plain text
        self._plain = {t for t in every_title if not any(t != other and t in other for other in every_title)}

    def patterns(self, hidden: frozenset[str]):
        if hidden not in self._patterns:
            ids = sorted(hidden, key=len, reverse=True)
            titles = sorted(
                (self.truth["titles"][page] for page in hidden if self.truth["titles"][page] in self._plain),
                key=len,
                reverse=True,
            )
            id_pattern = re.compile(
                "|".join(rf"(?<![\w/-]){re.escape(page)}(?![\w/-])" for page in ids) or "$^"
            )
            title_pattern = re.compile("|".join(re.escape(title) for title in titles) or "$^")
            self._patterns[hidden] = (id_pattern, title_pattern)
        return self._patterns[hidden]

    def check(
        self,
        what: str,
        answer,
        expected: int,
        hidden: frozenset[str],
        viewer: str | None,
        echo: str | None = None,
    ) -> None:
        """Record a leak for anything in ``answer`` that ``viewer`` (not to see ``hidden``) may not know."""
        self.tried += 1
        self.statuses[answer.status_code] += 1
        text = answer.text
        problems = []
        if answer.status_code != expected:
            problems.append(f"status {answer.status_code}, expected {expected}")
        if echo is not None:
            text = text.replace(echo, "")  # the caller's own words, echoed back
        id_pattern, title_pattern = self.patterns(hidden)
        problems += [f"restricted id {m.group(0)!r}" for m in id_pattern.finditer(text)]
        problems += [f"restricted title {m.group(0)!r}" for m in title_pattern.finditer(text)]
        body = answer.json() if answer.headers.get("content-type", "").startswith("application/json") else {}
        items = body.get("items", []) if isinstance(body, dict) else []
        hidden_titles = {self.truth["titles"][page] for page in hidden}
        read = self.truth["reads"].get(viewer, set()) if viewer is not None else set()
        read_titles = {self.truth["titles"][page] for page in read}
        for item in items:
            reason = item.get("reason") or ""
            named = TITLED.match(reason)
            if (
                item["page"] in hidden
                or item["title"] in hidden_titles
                or (named and named.group(1) in hidden_titles)
            ):
                problems.append(f"restricted item {item['page']!r} ({reason!r})")
            via = READ_VIA.match(reason)
            if via and via.group(1) not in read_titles:
                problems.append(f"{reason!r}: the viewer never read it")
            if reason == "you read it before" and item["page"] not in read:
                problems.append(f"{item['page']!r} 'you read it before': the viewer never read it")
            for count in READ_BY.findall(reason):
                if int(count) % 5 or "or more" not in reason:
                    problems.append(f"unbanded count {reason!r}")
        if answer.status_code == 409:  # a refusal says the minimum, never how many readers there are
            minimum = str(body.get("error", {}).get("details", {}).get("minimum"))
            problems += [f"a count in a refusal: {n}" for n in re.findall(r"\d+", text) if n != minimum]
        if text.count("you read") > sum("you read" in (item.get("reason") or "") for item in items):
            problems.append("'you read' outside the items' reasons")
        if viewer is None and "you read" in text:
            problems.append("'you read' without a viewer")
        for problem in problems:
            self.leaks.append((what, problem, answer.text[:300]))


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--folder", type=Path, default=Path("/tmp/probe13/leak"), help="made anew")
    parser.add_argument("-k", type=int, default=100, help="pages per list (the service's max_k: 100)")
    parser.add_argument("--viewers", type=int, default=None, help="only the first N users (default: all)")
    args = parser.parse_args(argv)
    started = time.monotonic()
    if args.folder.exists():
        shutil.rmtree(args.folder)
    source = demo_sources(args.folder)
    wiki, index = _make_wiki(args.folder / "real", source, set())
    truth = _truth(wiki)
    tokens = args.folder / "tokens.json"
    token = add_token(tokens, "frontend", "reader")
    key = add_viewer_key(tokens, "frontend")

    def serve(wiki_path: Path, index_path: Path) -> TestClient:
        settings = ServiceSettings(
            index=index_path, tokens=tokens, wiki=wiki_path, watch_seconds=0, rate_per_second=0
        )
        client = TestClient(create_app(settings))
        client.__enter__()  # one event loop and thread pool for all its requests (about twice as fast)
        return client

    def headers(viewer: str | None) -> dict:
        found = {"Authorization": f"Bearer {token}"}
        if viewer is not None:
            found["X-Rankrec-Viewer"] = viewer_assertion(key, "frontend", viewer)
        return found

    real = serve(wiki, index)
    viewers = [None, *truth["users"][: args.viewers], *UNKNOWN_VIEWERS]
    groups_of = {viewer: frozenset(truth["user_groups"].get(viewer, ())) for viewer in viewers}
    twins = {}
    for groups in sorted(set(groups_of.values()), key=sorted):
        name = "twin-" + ("-".join(sorted(groups)) or "public")
        twins[groups] = serve(*_make_wiki(args.folder / name, source, _hidden_for(truth, groups)))
    print(
        f"demo wiki: {len(truth['pages'])} pages ({len(truth['page_groups'])} restricted), "
        f"{len(truth['users'])} users, {len(truth['teams'])} teams; {len(twins)} twin wikis "
        f"({time.monotonic() - started:.0f} s to build)"
    )
    probe = Probe(truth)
    counts, times = Counter(), {"restricted": [], "absent": []}

    for viewer in viewers:
        hidden = frozenset(_hidden_for(truth, groups_of[viewer]))
        for page in truth["pages"]:
            path = f"/v1/pages/{quote(page, safe='')}/related"
            begun = time.perf_counter()
            answer = real.get(path, params={"k": args.k}, headers=headers(viewer))
            spent = time.perf_counter() - begun
            probe.check(
                f"related {page} as {viewer}", answer, 404 if page in hidden else 200, hidden, viewer, page
            )
            counts["related"] += 1
            if page not in hidden:
                continue
            for probe_id in [page, *_close_to(page)]:  # the twin does not hold the page: the same bytes?
                path = f"/v1/pages/{quote(probe_id, safe='')}/related"
                if probe_id != page:
                    answer = real.get(path, params={"k": args.k}, headers=headers(viewer))
                    probe.check(
                        f"related {probe_id} as {viewer}",
                        answer,
                        answer.status_code,
                        hidden,
                        viewer,
                        probe_id,
                    )
                begun_twin = time.perf_counter()
                twin = twins[groups_of[viewer]].get(path, params={"k": args.k}, headers=headers(viewer))
                if probe_id == page:
                    times["restricted"].append(spent)
                    times["absent"].append(time.perf_counter() - begun_twin)
                probe.tried += 1
                counts["twin comparisons"] += 1
                if twin.content != answer.content or twin.status_code != answer.status_code:
                    probe.leaks.append(
                        (
                            f"related {probe_id} as {viewer}",
                            "differs from the wiki without it",
                            f"{answer.text[:150]} | twin: {twin.text[:150]}",
                        )
                    )
        for user in [*truth["users"], *UNKNOWN_VIEWERS]:
            answer = real.get(
                f"/v1/users/{quote(user, safe='')}/recommendations",
                params={"k": args.k},
                headers=headers(viewer),
            )
            probe.check(
                f"personal {user} as {viewer}", answer, 200 if user == viewer else 403, hidden, viewer, user
            )
            counts["personal"] += 1
        for team, members in [*truth["teams"].items(), ("no-such-team", set())]:
            team_hidden = hidden.union(
                *(_hidden_for(truth, frozenset(truth["user_groups"].get(member, ()))) for member in members)
            )
            answer = real.get(f"/v1/teams/{team}/landing", params={"k": args.k}, headers=headers(viewer))
            expected = 404 if not members else 409 if answer.status_code == 409 else 200  # 409: too few
            probe.check(f"landing {team} as {viewer}", answer, expected, frozenset(team_hidden), None, team)
            counts["landing"] += 1
        for prefix in ["", *(f"{space}/" for space in truth["spaces"])]:
            answer = real.get("/v1/pages", params={"prefix": prefix, "limit": 100}, headers=headers(viewer))
            probe.check(f"search {prefix!r} as {viewer}", answer, 200, hidden, viewer)
            counts["search"] += 1

    print(
        f"requests tried: {probe.tried} ({', '.join(f'{n} {w}' for w, n in counts.items())}); "
        f"statuses {dict(probe.statuses)}"
    )
    restricted, absent = (statistics.median(times[key]) * 1e3 for key in ("restricted", "absent"))
    print(
        f"restricted id (real wiki) vs the same id absent (twin): median {restricted:.2f} ms vs "
        f"{absent:.2f} ms "
        f"over {len(times['restricted'])} requests each"
    )
    print(f"leaks: {len(probe.leaks)}  ({time.monotonic() - started:.0f} s)")
    for what, problem, excerpt in probe.leaks[:20]:
        print(f"  {what}: {problem}\n    body: {excerpt}")
    return 1 if probe.leaks else 0


if __name__ == "__main__":
    sys.exit(main())
