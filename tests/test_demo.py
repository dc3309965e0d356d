"""The bundled demo wiki and `rankrec demo`."""

from __future__ import annotations

import hashlib
import json

from rankrec.demo import DEMO_SETTINGS, FIXTURE
from rankrec.store import Store
from rankrec.synth import synthesize


def _digests(folder):
    return {
        str(path.relative_to(folder)): hashlib.sha256(path.read_bytes()).hexdigest()
        for path in sorted(folder.rglob("*"))
        if path.is_file() and path.name != "settings.json"
    }


def test_bundled_demo_wiki_is_what_its_settings_make(tmp_path):
    assert json.loads((FIXTURE / "settings.json").read_text()) == DEMO_SETTINGS
    synthesize(tmp_path / "again", layout="markdown", **DEMO_SETTINGS)
    assert _digests(tmp_path / "again") == _digests(FIXTURE)


def test_demo_imports_the_wiki_and_prints_its_stats(demo_run):
    folder, text = demo_run
    files = [p for p in (FIXTURE / "pages").rglob("*") if p.suffix in (".md", ".markdown")]
    views = (FIXTURE / "views.csv").read_text().count("\n") - 1  # one header line
    with Store(folder / "wiki.db", create=False) as store:
        counts = store.counts()
    assert (counts["pages"], counts["views"]) == (len(files), views)
    assert "Imported the invented demo wiki" in text and "largest scc" in text


def test_demo_evaluation_prints_what_the_report_holds(demo_run):
    folder, text = demo_run
    results = json.loads((folder / "report" / "results.json").read_text())
    assert (folder / "report" / "report.md").is_file() and str(folder / "report") in text
    for name, entry in results["methods"].items():  # every printed line is the report's number
        low, high = entry["ci95"]["ndcg@10"]
        assert f"{name:<15} {entry['ndcg@10']:.3f}  [{low:.3f}, {high:.3f}]" in text
    assert f"minus {results['best_baseline']}:" in text
