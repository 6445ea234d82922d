"""The HTML report (ladder/report.py) of a small fit run through the CLI with ``fit --report``, checked as text
and in a real browser (headless Chromium, Debian's ``chromium`` package, driven through the Chrome DevTools
Protocol over ``--remote-debugging-pipe``; no extra Python package).

Data: a small invented mock universe (:mod:`ladder.simulate`); one host galaxy is renamed
``<script>alert(1)</script>`` and cut to 6 Cepheids, so the report must escape it and warn about it.
Reference values: scipy.stats for the prior widths (half-normal and uniform standard deviations).
"""

from __future__ import annotations

import json
import math
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table

from ladder.cli import main
from tolerances import PRIOR_SD_RTOL, REPORT_NUMBER_ATOL, REPORT_Z_ATOL

EVIL = "<script>alert(1)</script>"
FEW = 6  # Cepheids left in the renamed galaxy


@pytest.fixture(scope="module")
def fit_dir(tmp_path_factory):
    """`ladder fit RUN --out DIR --report` on a 3-galaxy mock (one anchor), 3-sigma clipping on."""
    from ladder.simulate import MockSettings, simulate, write_mock

    root = tmp_path_factory.mktemp("report")
    mock = simulate(MockSettings(n_hosts=3, n_anchors=1, n_cepheids=90, min_cepheids=8), seed=11)
    paths = write_mock(mock, root / "mock", run_overrides={
        "sampler": {"chains": 2, "warmup": 250, "draws": 250}, "model": {"outliers": "clip"}})
    hosts = Table.read(paths["hosts"], format="ascii.ecsv")
    ceph = Table.read(paths["cepheids"], format="ascii.ecsv")
    old = str(hosts["host"][-1])
    hosts["host"] = hosts["host"].astype(object)
    hosts["host"][-1] = EVIL
    hosts["host"] = hosts["host"].astype(str)
    keep = np.flatnonzero(np.asarray(ceph["host"]) == old)[:FEW]
    ceph = ceph[(np.asarray(ceph["host"]) != old) | np.isin(np.arange(len(ceph)), keep)]
    ceph["host"] = [EVIL if h == old else str(h) for h in ceph["host"]]
    hosts.write(paths["hosts"], format="ascii.ecsv", overwrite=True)
    ceph.write(paths["cepheids"], format="ascii.ecsv", overwrite=True)
    out = root / "out"
    assert main(["fit", str(paths["run"]), "--out", str(out), "--report"]) == 0
    return out


def test_fit_report_writes_one_self_contained_file(fit_dir):
    text = (fit_dir / "report.html").read_text(encoding="utf-8")
    assert EVIL not in text and html_escape(EVIL) in text
    assert "<script" not in text.lower()  # no JavaScript at all, and the galaxy name escaped
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:|//)""", text, re.I)  # no network resources
    n_img = len(re.findall(r'<img src="data:image/png;base64,', text))
    assert n_img == len(list(fit_dir.glob("*.png"))) == 4  # PL, corner, distances, predictive check (no SNe)
    assert "No supernovae in this fit" in text


def test_report_numbers_are_those_of_the_tables(fit_dir):
    """Each galaxy's median modulus and the verdict in the report are those of distances.ecsv and diagnostics.json."""
    text = (fit_dir / "report.html").read_text(encoding="utf-8")
    dist = Table.read(fit_dir / "distances.ecsv", format="ascii.ecsv")
    for r in dist:
        row = re.search(re.escape(html_escape(str(r["host"]))) + r"</td><td>\w+</td><td class=\"n\">(\d+)</td>"
                        r"<td class=\"n\">([-\d.]+) ", text)
        assert row, r["host"]
        assert int(row.group(1)) == int(r["n_cepheids"])
        assert abs(float(row.group(2)) - float(r["mu_q50"])) <= REPORT_NUMBER_ATOL
    diag = json.loads((fit_dir / "diagnostics.json").read_text())
    assert ("diagnostics <b>passed</b>" in text) == diag["passed"]
    assert ("diagnostics <b>FAILED</b>" in text) == (not diag["passed"])
    # independent draws (this fit's grid): no sampler energy, so E-BFMI is "n/a" and not a warning
    bfmi = re.search(r"E-BFMI \(smallest chain; a warning only\)</td><td class=\"n\">([^<]*)</td><td>[^<]*</td>"
                     r"<td>(.*?)</td>", text)
    assert diag["min_bfmi"] is None and bfmi and bfmi.group(1) == "n/a" and "WARN" not in bfmi.group(2), bfmi


def test_report_warns_about_few_cepheids_and_says_no_predictive_check(fit_dir, tmp_path):
    from ladder.report import report_html

    text = (fit_dir / "report.html").read_text(encoding="utf-8")
    assert f"<b>{html_escape(EVIL)}</b> (host) has only {FEW} Cepheids" in text
    assert "No posterior predictive check was run for this fit" not in text  # the fit made one (ppc.ecsv, ppc.png)
    d = tmp_path / "without_ppc"
    shutil.copytree(fit_dir, d)
    (d / "ppc.ecsv").unlink()
    (d / "ppc.png").unlink()
    assert "No posterior predictive check was run for this fit" in report_html(d)


def test_report_shows_a_predictive_check_when_the_directory_has_one(fit_dir, tmp_path):
    from ladder.report import report_html

    d = tmp_path / "with_ppc"
    shutil.copytree(fit_dir, d)
    t = Table({"galaxy": [EVIL, "other"], "statistic": [1.5, 0.7], "p_value": [0.03, 0.6]})
    t.meta["description"] = "made here for the test"
    t.write(d / "ppc.ecsv", format="ascii.ecsv", overwrite=True)
    shutil.copy(d / "corner.png", d / "ppc.png")
    text = report_html(d)
    section = text[text.index('id="ppc"'):text.index('id="provenance"')]
    assert "No posterior predictive check" not in section
    assert "made here for the test" in section and html_escape(EVIL) in section and "0.03" in section
    assert section.count('<img src="data:image/png;base64,') == 1


def test_report_cli_and_a_bad_directory(fit_dir, tmp_path, capsys):
    d = tmp_path / "copy"
    shutil.copytree(fit_dir, d)
    (d / "report.html").unlink()
    assert main(["report", str(d)]) == 0
    assert (d / "report.html").is_file()
    assert main(["report", str(tmp_path / "nowhere")]) == 2
    assert "nowhere" in capsys.readouterr().err
    empty = tmp_path / "empty"
    empty.mkdir()
    assert main(["report", str(empty)]) == 2
    assert "distances.ecsv" in capsys.readouterr().err
    assert not (empty / "report.html").exists()


def test_prior_widths_match_scipy():
    """Posterior sd / prior sd uses the prior's standard deviation; source: scipy.stats (halfnorm, uniform, norm)."""
    from scipy import stats

    from ladder.report import prior_dominance

    rows = [{"name": "scatter", "sd": 0.1}, {"name": "outlier_fraction", "sd": 0.1},
            {"name": "pl_zero_point[H]", "sd": 0.1}, {"name": "h0", "sd": 1.0}]
    priors = {"scatter": {"dist": "halfnormal", "scale": 0.3}, "outlier_fraction": {"dist": "uniform", "low": 0.0,
              "high": 0.5}, "pl_zero_point": {"dist": "normal", "loc": -5, "scale": 5.0}, "h0": {"dist": "flat"}}
    got = {d["name"]: d["prior_sd"] for d in prior_dominance(rows, priors)}
    assert set(got) == {"scatter", "outlier_fraction", "pl_zero_point[H]"}  # flat: no width
    np.testing.assert_allclose(got["scatter"], stats.halfnorm(scale=0.3).std(), rtol=PRIOR_SD_RTOL)
    np.testing.assert_allclose(got["outlier_fraction"], stats.uniform(0.0, 0.5).std(), rtol=PRIOR_SD_RTOL)
    np.testing.assert_allclose(got["pl_zero_point[H]"], stats.norm(-5, 5.0).std(), rtol=PRIOR_SD_RTOL)


def test_anchor_pull_is_the_difference_over_the_combined_sd():
    from ladder.report import anchor_pulls

    dist = [{"host": "A", "role": "anchor", "mu_mean": 18.50, "mu_sd": 0.03},
            {"host": "B", "role": "host", "mu_mean": 30.0, "mu_sd": 0.05}]
    (p,) = anchor_pulls(dist, {"A": (18.62, 0.04)})
    assert p["host"] == "A"
    assert math.isclose(p["z"], 0.12 / 0.05, rel_tol=1e-12)  # 0.03-0.04-0.05 triangle


def html_escape(s: str) -> str:
    import html

    return html.escape(s, quote=True)


# ----------------------------------------------------------------------------- in a browser
CHROMIUM_FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync")


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path:
            return path
    return None


#: Child side of the pipe: move the two pipe ends to fd 3 (commands in) and 4 (replies out), then exec the browser.
_TRAMPOLINE = ("import fcntl, os, sys; r, w = (fcntl.fcntl(int(x), fcntl.F_DUPFD, 10) for x in sys.argv[1:3]); "
               "os.dup2(r, 3, inheritable=True); os.dup2(w, 4, inheritable=True); os.execv(sys.argv[3], sys.argv[3:])")


class _Pipe:
    """A minimal Chrome DevTools Protocol client over ``--remote-debugging-pipe`` (JSON messages ending in NUL,
    commands on the browser's fd 3, replies and events on its fd 4)."""

    def __init__(self, exe: str, profile: str):
        self._to_r, self._to_w = os.pipe()
        self._from_r, self._from_w = os.pipe()

        # the browser's fd 3 and 4 are set by a small exec trampoline (no preexec_fn: no fork of this threaded process)
        cmd = [exe, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", "--remote-debugging-pipe", "about:blank"]
        self.proc = subprocess.Popen([sys.executable, "-c", _TRAMPOLINE, str(self._to_r), str(self._from_w), *cmd],
                                     stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                                     pass_fds=(self._to_r, self._from_w))
        os.close(self._to_r)
        os.close(self._from_w)
        self._buf = b""
        self._id = 0
        self.events: list[dict] = []

    def _read(self, deadline: float) -> dict:
        import select

        while b"\0" not in self._buf:
            left = deadline - time.monotonic()
            if left <= 0 or not select.select([self._from_r], [], [], left)[0]:
                raise TimeoutError("no answer from chromium")
            chunk = os.read(self._from_r, 1 << 16)
            if not chunk:
                raise RuntimeError("chromium closed the pipe")
            self._buf += chunk
        msg, self._buf = self._buf.split(b"\0", 1)
        msg = json.loads(msg)
        if msg.get("method") == "Page.javascriptDialogOpening":  # dismiss it (recorded in events) so the page goes on
            self._id += 1
            os.write(self._to_w, json.dumps({"id": self._id, "method": "Page.handleJavaScriptDialog",
                                             "params": {"accept": False}, "sessionId": msg.get("sessionId")}).encode()
                     + b"\0")
        return msg

    def call(self, method: str, params: dict | None = None, session: str | None = None, timeout: float = 30.0):
        self._id += 1
        msg = {"id": self._id, "method": method, "params": params or {}}
        if session:
            msg["sessionId"] = session
        os.write(self._to_w, json.dumps(msg).encode() + b"\0")
        deadline = time.monotonic() + timeout
        while True:
            reply = self._read(deadline)
            if reply.get("id") == self._id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            self.events.append(reply)

    def wait_for(self, method: str, timeout: float = 30.0) -> dict:
        deadline = time.monotonic() + timeout
        for e in self.events:
            if e.get("method") == method:
                return e
        while True:
            e = self._read(deadline)
            self.events.append(e)
            if e.get("method") == method:
                return e

    def drain(self, seconds: float) -> None:
        deadline = time.monotonic() + seconds
        try:
            while True:
                self.events.append(self._read(deadline))
        except TimeoutError:
            pass

    def close(self) -> None:
        try:
            self.call("Browser.close", timeout=5)
        except Exception:
            pass
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        for fd in (self._to_w, self._from_r):
            try:
                os.close(fd)
            except OSError:
                pass


def _open_in_chromium(html_path: Path):
    """Load ``html_path`` in headless Chromium; yields (evaluate(js) -> value, events)."""
    exe = _chromium()
    if exe is None:
        pytest.skip("chromium not found on PATH (Debian package `chromium`; .ci/run installs it when it can)")
    profile = tempfile.mkdtemp(prefix="ladder-chromium-")
    try:
        pipe = _Pipe(exe, profile)
        try:
            target = pipe.call("Target.createTarget", {"url": "about:blank"})["targetId"]
            session = pipe.call("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
            for domain in ("Page", "Runtime", "Log"):
                pipe.call(f"{domain}.enable", session=session)
            pipe.call("Page.navigate", {"url": html_path.resolve().as_uri()}, session=session)
            pipe.wait_for("Page.loadEventFired", timeout=60)
            pipe.drain(1.0)  # late console messages, dialogs

            def evaluate(js: str):
                r = pipe.call("Runtime.evaluate", {"expression": js, "returnByValue": True}, session=session)
                return r["result"].get("value")

            yield evaluate, pipe.events
        finally:
            pipe.close()
    finally:
        shutil.rmtree(profile, ignore_errors=True)


@pytest.fixture(scope="module")
def browser_page(fit_dir):
    """The report loaded in headless Chromium: (evaluate(js) -> value, events)."""
    yield from _open_in_chromium(fit_dir / "report.html")


def _console_errors(events) -> list:
    return [e for e in events if (e.get("method") == "Runtime.consoleAPICalled" and e["params"]["type"] == "error")
            or e.get("method") == "Runtime.exceptionThrown"
            or (e.get("method") == "Log.entryAdded" and e["params"]["entry"]["level"] == "error")]


def test_browser_shows_no_console_errors(browser_page):
    _, events = browser_page
    assert _console_errors(events) == []


def test_browser_decodes_every_image(browser_page, fit_dir):
    evaluate, _ = browser_page
    images = evaluate("Array.from(document.images).map(i => [i.alt, i.complete, i.naturalWidth, i.naturalHeight])")
    assert len(images) == len(list(fit_dir.glob("*.png")))
    for alt, complete, w, h in images:
        assert complete and w > 0 and h > 0, alt


def test_browser_runs_nothing_from_the_catalogue_and_shows_the_name_as_text(browser_page):
    evaluate, events = browser_page
    assert not [e for e in events if e.get("method") == "Page.javascriptDialogOpening"]
    assert evaluate("document.scripts.length") == 0
    assert EVIL in evaluate("document.body.innerText")


def test_report_anchor_pull_is_computed_from_the_fit(fit_dir):
    """The anchor's z in the report: (mu_geo - posterior mean) / hypot(mu_geo_err, posterior sd), from the hosts
    table given to the fit and distances.ecsv, to the printed two decimals."""
    text = (fit_dir / "report.html").read_text(encoding="utf-8")
    prov = json.loads((fit_dir / "provenance.json").read_text())
    hosts = Table.read(prov["inputs"]["hosts"]["path"], format="ascii.ecsv")
    dist = Table.read(fit_dir / "distances.ecsv", format="ascii.ecsv")
    (a,) = [r for r in hosts if r["role"] == "anchor"]
    (d,) = [r for r in dist if r["host"] == a["host"]]
    z = (float(a["mu_geo"]) - float(d["mu_mean"])) / math.hypot(float(a["mu_geo_err"]), float(d["mu_sd"]))
    row = re.search(re.escape(f"<td>{a['host']}</td>") + r'<td class="n">[^<]*</td><td class="n">[^<]*</td>'
                    r'<td class="n">([-+\d.]+)</td>', text)
    assert row and abs(float(row.group(1)) - z) <= REPORT_Z_ATOL


def test_sweep_report_in_the_browser(tmp_path_factory, capsys):
    """`ladder report` on a sweep directory (the session's tiny sweep, tests/sweep_fixtures.py, whose ``broken``
    variant failed): its table and figure in one self-contained file, the failed variant marked, shown in Chromium
    with no console error, every image decoded and no script."""
    from sweep_fixtures import tiny_sweep

    _, out, table, _, _ = tiny_sweep(str(tmp_path_factory.getbasetemp() / "tiny_sweep"))
    assert main(["report", str(out)]) == 0
    path = out / "report.html"
    text = path.read_text(encoding="utf-8")
    bad = sum(1 for r in table if r["status"] != "done" or not r["passed"])  # broken, and any failed gate
    assert bad >= 1 and "sweep report" in text and f"{bad} of {len(table)} variants failed" in text
    assert "<script" not in text
    for name in table["variant"]:
        assert f">{name}<" in text
    page = _open_in_chromium(path)
    evaluate, events = next(page)
    try:
        assert _console_errors(events) == []
        images = evaluate("Array.from(document.images).map(i => [i.complete, i.naturalWidth])")
        assert len(images) == 1 and images[0][0] and images[0][1] > 0
        assert evaluate("document.scripts.length") == 0
        assert "simulated crash in the sampler" in evaluate("document.body.innerText")
    finally:
        page.close()
