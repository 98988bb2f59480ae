"""The invented demo: the simulator's files, its truth, and the committed example copy."""

from __future__ import annotations

import json
from pathlib import Path

from uqreport.demo import simulate_study, write_demo
from uqreport.experiment import load_experiment

EXAMPLE = Path(__file__).resolve().parent.parent / "example_data"


def test_example_data_is_the_seed_7_demo(tmp_path):
    """example_data/ holds exactly what the simulator writes with seed 7."""
    write_demo(tmp_path, seed=7)
    for p in sorted(tmp_path.iterdir()):
        assert (EXAMPLE / p.name).read_bytes() == p.read_bytes(), p.name


def test_demo_is_labelled_invented_and_loads(tmp_path):
    study = write_demo(tmp_path, seed=3)
    assert "INVENTED DEMO STUDY" in study.experiment
    exp = load_experiment(tmp_path)
    assert exp.study.invented
    for name, text in study.tables.items():
        assert text.startswith("# invented demo data"), name
    truth = json.loads((tmp_path / "truth.json").read_text())
    assert truth["invented"] is True


def test_simulator_is_seeded():
    a, b, c = simulate_study(rng=5), simulate_study(rng=5), simulate_study(rng=6)
    assert a.tables == b.tables and a.truth == b.truth
    assert a.tables != c.tables


def test_truth_follows_the_model():
    """k' = k(T_actual) [OH] and k(T_ref) from the Arrhenius factor: the truth the simulator
    records is consistent with its own parameters (k at the stated temperature 0.180)."""
    t = simulate_study(rng=11).truth
    assert t["second_order_rate_constant"] == 0.18
    for run in ("r1", "r2", "r3"):
        ratio = t[f"pseudo_rate_constant/{run}"] / t[f"hydroxide_concentration/{run}"]
        assert abs(ratio / 0.18 - 1) < 0.1  # the bath's actual temperature is within ~1 K
    assert t["second_order_rate_constant_at_reference"] > t["second_order_rate_constant"]
