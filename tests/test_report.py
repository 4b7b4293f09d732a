"""The HTML review report: self-contained, the safety caution first for a hazardous
chain, the budget's tables and every figure inline, written all or nothing."""
from __future__ import annotations

import re
from html.parser import HTMLParser

import pytest

pytest.importorskip("matplotlib")

from chainplan.api import budget_for                                    # noqa: E402
from chainplan.render.console import db, eng                           # noqa: E402
from chainplan.spec.numbers import loss                                  # noqa: E402
from chainplan.render.report import report_html                        # noqa: E402
from chainplan.render.tables import safety_notice                      # noqa: E402
from chainplan.spec.loader import load_chain                                   # noqa: E402
from conftest import REPO                                               # noqa: E402

ECG = REPO / "chains" / "ecg_patient_frontend.yaml"
FANOUT = REPO / "chains" / "vibration_fanout.yaml"


class _Doc(HTMLParser):
    """Collects tags, table cells and external references; checks nesting."""

    VOID = {"meta", "br", "img", "link", "hr", "input"}

    def __init__(self):
        super().__init__()
        self.stack, self.cells, self.refs, self.tags, self.errors, self.rows = [], [], [], [], [], []
        self._cell = None

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        for k, v in attrs:
            if k in ("src", "href") and v and not v.startswith("#"):
                self.refs.append(v)
        if tag in ("td", "th"):
            self._cell = ""
        if tag == "tr":
            self.rows.append([])
        if tag not in self.VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.tags.append(tag)

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            self.cells.append(self._cell.strip())
            self.rows[-1].append(self._cell.strip())
            self._cell = None
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1] if self.stack else 'nothing'}")
        else:
            self.stack.pop()

    def handle_data(self, data):
        if self._cell is not None:
            self._cell += data


@pytest.fixture(scope="module")
def ecg_report():
    noise = pytest.importorskip("chainplan.engine.noise")
    mcmod = pytest.importorskip("chainplan.studies.montecarlo")
    chain = load_chain(str(ECG))
    b = budget_for(chain)
    mc = mcmod.run(chain, 200, seed=2)
    return b, report_html(b, noise.analyse_noise(b.ev), mc)


def test_report_is_well_formed_and_self_contained(ecg_report):
    _, text = ecg_report
    doc = _Doc()
    doc.feed(text)
    assert not doc.errors and not doc.stack
    assert doc.refs == []                               # nothing fetched: no src/href to files or sites
    assert doc.tags.count("svg") == 5                   # levels, gain, dynamics (loop gain, step), noise, Monte Carlo


def test_report_shows_the_temperature_as_written(ecg_report):
    # the ECG spec says 'temperature: 34 °C': 307.15 K (t/°C = T/K − 273.15), not "307 K"
    _, text = ecg_report
    assert "temperature 34 °C (307.15 K)" in text


def test_caution_comes_first_and_last(ecg_report):
    b, text = ecg_report
    note = safety_notice(b.chain.hazards)
    body = text[text.index("<body>"):]
    first = body.index('class="caution"')
    assert first < body.index("<h1>")
    assert text.count(note.replace("'", "&#x27;")) >= 2


def test_report_tables_hold_the_budget(ecg_report):
    b, text = ecg_report
    doc = _Doc()
    doc.feed(text)
    cells = doc.cells
    start = doc.rows.index(["node", "DC", "peak", "low limit", "high limit", "headroom", "headroom dB", "set by", ""])
    rows = {r[0]: r for r in doc.rows[start + 1:start + 1 + len(b.nodes)]}
    for n in b.nodes:
        assert rows[n.name][1:3] == [eng(n.dc_v, "V"), eng(n.peak_v, "V")]
        assert rows[n.name][-1] == ("CLIPS" if n.clips else "tightest" if n is b.tightest_node else "")
    for r in b.interfaces:
        assert loss(r.loss_db) in cells
    assert db(b.gain_db) in cells
    for name in ("baseline wander kept", "QRS detail kept"):
        assert name in cells
    assert "Production yield (every requirement at every corner)" in text and re.search(r"\d+\.\d\d %", text)
    assert "95 % Wilson interval" in text


def test_no_caution_for_an_ordinary_chain():
    b = budget_for(load_chain(str(FANOUT)))
    text = report_html(b)
    assert 'class="caution"' not in text and "CAUTION" not in text


def test_cli_report_writes_one_file_and_refuses_an_unwritable_place(cli, tmp_path):
    out = tmp_path / "review" / "fanout.html"
    rc, stdout, err = cli("report", str(FANOUT), "-o", str(out))
    assert rc == 0, err
    assert stdout.strip() == str(out)
    assert [p.name for p in out.parent.iterdir()] == ["fanout.html"]
    assert out.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    blocker = tmp_path / "plain_file"
    blocker.write_text("x")
    rc, stdout, err = cli("report", str(FANOUT), "-o", str(blocker / "r.html"))
    assert rc == 2 and err.count("\n") == 1 and "Traceback" not in err
    assert blocker.read_text() == "x"
