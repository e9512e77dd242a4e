"""The dashboard's methods page carries the same methods content as the report."""

from fastapi.testclient import TestClient

from pairlens.config import ServerSettings
from pairlens.core.registry import MEASURES
from pairlens.methods import methods_content
from pairlens.web.app import create_app


def test_methods_page_lists_every_measure_with_formula_and_reference(tmp_path):
    client = TestClient(create_app(ServerSettings(data_dir=tmp_path)))
    page = client.get("/methods")
    assert page.status_code == 200
    html = page.text
    for m in MEASURES.values():
        assert f"<code>{m.name}</code>" in html
    content = methods_content()
    for section in content["inference"]:
        assert section["title"] in html
    for caution in content["cautions"]:
        assert caution["title"] in html
    assert "causation" in html.lower()


def test_general_methods_page_states_general_facts_and_the_number_rule(tmp_path):
    import html as html_lib

    from pairlens.formatting import RULE

    client = TestClient(create_app(ServerSettings(data_dir=tmp_path)))
    text = html_lib.unescape(client.get("/methods").text)
    assert RULE in text
    # Facts of one analysis belong on its page and in its report, not on the general page.
    for per_analysis in ("No permutations were requested", "Intervals are at the 95% level",
                         "Permutation p-values were requested with B ="):
        assert per_analysis not in text
    # ... where they still appear (pairlens.engine.AnalysisSettings with its defaults: no permutations).
    from pairlens.engine import AnalysisSettings

    one = methods_content(settings=AnalysisSettings.from_options(measures=["pearson"]))
    words = " ".join(p for s in one["inference"] for p in s["paragraphs"])
    assert "No permutations were requested" in words and "Intervals are at the 95% level" in words
