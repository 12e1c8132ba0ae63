"""Patient-level and site-preserved folds (issue 19, item 6)."""

import itertools
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import tilewright as tw
from tilewright.cli.main import main
from tilewright.errors import ConfigError
from tilewright.splits.folds import assign_groups, cost


@st.composite
def cohorts(draw, with_site=False):
    """Random slide tables: patients with 1-3 slides, labels mostly per patient, sites per patient."""
    n_patients = draw(st.integers(2, 24))
    n_sites = draw(st.integers(2, 6)) if with_site else 0
    labels = draw(st.sampled_from([("a", "b"), ("subtype-1", "subtype-2", "subtype-3")]))
    rows = []
    for p in range(n_patients):
        site = f"site-{draw(st.integers(0, n_sites - 1))}" if with_site else None
        label = draw(st.sampled_from(labels))
        for s in range(draw(st.integers(1, 3))):
            other = draw(st.booleans()) and draw(st.booleans()) and draw(st.booleans())
            rows.append({"slide_id": f"{p:03d}-{s}", "patient": f"P{p:02d}", "site": site,
                         "label": draw(st.sampled_from(labels)) if other else label})
    table = pd.DataFrame(rows)
    if not with_site:
        table = table.drop(columns="site")
    return table


FAST = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@FAST
@given(cohorts(), st.integers(2, 5), st.integers(0, 2**31))
def test_patient_folds_keep_each_patient_in_one_fold(table, folds, seed):
    folds = min(folds, table["patient"].nunique())
    splits = tw.make_splits(table, patient="patient", label="label", folds=folds, seed=seed)
    out = splits.table
    # every slide once, in the input's order; folds 0..K-1, none empty
    assert out["slide_id"].tolist() == table["slide_id"].tolist()
    assert set(out["fold"]) == set(range(folds))
    # the patient rule: a patient's slides never in two folds
    assert (out.groupby("patient")["fold"].nunique() == 1).all()
    # balance reached is what the table says
    shares = pd.crosstab(out["fold"], out["label"], normalize="index")
    overall = out["label"].value_counts(normalize=True)
    assert splits.max_deviation == pytest.approx(100 * (shares - overall).abs().to_numpy().max())
    # reproducible: same seed, same folds, whatever the order of the rows
    shuffled = table.sample(frac=1.0, random_state=seed % 1000)
    again = tw.make_splits(shuffled, patient="patient", label="label", folds=folds, seed=seed).table
    assert again.set_index("slide_id")["fold"].sort_index().equals(out.set_index("slide_id")["fold"].sort_index())


@FAST
@given(cohorts(with_site=True), st.integers(2, 4), st.integers(0, 2**31))
def test_site_folds_keep_each_site_in_one_fold(table, folds, seed):
    folds = min(folds, table["site"].nunique())
    if table["site"].nunique() < 2:
        return
    splits = tw.make_splits(table, patient="patient", label="label", site="site", folds=folds, seed=seed)
    out = splits.table
    assert splits.by_site and set(out["fold"]) == set(range(folds))
    # Howard et al. (2021): each site's slides lie in one fold's test set, so a site is never
    # both trained and tested on; patients (one site each) follow
    assert (out.groupby("site")["fold"].nunique() == 1).all()
    assert (out.groupby("patient")["fold"].nunique() == 1).all()
    again = tw.make_splits(table.iloc[::-1], patient="patient", label="label", site="site", folds=folds, seed=seed)
    assert again.table.set_index("slide_id")["fold"].sort_index().equals(out.set_index("slide_id")["fold"].sort_index())


def brute_force_best(counts, folds):
    """Least cost over every assignment of the groups to folds with none empty (enumerated here)."""
    return min(cost(counts, np.array(a), folds) for a in itertools.product(range(folds), repeat=len(counts))
               if len(set(a)) == folds)


@pytest.mark.parametrize("seed", range(6))
def test_site_assignment_is_the_best_possible_balance(seed):
    rng = np.random.default_rng(seed)
    counts = rng.integers(0, 15, (int(rng.integers(3, 8)), int(rng.integers(2, 4))))
    folds = int(rng.integers(2, 4))
    # ground truth: brute force over all folds ** sites assignments of the documented cost
    # (sum over folds and labels of (count - total / folds) ** 2)
    assert cost(counts, assign_groups(counts, folds, seed=seed, exhaustive=True), folds) == pytest.approx(
        brute_force_best(counts, folds))


@pytest.mark.parametrize("seed", range(4))
def test_patient_assignment_admits_no_improving_move_or_swap(seed):
    rng = np.random.default_rng(seed)
    counts = rng.integers(0, 3, (40, 3)).astype(float)
    folds = 4
    a = assign_groups(counts, folds, seed=seed)
    best = cost(counts, a, folds)
    # ground truth checked by trying every single move and every swap here
    for g in range(len(a)):
        for f in range(folds):
            moved = a.copy()
            moved[g] = f
            if len(set(moved)) == folds:
                assert cost(counts, moved, folds) >= best - 1e-9
        for h in range(g + 1, len(a)):
            swapped = a.copy()
            swapped[[g, h]] = a[[h, g]]
            assert cost(counts, swapped, folds) >= best - 1e-9


def test_patient_balance_at_least_as_good_as_scikit_learn_on_average():
    from sklearn.model_selection import StratifiedGroupKFold

    rng = np.random.default_rng(7)
    ours, theirs = [], []
    for trial in range(25):
        rows = []
        for p in range(int(rng.integers(10, 40))):
            label = rng.choice(["a", "b", "c"], p=[0.5, 0.3, 0.2])
            rows += [{"slide_id": f"s{p}-{s}", "patient": f"p{p}", "label": label} for s in range(rng.integers(1, 4))]
        table = pd.DataFrame(rows)
        folds = 3
        patients, labels = sorted(table["patient"].unique()), sorted(table["label"].unique())
        counts = pd.crosstab(table["patient"], table["label"]).reindex(index=patients, columns=labels).to_numpy()
        mine = tw.make_splits(table, patient="patient", label="label", folds=folds, seed=trial).table
        ours.append(cost(counts, mine.groupby("patient")["fold"].first().reindex(patients).to_numpy(), folds))
        fold = np.empty(len(table), int)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            splitter = StratifiedGroupKFold(folds, shuffle=True, random_state=trial)
            for i, (_, test) in enumerate(splitter.split(table, table["label"], table["patient"])):
                fold[test] = i
        theirs.append(cost(counts, pd.Series(fold, index=table["patient"]).groupby(level=0).first()
                           .reindex(patients).to_numpy(), folds))
    # reference: scikit-learn's StratifiedGroupKFold on the same cohorts, scored by the same cost
    assert np.mean(ours) <= np.mean(theirs)


def test_ids_are_read_as_text(tmp_path):
    meta = tmp_path / "meta.csv"
    meta.write_text("slide_id,patient,label\n007,01,1\n008,1,0\n009,001,1\n010,01,0\n")
    splits = tw.make_splits(meta, patient="patient", label="label", folds=2)
    # "01", "1" and "001" are three patients; "007" keeps its zeros
    assert splits.table["slide_id"].tolist() == ["007", "008", "009", "010"]
    assert splits.table.groupby("patient")["fold"].nunique().max() == 1
    assert set(splits.table["patient"]) == {"01", "1", "001"}
    assert splits.table.loc[0, "fold"] == splits.table.loc[3, "fold"]


BAD = [
    ("slide_id,patient,label\na,p1,x\nb,p2,y\n", {"label": "subtype"}, "no column 'subtype'"),
    ("slide_id,patient,label\na,p1,x\nb,,y\nc,p3,x\n", {}, "1 rows have no patient"),
    ("slide_id,patient,label\na,p1,x\na,p2,y\n", {}, "slide ids repeat"),
    ("slide_id,patient,label,site\na,p1,x,s1\nb,p1,y,s2\nc,p2,x,s2\n", {"site": "site"}, "two or more sites"),
    ("slide_id,patient,label\na,p1,x\nb,p1,y\nc,p2,x\n", {"folds": 3}, "2 patients cannot fill 3 folds"),
    ("slide_id,patient,label,site\na,p1,x,s1\nb,p2,y,s1\nc,p3,x,s2\n", {"site": "site", "folds": 3},
     "2 sites cannot fill 3"),
    ("slide_id,patient,label\na,p1,x\nb,p2,y\n", {"folds": 1}, "at least 2"),
]


@pytest.mark.parametrize("text, options, reason", BAD)
def test_bad_input_is_refused_with_the_reason(tmp_path, capsys, text, options, reason):
    meta = tmp_path / "meta.csv"
    meta.write_text(text)
    kwargs = {"patient": "patient", "label": "label", "folds": 2, **options}
    with pytest.raises(ConfigError, match=reason):
        tw.make_splits(meta, **kwargs)
    argv = ["split", str(meta), "--patient", kwargs["patient"], "--label", kwargs["label"], "--folds",
            str(kwargs["folds"]), "--out", str(tmp_path / "splits.csv")]
    if "site" in kwargs:
        argv += ["--site", kwargs["site"]]
    assert main(argv) == 2
    assert reason in capsys.readouterr().err
    assert not (tmp_path / "splits.csv").exists()


def test_cli_writes_splits_and_prints_the_balance(tmp_path, capsys):
    rows = [{"slide_id": f"{site.split('-')[1]}{i}", "patient_id": f"{site}-p{i // 2}", "site": site,
             "label": ("subtype-1", "subtype-2")[i % 2]}
            for site in ("site-north", "site-south", "site-east") for i in range(4)]
    meta = tmp_path / "meta.csv"
    pd.DataFrame(rows).to_csv(meta, index=False)
    out = tmp_path / "folds" / "splits.csv"
    code = main(["split", str(meta), "--patient", "patient_id", "--label", "label", "--site", "site", "--folds", "3",
                 "--seed", "4", "--out", str(out)])
    assert code == 0
    printed = capsys.readouterr().out
    written = pd.read_csv(out, dtype=str)
    assert list(written.columns) == ["slide_id", "patient", "site", "label", "fold"]
    assert written.groupby("site")["fold"].nunique().eq(1).all() and written["fold"].nunique() == 3
    # ground truth constructed: every site has two slides of each label, so perfect balance exists
    assert "site-preserved folds" in printed and "at most 0.0 percentage points" in printed
    assert "site-east" in printed and f"wrote {out}" in printed
