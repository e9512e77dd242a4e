"""The dashboard's methods page carries the same methods content as the report."""

from fastapi.testclient import TestClient

from app.config import ServerSettings
from app.core.registry import MEASURES
from app.methods import methods_content
from app.web.app import create_app


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
