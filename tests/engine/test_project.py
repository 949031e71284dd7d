"""The project file: round trip, atomic save, damaged and newer files, and the JSON Schema."""
from __future__ import annotations

import json
import os
from importlib import resources

import pytest

from loopwright.engine import project
from loopwright.engine.errors import FormatVersionError, ProjectFileError
from diagrams import SAMPLES, sample_path
from loopwright.engine.project import dumps, load, loads, save



def test_there_are_at_least_three_samples():
    assert len(SAMPLES) >= 3


@pytest.mark.parametrize("name", SAMPLES)
def test_load_then_save_gives_an_identical_file(name, tmp_path):
    original = sample_path(name).read_text(encoding="utf-8")
    out = tmp_path / name
    save(load(sample_path(name)), out)
    assert out.read_text(encoding="utf-8") == original


@pytest.mark.parametrize("name", SAMPLES)
def test_samples_follow_the_schema(name):
    jsonschema = pytest.importorskip("jsonschema")
    schema = json.loads((resources.files("loopwright.resources") / "diagram.schema.json").read_text(encoding="utf-8"))
    jsonschema.validate(json.loads(sample_path(name).read_text(encoding="utf-8")), schema)


@pytest.mark.parametrize("name", SAMPLES)
def test_samples_are_labelled_demo_data(name):
    meta = load(sample_path(name)).meta
    assert meta.get("demo_data") is True and "demo data" in meta["description"].lower()


def test_round_trip_keeps_the_diagram_equal():
    d = load(sample_path(SAMPLES[0]))
    assert loads(dumps(d)) == d


def test_newer_version_is_refused_clearly():
    text = dumps(load(sample_path(SAMPLES[0]))).replace('"version": 1', '"version": 99')
    with pytest.raises(FormatVersionError, match="newer Loopwright"):
        loads(text)


@pytest.mark.parametrize(
    "text, message",
    [
        ("{not json", "not valid JSON"),
        ("[]", "top level must be a JSON object"),
        ('{"format": "other"}', "not a Loopwright diagram"),
        ('{"format": "loopwright-diagram", "version": 1, "blocks": [{"name": "P", "kind": "thing", "params": {}}], "wires": []}', r"blocks\[0\]\.kind \(block 'P'\): 'thing' is not one of plant, dynamic"),
        ('{"format": "loopwright-diagram", "version": 1, "blocks": [{"name": "P", "kind": "gain", "params": {"K": 1}}, {"name": "P", "kind": "gain", "params": {"K": 1}}], "wires": []}', r"blocks\[1\] \(block 'P'\): block name 'P' is already used"),
        ('{"format": "loopwright-diagram", "version": 1, "blocks": [{"name": "G", "kind": "gain", "params": {"K": [[1]]}}], "wires": [{"signal": "s", "from": "G.out", "to": ["H.in"]}]}', r"wires\[0\]\.to\[0\] \(wire 's'\): no block named 'H'"),
        ('{"format": "loopwright-diagram", "version": 1, "blocks": [{"name": "G", "kind": "gain", "params": {"K": [[1]]}}], "wires": [{"signal": "s", "from": "G.in", "to": ["G.in"]}]}', "not an output port"),
    ],
)
def test_damaged_files_name_what_is_wrong(text, message):
    with pytest.raises(ProjectFileError, match=message):
        loads(text)


def test_missing_file_is_a_project_error(tmp_path):
    with pytest.raises(ProjectFileError, match="no such file"):
        load(tmp_path / "absent.lwd")


def test_a_crash_during_save_leaves_the_old_file(tmp_path, monkeypatch):
    target = tmp_path / "loop.lwd"
    d = load(sample_path(SAMPLES[0]))
    save(d, target)
    before = target.read_bytes()
    d.meta["title"] = "changed"

    def crash(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(project.os, "replace", crash)
    with pytest.raises(ProjectFileError, match="cannot be written"):
        save(d, target)
    assert target.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["loop.lwd"]  # no temporary file left behind


def test_save_keeps_the_file_mode(tmp_path):
    target = tmp_path / "loop.lwd"
    save(load(sample_path(SAMPLES[0])), target)
    os.chmod(target, 0o600)
    save(load(sample_path(SAMPLES[0])), target)
    assert target.stat().st_mode & 0o777 == 0o600
