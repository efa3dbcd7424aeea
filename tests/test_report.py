"""HTML report pages: content, self-containment, and rendering in a real browser.

The browser check starts headless Chromium (Debian package ``chromium``, installed by
.ci/run) through Playwright, loads the pages from disk and checks the DOM: one table row
per star, sorting works, images decoded with non-zero size. On CI a missing browser is a
failure, not a skip (pattern: optional-dependency skips that CI makes strict).
"""

from __future__ import annotations

import base64
import json
import os
import re
import shutil

import matplotlib.pyplot as plt
import pytest

from rotinfer.errors import InputError
from rotinfer.report import find_star_folders, lookup, write_star_page, write_vetting_page

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


def _summary(identifier, period, detected=True, converged=True, harmonic=False,
             sampling=False):
    return {
        "identifier": identifier,
        "period": {"median": period, "interval_68": [period * 0.97, period * 1.03],
                   "interval_95": [period * 0.94, period * 1.06], "map": period,
                   "mcse": {"unit": "d", "median": 0.0021, "interval_68": [0.0032, 0.0035],
                            "interval_95": [0.0071, 0.0093], "largest": 0.0093,
                            "relative": 0.054}},
        "amplitude_ppt": {"median": 4.2, "interval_68": [3.9, 4.5], "interval_95": [3.5, 4.9]},
        "coherence_time_days": {"median": 30.0, "interval_68": [20.0, 45.0],
                                "interval_95": [12.0, 70.0]},
        "detected": detected,
        "converged": converged,
        "harmonic": {"flag": harmonic, "probability_half": 0.2 if harmonic else 0.0,
                     "probability_double": 0.0},
        "sampling": {"flag": sampling, "probability": 0.8 if sampling else 0.0,
                     "tolerance": 0.05,
                     "periodicities": [{"period": 0.9973, "power": 0.66,
                                        "probability": 0.8 if sampling else 0.0}]},
        "baselines": {"lomb_scargle": {"period": period / 2, "power": 0.4,
                                       "false_alarm_probability": 1e-30},
                      "acf": {"period": period, "local_peak_height": 0.5, "uncertainty": 0.1}},
        "diagnostics": {"rule": "converged = long chains and R-hat below 1.01",
                        "modes": [{"period": period, "converged": converged, "n_steps": 900,
                                   "reasons": [] if converged else ["R-hat 1.2 > 1.01"],
                                   "tau_steps": {"log_period": 12.0},
                                   "length_in_tau": {"log_period": 75.0},
                                   "ess": {"log_period": 800.0},
                                   "rhat": {"log_period": 1.003},
                                   "period_precision": 0.043}]},
        "seconds": 12.5,
        "seed": 1,
        "version": "test",
        "config": {"sampler": {"max_steps": 100, "tau_multiple": 20.0}},
    }


def _star_folder(root, name, period, **kw):
    folder = root / name
    folder.mkdir(parents=True)
    (folder / "summary.json").write_text(json.dumps(_summary(name, period, **kw)))
    fig, ax = plt.subplots(figsize=(2, 1))
    ax.plot([0, 1], [0, 1])
    fig.savefig(folder / "summary.png")
    fig.savefig(folder / "thumbnail.png", dpi=30)
    plt.close(fig)
    return folder


def test_star_page_explains_the_sampling_warning(tmp_path):
    folder = _star_folder(tmp_path, "Kestrel-8", 0.9975, sampling=True)
    page = write_star_page(folder).read_text()
    assert "Sampling warning" in page and "0.9973 d" in page and "0.8 of its probability" in page


def test_star_page_names_a_baseline_behind_the_harmonic_warning(tmp_path):
    folder = _star_folder(tmp_path, "Kestrel-9", 1.53, harmonic=True)
    summary = json.loads((folder / "summary.json").read_text())
    summary["harmonic"].update(flag_posterior=False, flag_baselines=True, baselines=[
        {"method": "acf", "period": 2.98, "relation": "2P"}])
    (folder / "summary.json").write_text(json.dumps(summary))
    page = write_star_page(folder).read_text()
    assert "the ACF period (2.98 d) is near 2P of the reported one" in page
    assert "probability to a period near half" not in page  # not the posterior's doing


def test_lookup_dotted_paths():
    d = {"a": {"b": {"c": 3}}}
    assert lookup(d, "a.b.c") == 3
    assert lookup(d, "a.x.c", default="none") == "none"


def test_star_page_is_self_contained_and_explains_flags(tmp_path):
    folder = _star_folder(tmp_path, "Kestrel-7", 11.3, converged=False, harmonic=True)
    page = write_star_page(folder).read_text()
    # Units beside every period and amplitude; flags in words.
    assert "11.3 d" in page and "4.2 ppt" in page
    assert "NOT CONVERGED" in page and "Harmonic warning" in page
    assert "length over 20 autocorrelation times" in page  # the configured rule, not 50
    assert "chains.h5) are extended, not sampled again" in page  # how to go on
    assert "Sampling warning" not in page
    assert "R-hat 1.2 &gt; 1.01" in page and "split R-hat across ensembles" in page
    assert "period precision 0.043" in page  # the optional clause's figure, when recorded
    # the Monte Carlo errors of the period's numbers, with units
    assert ("median ± 0.0021 d; 68 % ends ± 0.0032, ± 0.0035 d; 95 % ends ± 0.0071, "
            "± 0.0093 d") in page
    # Self-contained: the figure is embedded, and nothing is loaded from the network.
    assert "data:image/png;base64," in page
    assert not re.search(r"(src|href)=['\"]https?://", page)
    png = base64.b64decode(page.split("data:image/png;base64,")[1].split("'")[0])
    assert png.startswith(b"\x89PNG")


def test_vetting_page_requires_star_folders(tmp_path):
    with pytest.raises(InputError, match="no star folders"):
        write_vetting_page(tmp_path)
    with pytest.raises(InputError, match="not a folder of results"):
        write_vetting_page(tmp_path / "missing")


def test_broken_summary_is_input_error(tmp_path):
    folder = tmp_path / "bad"
    folder.mkdir()
    (folder / "summary.json").write_text("{not json")
    with pytest.raises(InputError, match="not a valid summary file"):
        write_star_page(folder)


def test_vetting_page_lists_every_star(tmp_path):
    names = ["Vireo-3", "Vireo-1", "Vireo-2"]
    for i, name in enumerate(names):
        _star_folder(tmp_path, name, 5.0 + 3 * i)
    (tmp_path / ".tmp-partial").mkdir()  # unfinished folders are not listed
    assert [p.name for p in find_star_folders(tmp_path)] == sorted(names)
    page = write_vetting_page(tmp_path).read_text()
    assert page.count("<tr><td data-sort=") == 3
    assert "Monte Carlo error [d] (/ its scale)" in page and ">0.0093 (0.054)</td>" in page
    for name in names:
        assert (tmp_path / name / "index.html").is_file()


@pytest.mark.skipif(CHROMIUM is None and os.environ.get("CI") != "true",
                    reason="headless Chromium not installed (CI installs it)")
def test_pages_render_in_headless_chromium(tmp_path):
    from playwright import sync_api  # in the test extras; drives the system Chromium

    assert CHROMIUM is not None, "CI must install Debian's chromium for the browser test"
    periods = {"Wren-1": 20.0, "Wren-2": 3.5, "Wren-3": 9.0}
    for name, p in periods.items():
        _star_folder(tmp_path, name, p)
    vetting = write_vetting_page(tmp_path)
    args = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
            "--disable-background-networking", "--disable-component-update", "--disable-sync"]
    with sync_api.sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM, args=args)
        try:
            page = browser.new_page()
            requests = []
            page.on("request", lambda r: requests.append(r.url))
            page.goto(vetting.as_uri())
            assert page.locator("#stars tbody tr").count() == 3
            sizes = page.eval_on_selector_all(
                "img.thumb", "els => els.map(e => [e.complete, e.naturalWidth, e.naturalHeight])")
            assert len(sizes) == 3 and all(c and w > 0 and h > 0 for c, w, h in sizes)
            # Sort by period (third column): ascending order after one click.
            page.click("#stars thead th:nth-child(3)")
            shown = page.eval_on_selector_all(
                "#stars tbody tr td:nth-child(3)",
                "tds => tds.map(t => parseFloat(t.dataset.sort))",
            )
            assert shown == sorted(periods.values())
            # A star page: embedded figure decodes; no request leaves the disk.
            page.goto((tmp_path / "Wren-1" / "index.html").as_uri())
            w = page.eval_on_selector("figure img", "e => e.naturalWidth")
            assert w > 0
            assert all(u.startswith(("file:", "data:")) for u in requests)
        finally:
            browser.close()
