"""Interrupting a survey process (SIGINT, SIGTERM) and running it again.

A survey runs in a child Python process with a slow test-seam analysis
(``survey_seams.summarise`` with a pause: a real function, not a fake of the
science); once some stars are finished the test signals that process only.
Then: the exit status is 128 + signal, nothing partial is left, the catalogue lists
exactly the finished stars; a rerun completes the rest without recomputing or
rewriting the finished ones, and the final catalogue has each star once.
"""

from __future__ import annotations

import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest
import survey_seams as seams
from astropy.table import Table
from survey_checks import assert_no_leftovers, calls, snapshot

from rotinfer.cli import main
from rotinfer.survey import SurveyResult, run_survey

TESTS = Path(__file__).resolve().parent
STARS = [f"star{k}" for k in range(6)]

SCRIPT = """
import sys
sys.path.insert(0, {tests!r})
import survey_seams
from rotinfer.survey import SurveyInterrupted, run_survey

if __name__ == "__main__":
    try:
        run_survey([{lc!r}], out={out!r}, config={config!r}, workers=2, progress=False,
                   analyse=survey_seams.summarise)
    except SurveyInterrupted as exc:
        print(exc, file=sys.stderr)
        sys.exit(exc.exit_code)
"""


def _finished(out: Path) -> list[Path]:
    stars = out / "stars"
    if not stars.is_dir():
        return []
    return [p for p in stars.iterdir() if (p / "done.json").is_file()]


@pytest.mark.parametrize(("sig", "code"), [(signal.SIGINT, 130), (signal.SIGTERM, 143)])
def test_interrupted_survey_saves_what_finished_and_a_rerun_completes_it(tmp_path, sig, code):
    lc = tmp_path / "lc"
    seams.write_light_curves(lc, STARS)
    out = tmp_path / "out"
    log = tmp_path / "calls.log"
    config = {"log": str(log), "sleep_all": 1.0}
    script = tmp_path / "survey_script.py"
    script.write_text(textwrap.dedent(SCRIPT).format(
        tests=str(TESTS), lc=str(lc), out=str(out), config=config))
    proc = subprocess.Popen([sys.executable, str(script)], stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 90
        while len(_finished(out)) < 2 and time.monotonic() < deadline and proc.poll() is None:
            time.sleep(0.05)
        assert proc.poll() is None, "the survey ended before it could be interrupted"
        assert len(_finished(out)) >= 2, "no star finished in 90 s"
        proc.send_signal(sig)  # the survey process only, not its workers
        _, stderr = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == code, stderr
    assert "interrupted by " + signal.Signals(sig).name in stderr

    # Nothing partial: no temporary folders, every star folder complete.
    assert_no_leftovers(out)
    done = sorted(p.name for p in _finished(out))
    assert sorted(p.name for p in (out / "stars").iterdir() if p.is_dir()) == done
    assert len(done) < len(STARS), "interrupted too late to test resuming"
    table = Table.read(out / "catalog.ecsv", format="ascii.ecsv")
    assert sorted(table["identifier"]) == done  # exactly the finished stars, once each

    before = snapshot(out / "stars")
    n_calls = len(calls(log))
    result = run_survey([lc], out=out, config=config, workers=2, progress=False,
                        analyse=seams.summarise)
    assert result.complete and result.n_reused == len(done)
    assert sorted(calls(log)[n_calls:]) == sorted(set(STARS) - set(done))
    after = snapshot(out / "stars")
    assert {k: after[k] for k in before} == before  # finished stars not rewritten
    table = Table.read(out / "catalog.ecsv", format="ascii.ecsv")
    assert sorted(table["identifier"]) == STARS  # complete, no duplicates
    assert set(table["status"]) == {"ok"}
    assert_no_leftovers(out)


def test_cli_maps_an_interrupted_survey_to_its_exit_status(tmp_path, monkeypatch, capsys):
    import rotinfer.survey as survey_pkg
    from rotinfer.survey import SurveyInterrupted

    def interrupted(*args, **kwargs):
        result = SurveyResult(out=tmp_path, catalog=tmp_path / "catalog.ecsv", records=(),
                              n_stars=3, n_reused=0, n_computed=0, config_hash="x",
                              seconds=1.0, interrupted=signal.SIGINT)
        raise SurveyInterrupted(result)

    # The command looks run_survey up in rotinfer.survey when it runs.
    monkeypatch.setattr(survey_pkg, "run_survey", interrupted)
    code = main(["survey", str(tmp_path), "--out", str(tmp_path / "o")])
    assert code == 130
    assert "interrupted by SIGINT; 0 of 3 stars" in capsys.readouterr().err
