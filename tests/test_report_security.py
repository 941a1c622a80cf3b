"""The HTML report is safe against crafted result files.

* Markup in any field never becomes markup in the page: a result whose every string
  field (and key) holds script, event-handler and SVG payloads renders with no tag or
  attribute of its own; a payload in a number field is refused on load.  The page is
  parsed with Python's own HTML tokenizer (:mod:`html.parser`, the outside reference
  for "which tags and attributes does this page have").
* The page forbids scripts by a Content-Security-Policy meta tag.
* A report never embeds a local file named in a result's provenance: not by default,
  not when the hash is missing or wrong, and through the command line never.
* Text that matplotlib would parse (``$...$``) is drawn literally.
"""

from __future__ import annotations

import copy
import hashlib
import json
from html.parser import HTMLParser
from pathlib import Path

import pytest

from cavchar.errors import InputError
from cavchar.result import FitResult

FIXTURE = Path(__file__).parent / "fixtures" / "fit_result_v1.json"
BASE = json.loads(FIXTURE.read_text(encoding="utf-8"))
PAYLOAD = ("<script>alert(1)</script><img src=x onerror=alert(2)>\"'><svg onload=alert(3)>"
           "<a href=javascript:alert(4)>x</a>{{7*7}}$\\frac{1}{$")


class _Tags(HTMLParser):
    """Every start tag with its attributes, as a browser's tokenizer sees them."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, list[tuple[str, str | None]]]] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, attrs))

    def handle_startendtag(self, tag, attrs):
        self.tags.append((tag, attrs))


def _tags(page: str) -> list[tuple[str, list]]:
    parser = _Tags()
    parser.feed(page)
    parser.close()
    return parser.tags


def _assert_no_payload_survives(page: str) -> None:
    tags = _tags(page)
    names = {tag for tag, _ in tags}
    assert "script" not in names and "svg" not in names and "iframe" not in names
    for tag, attrs in tags:
        for key, value in attrs:
            assert not key.startswith("on"), (tag, key)
            assert not (value or "").strip().lower().startswith("javascript:"), (tag, key)
        if tag == "img":
            assert dict(attrs).get("src", "").startswith("data:image/"), attrs
        if tag == "a":
            assert dict(attrs).get("href", "#").startswith(("#", "https://")), attrs
    assert "alert(" not in "".join(str(v) for _, attrs in tags for _, v in attrs)


def _leaf_paths(value, keep, at=(), first_draw_only=False):
    """Key paths of the leaves of ``value`` for which ``keep(leaf)`` holds (with
    ``first_draw_only``, only the first element of each list under ``samples``)."""
    if isinstance(value, dict):
        items = value.items()
    elif isinstance(value, list):
        cut = first_draw_only and at[:1] == ("samples",)
        items = enumerate(value[:1] if cut else value)
    else:
        if keep(value):
            yield at
        return
    for key, item in items:
        yield from _leaf_paths(item, keep, (*at, key), first_draw_only)


def _string_leaves(value):
    return _leaf_paths(value, lambda leaf: isinstance(leaf, str))


def _number_leaves(value):
    return _leaf_paths(value, lambda leaf: isinstance(leaf, (int, float))
                       and not isinstance(leaf, bool), first_draw_only=True)


def _set(data, path, value):
    target = data
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = value


def _loads(tmp_path: Path, data) -> FitResult | None:
    path = tmp_path / "probe.json"
    path.write_text(json.dumps(data), encoding="utf-8")
    try:
        return FitResult.from_json(path)
    except InputError:
        return None


def _markup_everywhere(tmp_path: Path) -> tuple[dict, int, int]:
    """The fixture with the payload in every string field that loads with it, and in new
    keys of the free-form blocks; (data, fields accepted, fields refused)."""
    data = copy.deepcopy(BASE)
    accepted = refused = 0
    for path in _string_leaves(BASE):
        trial = copy.deepcopy(data)
        _set(trial, path, PAYLOAD)
        if _loads(tmp_path, trial) is None:
            refused += 1
        else:
            data, accepted = trial, accepted + 1
    for block in ("extras", "checks", "settings"):
        trial = copy.deepcopy(data)
        trial[block][PAYLOAD] = PAYLOAD
        if _loads(tmp_path, trial) is not None:
            data, accepted = trial, accepted + 1
    trial = copy.deepcopy(data)
    trial["provenance"]["versions"][PAYLOAD] = PAYLOAD
    if _loads(tmp_path, trial) is not None:
        data, accepted = trial, accepted + 1
    return data, accepted, refused


def test_markup_in_every_field_never_becomes_markup(tmp_path):
    from cavchar.report import render_report

    data, accepted, refused = _markup_everywhere(tmp_path)
    assert accepted >= 10, "the payload should reach many text fields"
    path = tmp_path / "crafted.json"
    path.write_text(json.dumps(data), encoding="utf-8")
    baseline = render_report([FIXTURE], figures=False)
    page = render_report([path], figures=True)
    _assert_no_payload_survives(page)
    compact = render_report([path], figures=False)
    _assert_no_payload_survives(compact)
    # only the report's own tags (those of the intact file's page, and lists and bold text
    # that some fields are shown with); never one that the payload writes
    own = {t for t, _ in _tags(baseline)} | {"ul", "li", "b", "code"}
    for text in (page, compact):
        assert {t for t, _ in _tags(text)} <= own | {"figure", "figcaption", "img"}
    assert "&lt;script&gt;" in compact  # the text is shown, escaped, not dropped


def test_markup_in_a_number_field_is_refused(tmp_path):
    """A payload where a number belongs never reaches a page: the load refuses it."""
    tried = 0
    for path in _number_leaves(BASE):
        data = copy.deepcopy(BASE)
        _set(data, path, PAYLOAD)
        result = _loads(tmp_path, data)
        tried += 1
        if result is not None:  # a free-form number (an extras entry): must render inert
            from cavchar.report import render_report

            _assert_no_payload_survives(render_report([result], figures=False))
    assert tried > 10


def test_report_page_forbids_scripts():
    from cavchar.report import render_report

    page = render_report([FIXTURE], figures=False)
    metas = [dict(attrs) for tag, attrs in _tags(page) if tag == "meta"]
    policy = [m["content"] for m in metas
              if m.get("http-equiv", "").lower() == "content-security-policy"]
    assert policy and "script-src 'none'" in policy[0] and "default-src 'none'" in policy[0]


# --------------------------------------------------------------- local files in provenance

SECRET = "TOKEN-5f1c2e-do-not-embed"


@pytest.fixture
def secret_result(tmp_path):
    """A result whose provenance names a local 'secrets' file by absolute path."""
    secret = tmp_path / "secrets.csv"
    secret.write_text(f"time,photons\n0,0\n1,{SECRET}\n2,\n", encoding="utf-8")
    data = copy.deepcopy(BASE)
    data["provenance"]["input_path"] = str(secret)
    data["provenance"]["input_sha256"] = None
    return data, secret


def _write_result(tmp_path, data, name="r.json") -> Path:
    path = tmp_path / name
    path.write_text(json.dumps(data), encoding="utf-8")
    return path


@pytest.mark.parametrize("sha", ["null", "other"])
def test_report_never_embeds_a_local_file(tmp_path, secret_result, sha):
    from cavchar.report import render_report

    data, secret = secret_result
    if sha == "other":
        data["provenance"]["input_sha256"] = hashlib.sha256(b"something else").hexdigest()
    path = _write_result(tmp_path, data)
    if sha == "null":
        assert SECRET not in render_report([path], figures=True)  # the default: never re-read
    # even on request: without the file's own hash nothing is read
    page = render_report([path], figures=True, reread_inputs=True)
    assert SECRET not in page
    assert "was not read again" in page


def test_reread_on_request_needs_the_matching_hash(tmp_path, secret_result):
    """Control: with the file's own SHA-256 and the request, the file is read (here it is
    no record, which the page says) - so the refusals above are the hash check at work."""
    from cavchar.report import render_report

    data, secret = secret_result
    data["provenance"]["input_sha256"] = hashlib.sha256(secret.read_bytes()).hexdigest()
    path = _write_result(tmp_path, data)
    page = render_report([path], figures=True, reread_inputs=True)
    assert "was not read again: the result records no SHA-256" not in page


def test_command_line_report_never_reads_the_provenance_file(tmp_path, run_cli,
                                                             secret_result, monkeypatch):
    data, secret = secret_result
    path = _write_result(tmp_path, data)
    opened = []
    real_open = open

    def spy(file, *args, **kwargs):
        opened.append(str(file))
        return real_open(file, *args, **kwargs)

    monkeypatch.setattr("builtins.open", spy)
    monkeypatch.setattr("io.open", spy)  # pathlib opens through io.open
    code, _, err = run_cli("report", str(path), "-o", str(tmp_path / "r.html"))
    monkeypatch.undo()
    assert code == 0, err
    assert any(f.endswith("r.json") for f in opened)  # the spy sees the files read
    assert str(secret) not in opened
    assert SECRET not in (tmp_path / "r.html").read_text(encoding="utf-8")
