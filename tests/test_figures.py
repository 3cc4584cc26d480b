"""Figures and the Snakemake report: a tiny grid run end to end, then the report; the plot command.

Image checks read the files with Pillow (an independent PNG decoder, a matplotlib dependency) and
the PNG signature of the PNG specification (ISO/IEC 15948, W3C PNG 2nd ed., section 5.2).
"""

from __future__ import annotations

import itertools
import json
import re

import numpy as np
import pytest
import xarray as xr
import yaml
from PIL import Image

from conftest import copy_workflow, run_cli, snakemake
from sigmagrid import config as config_mod, figures, grid as grid_mod, grid_figures, plotstyle, store
from sigmagrid.errors import InputError
from sigmagrid.safety import CAUTION

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification, section 5.2

TINY = {
    "study": "tiny figure grid",
    "mechanism": "h2o2.yaml",
    "reactors": ["isolated"],
    "feed": {"fuel": "H2:1", "oxidizer": "O2:1, N2:3.76", "equivalence_ratio": [1.0]},
    "temperature": [1100.0],
    "pressure": [101325.0, 506625.0],
    "stop": {"max_time": 0.5},
    "batch": {"cases_per_job": 2},
    "reduction": {"thresholds": [0.0, 0.05]},
    "figures": {"cases": 1},
}


def assert_image(path, size):
    """A valid PNG of exactly ``size`` (width, height) px that is not blank."""
    assert path.is_file(), f"missing figure {path}"
    assert path.read_bytes()[:8] == PNG_SIGNATURE, f"{path} is not a PNG"
    with Image.open(path) as img:
        img.verify()  # Pillow's own integrity check of the chunks
    with Image.open(path) as img:
        assert img.size == tuple(size), f"{path.name}: {img.size} px, expected {size}"
        pixels = np.asarray(img.convert("L"), dtype=float)
    assert pixels.std() > 10.0, f"{path.name} looks blank (grey-level spread {pixels.std():.1f})"
    inked = (pixels < 200).mean()
    assert inked > 0.01, f"{path.name} has almost no ink ({inked:.2%} dark pixels)"


@pytest.fixture(scope="module")
def flow(tmp_path_factory):
    """The workflow run on the tiny grid, then ``--report``."""
    workdir = copy_workflow(tmp_path_factory.mktemp("figflow"), TINY)
    done = snakemake(workdir)
    assert done.returncode == 0, done.stderr[-3000:]
    report = snakemake(workdir, "--report", "results/report.html")
    assert report.returncode == 0, report.stderr[-3000:]
    (workdir / "report.log").write_text(report.stderr)
    return workdir


def expected_case_figures(case_path):
    names = ["entropy_production", "affinity_rate"]
    with xr.open_dataset(case_path) as ds:
        if "sea_time" in ds and "alignment" in ds:
            names += ["sea_paths", "alignment"]
    return names


def expected_grid_figures(results):
    names = ["map_ignition_delay", "map_entropy_produced", "map_time_to_90pct"]
    with xr.open_dataset(results / "summary.nc") as s:
        angle = grid_figures.path_angle_variable(s)
        if angle is not None:
            names += [f"map_path_angle_{m}" for m in s["metric"].values.astype(str)]
    if (results / "ranking.nc").is_file():
        names.append("ranking")
    if (results / "reduction.nc").is_file():
        names.append("cuts")
    return names


def test_every_expected_figure_is_a_valid_image_of_its_size(flow):
    results = flow / "results"
    grid = grid_mod.expand(config_mod.validate(TINY))
    chosen = figures.select_cases(grid.cases, 1)
    assert len(chosen) == 1
    for case in grid.cases:
        folder = results / "figures" / "cases" / case.case_id
        if case not in chosen:
            assert not folder.exists(), "figures.cases: 1 must draw one case only"
            continue
        for name in expected_case_figures(results / "cases" / f"{case.case_id}.nc"):
            assert_image(folder / f"{name}.png", figures.SIZE)
    sizes = {"ranking": grid_figures.RANKING_SIZE, "cuts": grid_figures.CUTS_SIZE}
    # one reactor type (one row of panels), two pressures (two columns)
    for name in expected_grid_figures(results):
        assert_image(results / "figures" / "grid" / f"{name}.png", sizes.get(name, grid_figures.map_size(1, 2)))
        svg = (results / "figures" / "grid" / f"{name}.svg").read_text()
        assert svg.lstrip().startswith("<?xml") and "<svg" in svg
    # the rank rules are part of the default workflow, so their charts must be there
    assert {"ranking", "cuts"} <= set(expected_grid_figures(results))


def test_report_builds_without_caption_warnings(flow):
    """Every caption is valid reStructuredText once rendered: docutils reports no warning."""
    log = (flow / "report.log").read_text()
    assert "(WARNING/" not in log and "(ERROR/" not in log, log[-3000:]


def _browser():
    """Headless Chromium through chromedriver (Debian's chromium and chromium-driver, which
    .ci/run installs); None where they are not installed, unless SIGMAGRID_REQUIRE_BROWSER is set."""
    import os
    import shutil

    chromium, driver = shutil.which("chromium"), shutil.which("chromedriver")
    try:
        from selenium import webdriver
        from selenium.webdriver.chrome.options import Options
        from selenium.webdriver.chrome.service import Service
    except ImportError:
        chromium = None
    if not (chromium and driver):
        if os.environ.get("SIGMAGRID_REQUIRE_BROWSER"):
            pytest.fail("SIGMAGRID_REQUIRE_BROWSER is set but chromium, chromedriver or selenium is missing")
        pytest.skip("no chromium, chromedriver or selenium here (.ci/run installs them)")
    options = Options()
    options.binary_location = chromium
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--window-size=1400,1000"):
        options.add_argument(arg)
    return webdriver.Chrome(service=Service(driver), options=options)


def _decoded_png(browser, image) -> bool:
    """A PNG image of the page that is shown and decoded (its natural width is known)."""
    return ((image.get_attribute("src") or "").startswith("data:image/png") and image.is_displayed()
            and browser.execute_script("return arguments[0].naturalWidth", image) > 0)


def test_report_shows_every_figure_in_a_browser(flow):
    """The report opened in a real browser: every category and case group lists its figures,
    and clicking each one's view button displays that PNG, decoded at its full width."""
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import WebDriverWait

    pngs = {p.name: Image.open(p).size[0] for p in (flow / "results" / "figures" / "grid").glob("*.png")}
    per_case = sorted((flow / "results" / "figures" / "cases").rglob("*.png"))
    browser = _browser()
    shown: list[str] = []
    try:
        wait = WebDriverWait(browser, 20)

        def open_menu(*path):
            browser.get((flow / "results" / "report.html").as_uri())
            for text in path:
                wait.until(lambda b: b.find_elements(By.LINK_TEXT, text))[0].click()

        def view_all(*path):
            open_menu(*path)
            rows = wait.until(lambda b: b.find_elements(By.XPATH, "//tr[.//a[@iconname='eye']]"))
            for i in range(len(rows)):
                row = browser.find_elements(By.XPATH, "//tr[.//a[@iconname='eye']]")[i]
                if "table" in row.text:
                    continue  # the reduction table: not an image
                row.find_element(By.XPATH, ".//a[@iconname='eye']").click()
                images = wait.until(lambda b: [im for im in b.find_elements(By.TAG_NAME, "img") if _decoded_png(b, im)])
                name = re.search(r"filename=([^;,]+\.png)", images[0].get_attribute("src")).group(1)
                width = browser.execute_script("return arguments[0].naturalWidth", images[0])
                shown.append(name)
                if name in pngs:
                    assert width == pngs[name], (name, width)
                open_menu(*path)

        view_all("Grid figures")
        open_menu("Per-case figures")
        wait.until(lambda b: b.find_elements(By.XPATH, "//tr[.//a[@iconname='eye']]")
                   or len(b.find_elements(By.TAG_NAME, "a")) > 8)
        if browser.find_elements(By.XPATH, "//tr[.//a[@iconname='eye']]"):
            view_all("Per-case figures")  # a single case: its figures are listed at once
        else:
            menu = {"", "Results", "Per-case figures", "Grid figures", "Workflow", "Statistics", "About"}
            groups = [a.text for a in browser.find_elements(By.TAG_NAME, "a") if a.text not in menu]
            assert len(groups) == len({p.parent.name for p in per_case}), groups
            for group in groups:
                view_all("Per-case figures", group)
    finally:
        browser.quit()
    assert sorted(n for n in shown if n in pngs) == sorted(pngs)
    assert len(shown) == len(pngs) + len(per_case)


def test_report_is_self_contained_with_every_figure_and_caption(flow):
    html = (flow / "results" / "report.html").read_text()
    pngs = sorted((flow / "results" / "figures").rglob("*.png"))
    assert pngs
    for png in pngs:
        rel = png.relative_to(flow).as_posix()
        assert f'"{rel}": {{' in html, f"{rel} is not in the report"
    # every image is embedded (data URI), nothing is fetched from elsewhere
    assert html.count('"data_uri": "data:image/png') == len(pngs)
    assert not re.search(r'(src|href)="https?://', html)
    for caption in ("Entropy production by reaction.", "Affinity-rate pairs.", "Map over the grid.",
                    "Ranking of reactions by entropy production.", "Reduced mechanisms: size against error."):
        assert caption in html, caption
    assert CAUTION in html or json.dumps(CAUTION)[1:-1] in html


def test_plot_command_writes_the_case_figures(flow, tmp_path):
    case = sorted((flow / "results" / "cases").glob("*.nc"))[0]
    out = tmp_path / "figs"
    done = run_cli("plot", str(case), "--out-dir", str(out), "--top", "4")
    assert done.returncode == 0, done.stderr
    for name in expected_case_figures(case):
        assert_image(out / f"{name}.png", figures.SIZE)
        assert f"wrote {out / name}.png" in done.stderr  # messages on stderr


@pytest.mark.parametrize("make", ["summary", "text", "missing"])
def test_plot_command_refuses_what_is_not_a_case_file(flow, tmp_path, make):
    if make == "summary":
        target = flow / "results" / "summary.nc"
    elif make == "text":
        target = tmp_path / "notes.nc"
        target.write_text("not netCDF at all\n")
    else:
        target = tmp_path / "absent.nc"
    out = tmp_path / "never"
    done = run_cli("plot", str(target), "--out-dir", str(out))
    assert done.returncode == 2
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("sigmagrid: error: FILE: "), done.stderr
    assert "Traceback" not in done.stderr
    assert not out.exists()
    if make == "summary":
        assert "plot-grid" in lines[0]


def test_plot_command_refuses_a_bad_top(flow, tmp_path):
    case = sorted((flow / "results" / "cases").glob("*.nc"))[0]
    done = run_cli("plot", str(case), "--out-dir", str(tmp_path / "x"), "--top", "0")
    assert done.returncode == 2 and done.stderr.startswith("sigmagrid: error: --top: ")
    assert not (tmp_path / "x").exists()


def test_samples_follow_the_exact_mass_action_curve(flow):
    # What the affinity-rate figure draws: for mass action with detailed balance r-/r+ = exp(-x),
    # so q = r+ (1 - exp(-x)) (de Donder). The stored samples keep 4-5
    # significant digits (store.SIGNIFICANT_DIGITS), which limits the agreement to about 1e-4.
    case = sorted((flow / "results" / "cases").glob("*.nc"))[0]
    with xr.open_dataset(case) as ds:
        x = store.disequilibrium(ds).values.astype(float)
        q = ds["net_rate"].values.astype(float)
        rf = ds["forward_rate"].values.astype(float)
        reversible = ds["reversible"].values.astype(bool)
    use = np.isfinite(x) & (np.abs(x) > 1e-6) & (rf > 1e-30) & reversible[None, :]
    exact = rf[use] * -np.expm1(-x[use])
    rel = np.abs(q[use] - exact) / np.abs(exact)
    assert use.sum() > 100 and np.max(rel) < 1e-3, np.max(rel)


def test_onsager_rate_is_the_one_way_rate_at_equilibrium(h2o2):
    # Cantera as the reference: at equilibrium forward and reverse rates of progress agree, and
    # the figure's r_eq = sqrt(r+ r-) must be that common one-way rate.
    gas, _ = h2o2
    gas.TPX = 1500.0, 101325.0, "H2:2, O2:1, N2:3.76"
    gas.equilibrate("UV")
    rf, rr = gas.forward_rates_of_progress, gas.reverse_rates_of_progress
    ds = xr.Dataset({"forward_rate": (("time", "reaction"), rf[None, :]),
                     "reverse_rate": (("time", "reaction"), rr[None, :])})
    r_eq = figures.equilibrium_one_way_rate(ds)
    big = rf > 1e-12 * rf.max()
    assert np.allclose(r_eq[big], rf[big], rtol=1e-6)


def test_subset_of_cases_spreads_over_the_grid():
    raw = dict(TINY, reactors=["isolated", "constant-pressure"],
               feed={"fuel": "H2:1", "oxidizer": "O2:1, N2:3.76", "equivalence_ratio": [0.5, 1.0, 2.0]},
               temperature=[1000.0, 1200.0])
    cases = grid_mod.expand(config_mod.validate(raw)).cases
    assert len(cases) == 24
    ordered = figures.select_cases(cases, "all")
    five = figures.select_cases(cases, 5)
    assert len(five) == 5 and five[0] == ordered[0] and five[-1] == ordered[-1]
    assert {c.reactor for c in five} == {"isolated", "constant-pressure"}
    assert figures.select_cases(cases, 0) == []
    assert figures.select_cases(cases, 100) == ordered
    by_label = figures.select_cases(cases, [ordered[3].label, ordered[7].case_id])
    assert by_label == [ordered[3], ordered[7]]
    with pytest.raises(InputError) as err:
        figures.select_cases(cases, [ordered[0].label, "no-such-case"])
    assert err.value.field == "figures.cases[1]"


def test_bad_figures_config_is_one_line(workdir):
    config = dict(TINY, figures={"cases": "several"})
    (workdir / "config" / "config.yaml").write_text(yaml.safe_dump(config))
    done = snakemake(workdir, "-n")
    assert done.returncode != 0
    assert "sigmagrid: error: figures.cases: 'several' is not allowed" in done.stderr
    assert "Traceback" not in done.stderr


def test_palette_is_okabe_ito():
    # Okabe and Ito, "Color Universal Design" (2008), the published hex values (from memory)
    published = {"#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}
    assert set(plotstyle.SERIES) == published
    assert "#F0E442" not in plotstyle.LINE_SERIES  # yellow is too faint for lines on white


def test_labels_carry_units_and_readable_equations():
    assert plotstyle.axis_label("net rate", "mol m-3 s-1") == "net rate [mol m⁻³ s⁻¹]"
    assert plotstyle.axis_label("entropy", "J K-1") == "entropy [J K⁻¹]"
    assert plotstyle.equation_label("2 OH (+M) <=> H2O2 (+M)", 21) == "R21  2 OH (+M) ⇌ H₂O₂ (+M)"
    assert plotstyle.equation_label("H + O2 => O + OH", 0, duplicate=True) == "R0  H + O₂ → O + OH  (dup.)"


@pytest.fixture(scope="module")
def sea_case_file(tmp_path_factory, h2o2):
    """A case file with the SEA variables: from the runner once it writes them, else the case
    file and sea.compare's Dataset joined here (the SEA axis renamed off the sample progress)."""
    from sigmagrid import mechanism, runner, sea
    from sigmagrid.reactors import relax

    gas, info = h2o2
    raw = dict(TINY, reactors=["constant-pressure"], pressure=[101325.0])
    config = config_mod.validate(raw)
    case = grid_mod.expand(config).cases[0]
    settings = runner.RunSettings.from_config(config)
    meta = runner.provenance(mechanism.resolve("h2o2.yaml"), "test")
    ds = runner.run_case(case, gas, info, settings, meta)
    if "sea_time" not in ds:
        rel = relax(gas, info, case.reactor, case.temperature, case.pressure, case.mole_fractions(), settings.relax)
        idx = store.choose_samples(rel.time, rel.progress, rel.temperature, settings.max_samples)
        assert idx.size == ds.sizes["time"]
        extra = sea.compare(gas, info, rel, idx)
        extra = extra.drop_vars(["reaction", "species", "time"])
        ds = xr.merge([ds, extra.assign_coords(time=ds["time"])], compat="override")
    path = tmp_path_factory.mktemp("sea") / f"{case.case_id}.nc"
    store.write_atomic(ds, path)
    return path


def test_sea_figures_from_a_case_with_the_comparison(sea_case_file, tmp_path):
    written = figures.plot_case(sea_case_file, tmp_path, log=lambda line: None)
    assert [p.stem for p in written] == list(figures.CASE_FIGURES)
    for path in written:
        assert_image(path, figures.SIZE)


def test_sea_figures_are_skipped_with_a_note_without_the_comparison(flow, tmp_path):
    case = sorted((flow / "results" / "cases").glob("*.nc"))[0]
    with xr.open_dataset(case) as ds:
        plain = ds.drop_vars([v for v in ds.variables if "metric" in ds[v].dims or v.startswith("sea_")]).load()
    path = tmp_path / "plain.nc"
    store.write_atomic(plain, path)
    notes = []
    written = figures.plot_case(path, tmp_path / "out", log=notes.append)
    assert [p.stem for p in written] == ["entropy_production", "affinity_rate"]
    assert any("sea_paths skipped: no steepest-entropy-ascent comparison" in n for n in notes), notes
    assert any("alignment skipped" in n for n in notes), notes


def test_failed_case_gets_no_figures_and_a_note(flow, tmp_path):
    case = sorted((flow / "results" / "cases").glob("*.nc"))[0]
    with xr.open_dataset(case) as ds:
        failed = ds.load()
    failed.attrs.update(status="failed", reason="made up for the test")
    path = tmp_path / "failed.nc"
    store.write_atomic(failed, path)
    notes = []
    assert figures.plot_case(path, tmp_path / "out", log=notes.append) == []
    assert notes and "no figures: case failed (made up for the test)" in notes[0]
    assert not list((tmp_path / "out").glob("*.png"))


def test_map_marks_missing_and_unrelaxed_cases(tmp_path):
    # a synthetic summary: 2 reactors x 3 pressures, 2 x 2 cells, one NaN, one case not relaxed
    rows = [(r, p, phi, t) for r in ("isolated", "isothermal") for p in (1e5, 5e5, 1e6)
            for phi in (0.8, 1.6) for t in (900.0, 1300.0)]
    n = len(rows)
    status = np.array(["relaxed"] * n, dtype=object)
    status[3] = "not-relaxed"
    values = np.geomspace(1e-5, 1e-2, n)
    values[5] = np.nan
    summary = xr.Dataset(
        {"entropy_produced": (("case", "reaction"), np.ones((n, 1)))},
        coords={"case": np.arange(n).astype(str), "reactor": ("case", [r[0] for r in rows]),
                "initial_pressure": ("case", [r[1] for r in rows]),
                "equivalence_ratio": ("case", [r[2] for r in rows]),
                "initial_temperature": ("case", [r[3] for r in rows]), "status": ("case", status.astype(str))})
    fig = grid_figures.plot_map(summary, values, "ignition delay", "s", log=True)
    texts = [t.get_text() for ax in fig.axes for t in ax.texts] + [t.get_text() for t in fig.texts]
    assert sum(t == "n/a" for t in texts) == 1
    assert sum(t.endswith(" *") for t in texts) == 1
    assert any("did not relax" in t for t in texts)
    path = plotstyle.save(fig, tmp_path / "map.png")
    assert_image(path, grid_figures.map_size(2, 3))


def test_grid_figures_refuse_a_case_file(flow, tmp_path):
    case = sorted((flow / "results" / "cases").glob("*.nc"))[0]
    done = run_cli("plot-grid", str(case), "--out-dir", str(tmp_path / "g"))
    assert done.returncode == 2 and done.stderr.startswith("sigmagrid: error: SUMMARY: ")
    assert "sigmagrid plot" in done.stderr and not (tmp_path / "g").exists()


@pytest.mark.parametrize("args, field", [
    (["--ranking", "results/summary.nc"], "--ranking"),
    (["--reduction", "results/no-such-file.nc"], "--reduction"),
    (["--out-dir", "results/summary.nc"], "--out-dir"),
])
def test_plot_grid_refuses_bad_inputs_before_writing(flow, args, field):
    out = ["--out-dir", "results/never"] if "--out-dir" not in args else []
    done = run_cli("plot-grid", "results/summary.nc", *out, *args, cwd=flow)
    assert done.returncode == 2, done.stderr
    assert done.stderr.startswith(f"sigmagrid: error: {field}: ") and len(done.stderr.strip().splitlines()) == 1
    assert not (flow / "results" / "never").exists()


def test_plot_grid_reads_the_csv_tables_too(flow, tmp_path):
    done = run_cli("plot-grid", "results/summary.nc", "--out-dir", str(tmp_path), "--ranking", "results/ranking.csv",
                   "--reduction", "results/reduction.csv", cwd=flow)
    assert done.returncode == 0, done.stderr
    assert_image(tmp_path / "ranking.png", grid_figures.RANKING_SIZE)
    assert_image(tmp_path / "cuts.png", grid_figures.CUTS_SIZE)


def _text_boxes(fig):
    """Window extents of every visible text of a drawn figure: titles, labels, drawn tick labels,
    legend entries, annotations."""
    import io

    fig.savefig(io.BytesIO(), format="png")  # lays the figure out as it is saved
    renderer = fig._get_renderer()
    boxes = []

    def add(text):
        if text.get_visible() and text.get_text().strip():
            boxes.append((text.get_text(), text.get_window_extent(renderer)))

    for text in fig.texts:
        add(text)
    for legend in fig.legends:
        for text in [*legend.get_texts(), legend.get_title()]:
            add(text)
    for ax in fig.axes:
        if not ax.get_visible():
            continue
        for text in (ax.title, ax.xaxis.label, ax.yaxis.label, ax.xaxis.get_offset_text(), ax.yaxis.get_offset_text(),
                     *ax.texts):
            add(text)
        for axis in (ax.xaxis, ax.yaxis):
            low, high = sorted(axis.get_view_interval())
            for tick in axis._update_ticks():  # the ticks drawn, with their current positions
                if low <= tick.get_loc() <= high:
                    add(tick.label1)
                    add(tick.label2)
    return boxes


def assert_no_overlap(fig, name):
    boxes = _text_boxes(fig)
    clash = [(a, b) for (a, ba), (b, bb) in itertools.combinations(boxes, 2)
             if ba.x0 + 1 < bb.x1 - 1 and bb.x0 + 1 < ba.x1 - 1 and ba.y0 + 1 < bb.y1 - 1 and bb.y0 + 1 < ba.y1 - 1]
    assert not clash, f"{name}: overlapping labels {clash[:3]}"


def test_no_label_runs_into_another(flow, sea_case_file):
    for path in (sea_case_file, sorted((flow / "results" / "cases").glob("*.nc"))[0]):
        ds = figures.open_case_file(path)
        for name, plotter in figures._PLOTTERS.items():
            try:
                fig = plotter(ds)
            except figures.Skipped:
                continue
            assert_no_overlap(fig, name)
    results = flow / "results"
    summary = grid_figures.open_summary(results / "summary.nc")
    for name, q in grid_figures.MAP_QUANTITIES.items():
        assert_no_overlap(grid_figures.plot_map(summary, summary[q.variable].values.astype(float), q.title, q.units,
                                                q.log), name)
    assert_no_overlap(grid_figures.plot_ranking(grid_figures._read_table(results / "ranking.nc", "r")), "ranking")
    assert_no_overlap(grid_figures.plot_cuts(grid_figures._read_table(results / "reduction.nc", "r"),
                                             summary.sizes["reaction"]), "cuts")


def test_overlap_check_sees_an_overlap():
    fig = plotstyle.new_figure(400, 300)
    ax = fig.subplots()
    ax.text(0.5, 0.5, "first label")
    ax.text(0.52, 0.5, "second label")
    with pytest.raises(AssertionError, match="overlapping labels"):
        assert_no_overlap(fig, "made up")


def test_cuts_chart_shows_exact_zeros_on_the_edge_not_as_values():
    import pandas as pd

    table = pd.DataFrame({"criterion": ["local"] * 3, "threshold": [0.0, 0.01, 0.1], "reactions": [29, 20, 9],
                          "species": [10, 9, 7], "failed_cases": [0, 0, 2],
                          "ignition_delay_error_max": [0.0, 0.03, 0.4],
                          "equilibrium_temperature_error_max": [0.0, 0.0, 1.5],
                          "entropy_produced_error_max": [0.0, 1e-4, 0.02]})
    fig = grid_figures.plot_cuts(table, 29)
    for ax in fig.axes:
        bottom = ax.get_ylim()[0]
        open_markers = [line for line in ax.get_lines() if line.get_markerfacecolor() == "white"]
        assert open_markers and all(np.allclose(line.get_ydata(), bottom) for line in open_markers)
        points = [line for line in ax.get_lines() if line.get_marker() not in ("None", "", None)]
        filled = [y for line in points if line.get_markerfacecolor() != "white" for y in line.get_ydata()]
        assert all(y > bottom for y in filled)  # real errors stay above the edge
    labels = [t.get_text() for t in fig.axes[0].texts]
    assert "≥0.1: 7 sp., 2 failed" in labels
    assert_no_overlap(fig, "cuts")
