"""Survey inputs: safe folder names, per-star seeds, manifests, folders and patterns.

No worker processes here; the engine is tested in test_survey_engine.py.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from survey_seams import write_light_curves

from rotinfer.errors import InputError
from rotinfer.survey import (
    SurveyStore,
    assign_folder_names,
    collect_tasks,
    read_manifest,
    sanitise_identifier,
    star_seed,
)

ESCAPES = ["../../escaped", "/etc/passwd", "..", ".", "", "a/../../b", "..\\..\\win", "~root",
           "-rf", ".hidden", "con", "TIC 123/4", "x\x00y", "\u2025", "star:1"]


@pytest.mark.parametrize("identifier", ESCAPES)
def test_sanitised_names_stay_inside_the_folder(tmp_path, identifier):
    name = sanitise_identifier(identifier)
    assert name and name not in (".", "..")
    assert "/" not in name and "\\" not in name and "\x00" not in name
    assert not name.startswith((".", "-"))
    # The name, joined to a folder, resolves to a direct child of it (common practice:
    # the containment check of path-traversal defences).
    assert (tmp_path / name).resolve().parent == tmp_path.resolve()
    SurveyStore(tmp_path).folder(name)  # the store's own check accepts it


@given(st.text(max_size=300))
@settings(max_examples=300, deadline=None)
def test_any_identifier_gives_a_safe_child_name(identifier):
    name = sanitise_identifier(identifier)
    assert 0 < len(name) <= 100
    assert os.path.basename(name) == name and os.path.normpath(name) == name
    assert name not in (".", "..") and not name.startswith((".", "-"))


def test_plain_identifiers_are_kept():
    assert sanitise_identifier("KIC_8006161") == "KIC_8006161"
    assert sanitise_identifier("TIC 100001") == "TIC_100001"


def test_colliding_names_become_unique_and_order_free():
    idents = ["TIC 1", "TIC/1", "tic_1", "TIC_1", "", "..", "other"]
    names = assign_folder_names(idents)
    assert len({n.casefold() for n in names}) == len(names)
    assert names[-1] == "other"  # no collision, no suffix
    # Same names whatever the order the identifiers come in.
    shuffled = idents[::-1]
    assert dict(zip(shuffled, assign_folder_names(shuffled), strict=True)) == dict(
        zip(idents, names, strict=True)
    )
    # A colliding name ends with the first 8 hex digits of the identifier's SHA-256.
    expected = hashlib.sha256(b"TIC/1").hexdigest()[:8]
    assert names[1] == f"TIC_1-{expected}"


def test_long_identifier_is_shortened_with_its_hash():
    ident = "x" * 400
    name = sanitise_identifier(ident)
    assert len(name) <= 100
    assert name.endswith(hashlib.sha256(ident.encode()).hexdigest()[:8])


def test_star_seed_depends_only_on_master_seed_and_identifier():
    a = star_seed(0, "TIC 1")
    assert a == star_seed(0, "TIC 1")
    assert 0 <= a < 2**63
    assert a != star_seed(1, "TIC 1") and a != star_seed(0, "TIC 2")
    # Reproduce the documented recipe with NumPy directly (SeedSequence of the master
    # seed and the identifier's SHA-256 as little-endian 32-bit words).
    words = np.frombuffer(hashlib.sha256(b"TIC 1").digest(), dtype="<u4").tolist()
    state = np.random.SeedSequence([0, *words]).generate_state(1, dtype=np.uint64)[0]
    assert a == int(state) >> 1
    with pytest.raises(ValueError, match="non-negative"):
        star_seed(-1, "TIC 1")


def test_seeds_of_many_stars_are_distinct():
    seeds = {star_seed(7, f"star {k}") for k in range(5000)}
    assert len(seeds) == 5000


def _manifest(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def test_manifest_rows_files_and_stellar_parameters(tmp_path):
    write_light_curves(tmp_path / "lc", ["a1", "a2", "b"])
    m = _manifest(
        tmp_path / "stars.csv",
        "# a comment line\n"
        "identifier,files,radius,radius_err,notes\n"
        "00123,lc/a1.csv; lc/a2.csv,0.9,0.05,first\n"
        "TIC 9,lc/b.csv,,,\n",
    )
    tasks = read_manifest(m)
    assert [t.identifier for t in tasks] == ["00123", "TIC 9"]  # text kept: leading zeros
    first = tasks[0]
    assert first.files == (str(tmp_path / "lc/a1.csv"), str(tmp_path / "lc/a2.csv"))
    assert first.stellar_parameters == {"radius": 0.9, "radius_err": 0.05}
    assert tasks[1].stellar_parameters == {}
    assert tasks[1].name == "TIC_9"
    assert collect_tasks([m]) == tasks  # a manifest is recognised by its columns


def test_manifest_in_ecsv(tmp_path):
    from astropy.table import Table

    write_light_curves(tmp_path, ["a"])
    t = Table({"identifier": ["A"], "files": ["a.csv"], "mass": [1.1]})
    t.write(tmp_path / "m.ecsv", format="ascii.ecsv")
    (task,) = collect_tasks([tmp_path / "m.ecsv"])
    assert task.files == (str(tmp_path / "a.csv"),) and task.stellar_parameters == {"mass": 1.1}


@pytest.mark.parametrize(
    ("text", "problem"),
    [
        ("identifier,files\nA,a.csv\nA,b.csv\n", "rows 1 and 2 have the same identifier 'A'"),
        ("identifier,files\n,a.csv\n", "row 1: empty identifier"),
        ("identifier,files\nA,\n", r"row 1 \(A\): no files"),
        ("name,files\nA,a.csv\n", "manifest lacks column\\(s\\) identifier; found: name, files"),
        ("identifier,files\nA,a.csv,extra\n", "row 1 has 3 cells but the header has 2"),
        ("identifier,files\n", "manifest has no rows"),
        ("identifier,files,radius\nA,a.csv,-1\n", "radius must be > 0 R_sun"),
        ("identifier,files,vsini\nA,a.csv,fast\n", "vsini"),
    ],
)
def test_bad_manifests_raise_one_line_naming_the_file(tmp_path, text, problem):
    m = _manifest(tmp_path / "m.csv", text)
    with pytest.raises(InputError, match=problem) as info:
        read_manifest(m)
    assert str(m) in str(info.value) and "\n" not in str(info.value)


def test_folder_and_pattern_inputs(tmp_path):
    write_light_curves(tmp_path / "d", ["s1", "s2"])
    (tmp_path / "d" / "notes.md").write_text("not a light curve")
    (tmp_path / "d" / ".hidden.csv").write_text("skipped")
    by_folder = collect_tasks([tmp_path / "d"])
    assert [t.identifier for t in by_folder] == ["s1", "s2"]
    by_pattern = collect_tasks([str(tmp_path / "d" / "s*.csv")])
    assert by_pattern == [t.__class__(**{**t.__dict__, "source": by_pattern[0].source})
                          for t in by_folder]
    with pytest.raises(InputError, match="pattern matches no files"):
        collect_tasks([str(tmp_path / "d" / "zz*.fits")])
    with pytest.raises(InputError, match="no such file or folder"):
        collect_tasks([tmp_path / "missing"])
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match="folder holds no light-curve files"):
        collect_tasks([tmp_path / "empty"])


def test_simulator_output_folder_is_surveyed_without_its_side_tables(tmp_path):
    # `rotinfer simulate` writes truth.ecsv, flares.ecsv and parameters.ecsv beside the
    # light curves; pointing a survey at that folder must give one task per star only.
    from rotinfer.simulate.output import write_population

    write_population(tmp_path / "sim", n=2, seed=3, population="easy", format="csv")
    tasks = collect_tasks([tmp_path / "sim"])
    assert [t.identifier for t in tasks] == ["kestrel-00001", "kestrel-00002"]
    assert [t.identifier for t in collect_tasks([str(tmp_path / "sim" / "*")])] == [
        "kestrel-00001", "kestrel-00002"]


def test_same_stem_in_two_folders_gives_distinct_identifiers(tmp_path):
    write_light_curves(tmp_path / "s14", ["tic1"])
    write_light_curves(tmp_path / "s15", ["tic1"])
    tasks = collect_tasks([tmp_path / "s14", tmp_path / "s15"])
    assert [t.identifier for t in tasks] == ["s14/tic1", "s15/tic1"]
    assert len({t.name for t in tasks}) == 2


def test_manifest_must_be_the_only_input(tmp_path):
    write_light_curves(tmp_path, ["a"])
    m = _manifest(tmp_path / "m.csv", "identifier,files\nA,a.csv\n")
    with pytest.raises(InputError, match="a manifest must be the only input"):
        collect_tasks([m, tmp_path / "a.csv"])
