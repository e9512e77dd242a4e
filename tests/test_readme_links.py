"""Every link and image in the README resolves (to a file in the repository or an anchor in it)."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
README = (ROOT / "README.md").read_text(encoding="utf-8")


def _anchor(heading: str) -> str:
    # GitHub's rule for heading anchors (common practice): lower case, drop punctuation, spaces to '-'.
    return re.sub(r"[^\w\- ]", "", heading.strip().lower()).replace(" ", "-")


def test_every_link_and_image_resolves():
    targets = re.findall(r"!?\[[^\]]*\]\(([^)\s]+)\)", README) + re.findall(r"<((?:https?://)[^>]+)>", README)
    assert targets, "the README has links"
    anchors = {_anchor(h) for h in re.findall(r"^#+ (.+)$", README, flags=re.M)}
    for target in targets:
        if target.startswith(("http://127.0.0.1", "http://localhost")):
            continue  # the local dashboard's address, not a web link
        assert not target.startswith(("http://", "https://")), f"external link cannot be checked offline: {target}"
        path, _, fragment = target.partition("#")
        if path:
            assert (ROOT / path).exists(), f"missing: {target}"
        elif fragment:
            assert fragment in anchors, f"no heading for #{fragment}"


def test_images_are_real_png_files():
    for target in re.findall(r"!\[[^\]]*\]\(([^)\s]+)\)", README):
        data = (ROOT / target).read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000, target
