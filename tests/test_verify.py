"""``ladder verify DIR``: the inputs named in provenance.json, re-hashed (SHA-256, FIPS 180-4).

The recorded hashes are checked against Python's hashlib (reference library) on the files as written.
"""

import hashlib
import json
import shutil

import pytest

from ladder.cli import EXIT_BAD_INPUT, EXIT_OK, EXIT_VERIFY_MISMATCH, main
from ladder.simulate import MockSettings, simulate, write_mock
from ladder.verify import verify


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """A tiny real fit of an invented mock: (mock paths, output directory)."""
    base = tmp_path_factory.mktemp("verify")
    paths = write_mock(simulate(MockSettings(n_hosts=4, n_cepheids=100), 5), base / "mock",
                       run_overrides={"sampler": {"chains": 1, "warmup": 20, "draws": 20, "progress": False}})
    out = base / "out"
    assert main(["fit", str(paths["run"]), "--out", str(out), "--no-plots"]) == 0
    return paths, out


@pytest.fixture
def fresh(fitted, tmp_path):
    """A copy of the mock and of the output set whose provenance points at the copy (free to edit)."""
    paths, out = fitted
    mock = tmp_path / "mock"
    shutil.copytree(paths["run"].parent, mock)
    copy = tmp_path / "out"
    shutil.copytree(out, copy)
    prov = json.loads((copy / "provenance.json").read_text())
    for entry in prov["inputs"].values():
        entry["path"] = entry["path"].replace(str(paths["run"].parent.resolve()), str(mock.resolve()))
    (copy / "provenance.json").write_text(json.dumps(prov))
    return mock, copy


def test_recorded_hashes_are_hashlib_sha256_of_the_inputs(fitted):
    paths, out = fitted
    prov = json.loads((out / "provenance.json").read_text())
    assert set(prov["inputs"]) == {"run", "cepheids", "hosts"}
    for role, entry in prov["inputs"].items():
        assert entry["sha256"] == hashlib.sha256(paths[role].read_bytes()).hexdigest(), role


def test_untouched_inputs_verify(fitted, capsys):
    _, out = fitted
    assert [c.status for c in verify(out)] == ["ok", "ok", "ok"]
    assert main(["verify", str(out)]) == EXIT_OK
    got = capsys.readouterr()
    assert got.out.count("ok ") == 3 and "all 3 inputs match" in got.err


def test_edited_input_is_changed(fresh, capsys):
    mock, out = fresh
    assert main(["verify", str(out)]) == EXIT_OK
    hosts = mock / "hosts.ecsv"
    text = hosts.read_text()
    hosts.write_text(text.replace(" 0.03 ", " 0.04 ", 1))  # one anchor's distance error, as a hand edit
    assert hosts.read_text() != text
    capsys.readouterr()
    assert main(["verify", str(out)]) == EXIT_VERIFY_MISMATCH
    got = capsys.readouterr()
    status = {c.role: c.status for c in verify(out)}
    assert status == {"run": "ok", "cepheids": "ok", "hosts": "changed"}
    assert any(ln.startswith("changed") and "hosts.ecsv" in ln for ln in got.out.splitlines()), got.out
    assert "hosts changed" in got.err


def test_deleted_input_is_missing(fresh, capsys):
    mock, out = fresh
    (mock / "cepheids.ecsv").unlink()
    assert main(["verify", str(out)]) == EXIT_VERIFY_MISMATCH
    got = capsys.readouterr()
    assert {c.role: c.status for c in verify(out)}["cepheids"] == "missing"
    assert any(ln.startswith("missing") and "cepheids.ecsv" in ln for ln in got.out.splitlines()), got.out


@pytest.mark.parametrize("text, culprit", [
    (None, "no provenance.json"),
    ("{not json", "malformed JSON"),
    ("[1, 2]", "'inputs'"),
    ('{"inputs": {}}', "'inputs'"),
    ('{"inputs": {"hosts": "x.ecsv"}}', "'inputs.hosts'"),
    ('{"inputs": {"hosts": {"sha256": null}}}', "'inputs.hosts.path'"),
    ('{"inputs": {"hosts": {"path": "/x", "sha256": "abc"}}}', "'inputs.hosts.sha256'"),
])
def test_missing_or_malformed_provenance_is_exit_2(tmp_path, capsys, text, culprit):
    d = tmp_path / "out"
    d.mkdir()
    if text is not None:
        (d / "provenance.json").write_text(text)
    assert main(["verify", str(d)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if ln]
    assert len(lines) == 1 and lines[0].startswith("ladder: error: ") and "provenance.json" in lines[0], err
    assert culprit in lines[0] and "Traceback" not in err


def test_not_a_directory_is_exit_2(tmp_path, capsys):
    assert main(["verify", str(tmp_path / "nowhere")]) == EXIT_BAD_INPUT
    assert "not a directory" in capsys.readouterr().err
