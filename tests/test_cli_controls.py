"""``edgewise controls``: the answer, the JSON document, and one-line errors.

The reference answers are read off the textbook confounding triangle (Pearl 1995: adjust for
the common cause, never for the mediator's descendant) and statsmodels OLS.
"""

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from discovery.cli import main


@pytest.fixture
def files(tmp_path):
    (tmp_path / "dag.csv").write_text("from,to\nage,dose\nage,recovery\ndose,recovery\n"
                                      "recovery,followup\n", encoding="utf-8")
    rng = np.random.default_rng(1)
    age = rng.normal(size=800)
    dose = 0.8 * age + rng.normal(size=800)
    recovery = 0.5 * dose + 0.7 * age + rng.normal(size=800)
    followup = recovery + rng.normal(size=800)
    pd.DataFrame({"age": age, "dose": dose, "recovery": recovery, "followup": followup}) \
        .to_csv(tmp_path / "data.csv", index=False)
    return tmp_path


def test_controls_answer_and_json(files, capsys):
    out = files / "c.json"
    code = main(["controls", str(files / "dag.csv"), "--treatment", "dose", "--outcome",
                 "recovery", "--check", "followup", "--data", str(files / "data.csv"),
                 "--out", str(out), "--chart", str(files / "range.png")])
    assert code == 0
    text = capsys.readouterr().out
    assert "not valid" in text and "followup" in text and "Cautions" in text
    doc = json.loads(out.read_text(encoding="utf-8"))
    assert doc["format"] == "edgewise-controls" and doc["canonical"] == ["age"]
    assert doc["check"] == {"set": ["followup"], "valid": False, "reason": doc["check"]["reason"]}
    # the estimate for the valid set is statsmodels' OLS coefficient
    data = pd.read_csv(files / "data.csv")
    fit = sm.OLS(data["recovery"], sm.add_constant(data[["dose", "age"]])).fit()
    assert doc["effects"]["chosen"]["estimate"] == pytest.approx(fit.params["dose"])
    assert doc["effects"]["effects"][0]["parents"] == ["age"]
    assert doc["cautions"] and (files / "range.png").stat().st_size > 1000


@pytest.mark.parametrize("args, message", [
    (["--treatment", "nope", "--outcome", "recovery"], "treatment 'nope' is not a variable"),
    (["--treatment", "dose", "--outcome", "dose"], "both 'dose'"),
    (["--treatment", "dose", "--outcome", "recovery", "--check", "age,zz"],
     "names 'zz', not in the diagram"),
    (["--treatment", "dose", "--outcome", "recovery", "--check", "dose"],
     "contains the treatment 'dose'"),
    (["--treatment", "dose", "--outcome", "recovery", "--chart", "x.png"], "--chart needs"),
])
def test_controls_bad_input_is_one_line(files, capsys, args, message):
    code = main(["controls", str(files / "dag.csv"), *args])
    err = capsys.readouterr().err
    assert code == 2 and message in err and len(err.strip().splitlines()) == 1


def test_controls_diagram_with_a_cycle(files, capsys):
    (files / "cycle.csv").write_text("from,to\nx,y\ny,x\n", encoding="utf-8")
    code = main(["controls", str(files / "cycle.csv"), "--treatment", "x", "--outcome", "y"])
    err = capsys.readouterr().err
    assert code == 2 and "cycle" in err and len(err.strip().splitlines()) == 1


def test_controls_invalid_result_file(files, capsys):
    (files / "bad.json").write_text('{"format": "something-else"}', encoding="utf-8")
    code = main(["controls", str(files / "bad.json"), "--treatment", "x", "--outcome", "y"])
    err = capsys.readouterr().err
    assert code == 2 and "format" in err and len(err.strip().splitlines()) == 1


def test_controls_refuses_to_overwrite_its_input(files, capsys):
    import networkx as nx
    from discovery import DSeparationOracle, discover
    result = files / "result.json"
    discover(None, test=DSeparationOracle(nx.DiGraph([("a", "x"), ("b", "x"), ("x", "y")]))) \
        .to_json(result)
    before = result.read_bytes()
    code = main(["controls", str(result), "--treatment", "x", "--outcome", "y", "--out",
                 str(result)])
    assert code == 2 and "overwrite an input" in capsys.readouterr().err
    assert result.read_bytes() == before
