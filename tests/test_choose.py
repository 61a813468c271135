"""``choose``: budget parsing, the time model, the rung plan, the pool, successive halving end to end."""

from __future__ import annotations

import contextlib
import itertools
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from harness.choose import choose, fit_time_model, parse_budget, plan_rungs
from harness.choose.budget import FALLBACK_EXPONENT
from harness.choose.halving import CARE_WEIGHTS, FINALISTS, SMALLEST_RUNG, care_weights, kept_count
from harness.choose.pool import GRAPH_RUNG, default_pool, too_sparse_at
from harness.cli import main
from harness.errors import InputError
from harness.run import RunFolder
from harness.suite import load_suite

#: Four cheap candidates on a 240-point rolled sheet: one halving (rung 0 on 80 points), then all seeds.
SMALL_POOL = """\
name: pick
seeds: 2
datasets:
  - use: rolled_sheet
    name: roll
    params: {{n: 240, noise: 0.05}}
methods:
  - use: pca
  - use: random_projection
  - use: kernel_pca
    grid: {{kernel: [rbf], gamma: [0.1, 1.0]}}
{extra}"""


@pytest.mark.parametrize(
    ("text", "seconds"), [("90s", 90), ("10m", 600), ("1.5h", 5400), ("45", 45), (" 2M ", 120)]
)
def test_budget_forms(text, seconds):
    # the forms the issue lists (90s, 10m, 1.5h); a bare number is seconds (common practice, no source)
    assert parse_budget(text) == seconds


@pytest.mark.parametrize("text", ["10x", "", "m", "-5m", "0s", "1h30m", "ten minutes"])
def test_bad_budget_is_one_input_error(text):
    with pytest.raises(InputError, match="--budget"):
        parse_budget(text)


def test_time_model_recovers_a_power_law():
    # a power law is a straight line in log-log coordinates, so least squares on the logs is exact
    sizes = [100, 300, 900]
    model = fit_time_model(sizes, [2e-6 * n**2 for n in sizes])
    assert model.b == pytest.approx(2.0)
    assert model.predict(2700) == pytest.approx(2e-6 * 2700**2)


def test_time_model_with_one_size_uses_the_fallback_exponent():
    model = fit_time_model([100, 100], [1.0, 1.0])
    assert (model.points, model.b) == (1, FALLBACK_EXPONENT)
    assert model.predict(300) == pytest.approx(3**FALLBACK_EXPONENT)


def test_rung_plan_multiplies_the_rows_by_eta_until_all_data_with_every_seed():
    # successive halving: each rung has eta times the resource of the one before
    # (Jamieson and Talwalkar 2016, Li et al. 2018)
    rungs = plan_rungs(1800, 22, (0, 1, 2), eta=3)
    assert [r.size for r in rungs] == [200, 600, 1800]
    assert [len(r.seeds) for r in rungs] == [1, 1, 3]
    assert all(b.size == 3 * a.size for a, b in itertools.pairwise(rungs))


def test_small_data_halves_over_seeds_once_rows_cannot_shrink():
    rungs = plan_rungs(150, 22, (0, 1, 2), eta=3)
    assert rungs[0].size >= SMALLEST_RUNG
    assert [(r.size, len(r.seeds)) for r in rungs] == [(50, 1), (150, 1), (150, 3)]


@pytest.mark.parametrize(("count", "kept"), [(22, 8), (9, 3), (7, 3), (3, 2), (2, 2)])
def test_a_rung_keeps_the_best_third_and_at_least_two(count, kept):
    # keep the top ceil(count / eta) (Jamieson and Talwalkar 2016); two at least, so there is a runner-up
    assert kept_count(count, 3, last=False) == kept
    assert FINALISTS >= 2


@pytest.mark.parametrize(("count", "kept"), [(14, 3), (9, 3), (5, 2), (2, 2)])
def test_the_rung_before_the_last_keeps_at_most_the_finalists(count, kept):
    # our own rule (docs/choose.md): carried candidates cannot swell the costliest rung
    assert kept_count(count, 3, last=False, before_last=True) == kept


def test_quadratic_methods_are_left_out_above_the_size_guard_with_the_reason():
    pool = default_pool(50_000, 50_000, 10, quadratic_limit=20_000)
    names = {c.use for c in pool.candidates}
    left = dict(pool.left_out)
    for quadratic in ("mds", "sammon", "isomap", "kernel_pca", "classical_mds"):
        assert quadratic not in names
        assert "quadratic limit 20000" in left[quadratic]
    assert {"pca", "tsne", "laplacian_eigenmaps"} <= names


def test_a_latent_chart_replaces_the_distance_measures_of_the_global_group():
    # our own rule (docs/choose.md): the group keeps its weight, the local group is untouched
    assert care_weights("global", charted=False) == CARE_WEIGHTS["global"]
    assert care_weights("global", charted=True) == {"latent_spearman": 2.0}
    balanced = care_weights("balanced", charted=True)
    assert balanced == {"trustworthiness": 1.0, "continuity": 1.0, "latent_spearman": 2.0}
    assert care_weights("local", charted=True) == CARE_WEIGHTS["local"]
    assert care_weights("labels", charted=True) == CARE_WEIGHTS["labels"]


def test_neighbour_graph_candidates_are_carried_below_the_graph_rung():
    assert too_sparse_at({"n_neighbors": 5}, GRAPH_RUNG - 1)
    assert not too_sparse_at({"n_neighbors": 5}, GRAPH_RUNG)
    assert not too_sparse_at({"perplexity": 30.0}, 50)
    assert not too_sparse_at({}, 50)


def test_graph_candidates_on_small_data_are_judged_at_full_size(tmp_path, write_suite):
    # 120 rows, below the graph rung: the rungs are at full size (halving over seeds), where
    # isomap must be judged, not carried
    suite = write_suite(
        """\
        name: tiny
        seeds: 3
        datasets:
          - use: gaussian_clusters
            params: {n: 120, n_features: 4, n_clusters: 3}
        methods:
          - use: pca
          - use: random_projection
          - use: isomap
            grid: {n_neighbors: [5, 8]}
          - use: classical_mds
        """
    )
    rec = choose(suite, budget="5m", out=tmp_path / "c")
    assert all(not r.carried for r in rec.rungs)
    judged = {row["name"] for r in rec.rungs for row in r.ranking}
    assert {"isomap-n_neighbors5", "isomap-n_neighbors8"} <= judged


def test_grid_values_the_data_cannot_take_are_left_out():
    # perplexity must stay below n / 3 (the suite loader's own limit)
    pool = default_pool(120, 120, 4, quadratic_limit=20_000)
    perplexities = sorted(c.params["perplexity"] for c in pool.candidates if c.use == "tsne")
    assert perplexities == [5.0, 15.0, 30.0]
    assert "needs more than 150 points" in dict(pool.left_out)["tsne-perplexity50"]


def _rung_folders(out: Path) -> list[Path]:
    return sorted(p.parent for p in (out / "rungs").glob("*/*/manifest.json"))


def test_choose_halves_a_suite_pool_and_writes_a_loadable_chosen_suite(tmp_path, write_suite):
    suite = write_suite(SMALL_POOL.format(extra=""))
    out = tmp_path / "pick"
    rec = choose(suite, budget="5m", care="global", out=out)
    first, last = rec.rungs[0], rec.rungs[-1]
    assert len(first.ranking) == 4 and len(first.kept) == 2  # ceil(4 / 3) = 2 kept
    assert last.seeds == 2 and last.size == 240
    assert rec.complete and rec.winner == rec.final[0]["name"]
    assert {name for name, _ in first.dropped} == {r["name"] for r in first.ranking} - set(first.kept)
    # the dropped were ranked below every survivor
    places = {r["name"]: r["place"] for r in first.ranking}
    assert max(places[n] for n in first.kept) < min(places[n] for n, _ in first.dropped)
    chosen = load_suite(out / "chosen.yaml")
    assert [m.name for m in chosen.methods] == [r["name"] for r in rec.final]
    assert chosen.seeds == (0, 1) and chosen.datasets[0].params["n"] == 240
    assert "Winner:" in (out / "recommendation.md").read_text(encoding="utf-8")
    assert rec.separations  # two seeds at full size: the Welch test was made


def test_a_second_choose_reads_finished_rungs_back(tmp_path, write_suite):
    suite = write_suite(SMALL_POOL.format(extra=""))
    out = tmp_path / "pick"
    first = choose(suite, budget="5m", out=out)
    folders = _rung_folders(out)
    again = choose(suite, budget="5m", out=out)
    assert _rung_folders(out) == folders  # nothing run again
    assert again.winner == first.winner
    assert [r.kept for r in again.rungs] == [r.kept for r in first.rungs]


def test_a_tampered_state_is_not_trusted(tmp_path, write_suite):
    suite = write_suite(SMALL_POOL.format(extra=""))
    out = tmp_path / "pick"
    first = choose(suite, budget="5m", out=out)
    state = out / "choose-state.json"
    doc = json.loads(state.read_text(encoding="utf-8"))
    doc["rungs"][0]["kept"] = ["random_projection", "pca"]
    state.write_text(json.dumps(doc), encoding="utf-8")
    again = choose(suite, budget="5m", out=out)
    assert again.rungs[0].kept == first.rungs[0].kept  # recomputed (from the cache), not read


def test_a_candidate_predicted_to_overrun_is_dropped_for_budget(tmp_path, write_suite):
    # the plug-in sleeps (n/100)^2 s: about 2 s a cell on 150 rows, 20 s a cell on 450, so with a
    # 15 s budget its predicted full-size rung cannot fit; its embedding (the data's own two columns)
    # ties with PCA's, so it is among the survivors of the first rung
    suite = write_suite(
        """\
        name: dear
        seeds: 3
        datasets:
          - use: gaussian_clusters
            name: blobs
            params: {n: 450, n_features: 2, n_clusters: 3}
        methods:
          - use: pca
          - use: "runner_plugins:SlowsWithSize"
            name: slow
          - use: random_projection
          - use: classical_mds
        """
    )
    rec = choose(suite, budget="15s", care="global", out=tmp_path / "dear", jobs=2)
    assert "slow" in rec.rungs[0].kept
    dropped = dict(rec.budget_dropped)
    assert "slow" in dropped and "predicted" in dropped["slow"] and "remaining" in dropped["slow"]
    assert rec.winner != "slow"
    assert "dropped for budget slow" in (tmp_path / "dear" / "recommendation.md").read_text(encoding="utf-8")


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["iris", "--budget", "10x"], "--budget: expected a duration"),
        (["iris", "--budget", "0.01s"], "--budget: expected at least"),
        (["iris", "--care", "shape"], "--care: expected one of local, global, balanced, labels"),
        (["rolled_sheet", "--care", "labels"], "--care: labels needs class labels"),
        (["no_such_thing"], "expected a table file"),
    ],
)
def test_bad_input_is_one_line_and_exit_2(argv, message, tmp_path, capsys):
    assert main(["choose", *argv, "--out", str(tmp_path / "c")]) == 2
    err = capsys.readouterr().err.strip()
    assert message in err and len(err.splitlines()) == 1


def test_missing_label_column_is_one_line_and_exit_2(tmp_path, capsys):
    table = tmp_path / "t.csv"
    rng = np.random.default_rng(0)
    table.write_text(
        "a,b,c\n" + "\n".join(",".join(f"{v:.4f}" for v in row) for row in rng.normal(size=(30, 3)))
    )
    assert main(["choose", str(table), "--label", "site", "--out", str(tmp_path / "c")]) == 2
    err = capsys.readouterr().err.strip()
    assert "column 'site'" in err and len(err.splitlines()) == 1


def test_an_empty_pool_is_refused_with_the_reasons(tmp_path, write_suite, capsys):
    suite = write_suite(
        """\
        name: big
        datasets:
          - use: rolled_sheet
            params: {n: 300}
        methods:
          - use: mds
          - use: sammon
        run: {quadratic_limit: 100}
        """
    )
    assert main(["choose", str(suite), "--out", str(tmp_path / "c")]) == 2
    err = capsys.readouterr().err.strip()
    assert "candidate pool: empty" in err and "mds: memory grows as n²" in err and "sammon" in err


def test_the_command_prints_the_recommendation(tmp_path, write_suite, capsys):
    suite = write_suite(SMALL_POOL.format(extra=""))
    assert main(["choose", str(suite), "--budget", "5m", "--out", str(tmp_path / "c")]) == 0
    out = capsys.readouterr().out
    assert "# Recommendation" in out and "## Rungs" in out and "Winner:" in out.splitlines()[-1]


# ---------------------------------------------------------------- constructed answers (slow)


@pytest.mark.slow
def test_well_separated_clusters_with_care_labels_pick_an_accurate_map(tmp_path):
    # ten-unit separation against unit spread: the clusters are apart by construction, so a good
    # map's k-NN accuracy is near 1 (well-separated Gaussian clusters, known by construction)
    rec = choose("gaussian_clusters", budget="10m", care="labels", out=tmp_path / "c")
    assert rec.complete
    final = RunFolder.open(rec.rungs[-1].run_dir).scores
    mine = final[(final["method"] == rec.winner) & (final["status"] == "ok")]
    assert mine["knn_accuracy@10"].mean() >= 0.95


@pytest.mark.slow
def test_a_tight_budget_on_a_larger_table_names_every_candidate_it_dropped(tmp_path):
    # 6,000 invented rows (a rolled band with five noisy columns and a label) in 60 s: the
    # n-squared methods cannot fit their full-size rung (quiet 2 cores: the first two rungs take
    # about 30 s, MDS and Sammon are predicted at over a minute on all rows), and a busier machine
    # only drops more. The 20,000-row, 3-minute case of the
    # same table is timed in bench/bench_choose.py --big (tests assert behaviour, not clocks).
    rng = np.random.default_rng(0)
    n = 6_000
    t = rng.uniform(0, 3 * np.pi, n)
    h = rng.uniform(0, 10, n)
    X = np.c_[t * np.cos(t), h, t * np.sin(t), rng.normal(size=(n, 5)) * 0.3]
    table = tmp_path / "band.csv"
    lines = ["a,b,c,d,e,f,g,h,grp"] + [
        ",".join(f"{v:.5f}" for v in row) + f",{int(g)}" for row, g in zip(X, t // np.pi)
    ]
    table.write_text("\n".join(lines), encoding="utf-8")
    rec = choose(table, label="grp", budget="60s", out=tmp_path / "c")
    assert rec.winner is not None
    assert rec.budget_dropped, "a 60 s budget on 6,000 rows should drop someone for budget"
    # the plan covers every candidate: each one ran to the end, was outranked, or was dropped for budget
    outranked = {n for r in rec.rungs for n, _ in r.dropped}
    accounted = outranked | {n for n, _ in rec.budget_dropped} | {r["name"] for r in rec.final}
    assert accounted == set(rec.candidates)
    text = (tmp_path / "c" / "recommendation.md").read_text(encoding="utf-8")
    for name, why in rec.budget_dropped:
        assert f"dropped for budget {name}" in text and "remaining" in why


@pytest.mark.slow
def test_rolled_sheet_with_care_global_recovers_the_latent_chart(tmp_path):
    # the sheet's unrolled length and height are known by construction (rolled sheet's latent);
    # with a latent chart in the data, --care global judges the layout against it, so the winner
    # must unroll the sheet (Isomap-like): Spearman with the chart >= 0.95
    rec = choose("rolled_sheet", budget="10m", care="global", out=tmp_path / "c")
    assert rec.complete
    assert rec.weights == {"latent_spearman": 2.0}
    final = RunFolder.open(rec.rungs[-1].run_dir).scores
    mine = final[(final["method"] == rec.winner) & (final["status"] == "ok")]
    assert mine["latent_spearman"].mean() >= 0.95
    assert "judged against it" in (tmp_path / "c" / "recommendation.md").read_text(encoding="utf-8")


@pytest.mark.slow
def test_an_interrupted_choose_continues_where_it_stopped(tmp_path, write_suite):
    # the plug-in sleeps about 2 s a cell on all 450 rows, so the last rung is still running when
    # Ctrl-C arrives after its first stored cell (common practice, no source)
    suite = write_suite(
        """\
        name: halt
        seeds: 3
        datasets:
          - use: gaussian_clusters
            name: blobs
            params: {n: 450, n_features: 2, n_clusters: 3}
        methods:
          - use: pca
          - use: "runner_plugins:SlowsWithSize"
            name: slow
            params: {scale: 300}
          - use: random_projection
          - use: isomap
            params: {n_neighbors: 5}
        """
    )
    out = tmp_path / "halt"
    tests = str(Path(__file__).resolve().parent)
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([tests, os.environ.get("PYTHONPATH", "")]))
    cmd = [sys.executable, "-m", "harness", "choose", str(suite), "--out", str(out), "--jobs", "1"]
    proc = subprocess.Popen(
        cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, start_new_session=True
    )
    try:
        deadline = time.monotonic() + 240
        while not list(out.glob("rungs/halt-rung1/*/cells/*.json")) and time.monotonic() < deadline:
            time.sleep(0.05)
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=240)
    finally:
        with contextlib.suppress(OSError):
            os.killpg(proc.pid, signal.SIGKILL)
    assert proc.returncode == 130, err
    (folder,) = list(out.glob("rungs/halt-rung1/*"))
    again = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=240)
    assert again.returncode == 0, again.stderr
    assert "rung 0: read back" in again.stderr
    assert list(out.glob("rungs/halt-rung1/*")) == [folder]  # the same folder, continued
    assert len(json.loads((folder / "manifest.json").read_text())["resumed"]) == 1


def test_when_the_budget_runs_out_the_answer_is_the_best_so_far_and_says_so(tmp_path, write_suite):
    # every candidate sleeps (n/100)^2 s: about 2 s a cell on the 150-row first rung, 20 s a cell on
    # all 450 rows, so nothing fits the rest of a 15 s budget after the first rung
    methods = "".join(
        f'  - {{use: "runner_plugins:SlowsWithSize", name: slow{i}, params: {{scale: {100 + i}}}}}\n'
        for i in range(4)
    )
    suite = write_suite(
        "name: dear\nseeds: 3\ndatasets:\n  - use: gaussian_clusters\n    name: blobs\n"
        "    params: {n: 450, n_features: 2, n_clusters: 3}\nmethods:\n" + methods
    )
    rec = choose(suite, budget="15s", care="global", out=tmp_path / "dear", jobs=2)
    assert not rec.complete and len(rec.rungs) == 1
    assert rec.winner == rec.rungs[0].ranking[0]["name"]
    assert set(dict(rec.budget_dropped)) == set(rec.rungs[0].kept)
    text = (tmp_path / "dear" / "recommendation.md").read_text(encoding="utf-8")
    assert "The budget ran out before the last rung" in text


def test_the_rung_before_the_last_has_enough_rows_for_neighbour_graphs():
    # plumbing of our own rule (GRAPH_RUNG): 600 rows would halve at 67 and 200 rows; with graph
    # candidates the rung before the last is raised to 300 rows (one seed), the first is kept
    plain = plan_rungs(600, 22, (0, 1, 2))
    raised = plan_rungs(600, 22, (0, 1, 2), before_last_rows=GRAPH_RUNG)
    assert [(r.size, len(r.seeds)) for r in plain] == [(67, 1), (200, 1), (600, 3)]
    assert [(r.size, len(r.seeds)) for r in raised] == [(67, 1), (GRAPH_RUNG, 1), (600, 3)]
    # data smaller than the rule: that rung is on all rows with one seed
    small = plan_rungs(250, 22, (0, 1, 2), before_last_rows=GRAPH_RUNG)
    assert [(r.size, len(r.seeds)) for r in small] == [(83, 1), (250, 1), (250, 3)]
    # already large enough: unchanged
    assert plan_rungs(1000, 22, (0, 1, 2), before_last_rows=GRAPH_RUNG) == plan_rungs(1000, 22, (0, 1, 2))


def test_equal_mean_ranks_go_to_the_better_place_at_the_rung_before():
    # plumbing of our own tie rule: three finalists ranked on four measures tie often; the rung
    # before compared them with more candidates, so its order decides, then the cheaper fit
    from harness.choose.halving import standings

    ranked = pd.DataFrame(
        {
            "method": ["cheap", "mid", "dear"],
            "mean_rank": [2.0, 2.0, 2.0],
            "fit_seconds": [0.1, 1.0, 5.0],
            "seeds_failed": [0, 0, 0],
        }
    )
    plain = standings(ranked, {}, ["cheap", "mid", "dear"])
    assert [s.name for s in plain] == ["cheap", "mid", "dear"]  # no history: the cheaper fit
    told = standings(ranked, {}, ["cheap", "mid", "dear"], {"dear": 1, "cheap": 2, "mid": 3})
    assert [s.name for s in told] == ["dear", "cheap", "mid"] and [s.place for s in told] == [1, 2, 3]


def test_seed_free_finalists_differ_exactly_not_beyond_noise():
    # plumbing of our own wording rule: with one value per seed on both sides there is no seed
    # noise, so the recommendation says the differences are exact instead of quoting Welch p
    from harness.choose.pool import Candidate
    from harness.choose.recommend import Recommendation, Separation, recommendation_text

    final = [
        {"name": n, "place": i, "mean_rank": 2.0, "measures": {}, "low": {}, "high": {}}
        for i, n in enumerate(("a", "b"), 1)
    ]

    def text(exact: bool) -> str:
        seps = [Separation("t", 0.9, 0.8, 0.0, 1.0, exact), Separation("c", 0.7, 0.8, 1.0, 0.0, exact)]
        pool = {n: Candidate(n, "pca") for n in ("a", "b")}
        rec = Recommendation("a", pool, final, True, seps, [], {"t": 1.0}, "local", 60.0, 1.0, [])
        return recommendation_text(rec)

    assert "each is better exactly (both are seed-free) on some measure" in text(True)
    assert "the difference is exact" in text(True) and "Welch p" not in text(True)
    assert "each is better beyond seed noise on some measure" in text(False) and "Welch p" in text(False)
