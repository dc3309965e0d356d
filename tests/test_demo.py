"""The bundled demo wiki and `rankrec demo`."""

from __future__ import annotations

import hashlib
import io
import json

from rankrec.demo import DEMO_SETTINGS, FIXTURE, run_demo
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


def test_demo_imports_the_wiki_and_prints_its_stats(tmp_path):
    out = io.StringIO()
    run_demo(tmp_path, out=out)
    text = out.getvalue()
    files = [p for p in (FIXTURE / "pages").rglob("*") if p.suffix in (".md", ".markdown")]
    views = (FIXTURE / "views.csv").read_text().count("\n") - 1  # one header line
    with Store(tmp_path / "wiki.db", create=False) as store:
        counts = store.counts()
    assert (counts["pages"], counts["views"]) == (len(files), views)
    assert "Imported the invented demo wiki" in text and "largest scc" in text


def test_demo_evaluation_prints_what_the_report_holds(tmp_path):
    from rankrec.demo import import_demo, show_evaluation

    wiki = import_demo(tmp_path)
    out = io.StringIO()
    with Store(wiki, create=False) as store:
        show_evaluation(store, tmp_path / "report", out)
    text = out.getvalue()
    results = json.loads((tmp_path / "report" / "results.json").read_text())
    assert (tmp_path / "report" / "report.md").is_file() and str(tmp_path / "report") in text
    for name, entry in results["methods"].items():  # every printed line is the report's number
        low, high = entry["ci95"]["ndcg@10"]
        assert f"{name:<15} {entry['ndcg@10']:.3f}  [{low:.3f}, {high:.3f}]" in text
    assert f"minus {results['best_baseline']}:" in text
