"""The invented demo study and its simulator.

Everything here is invented: a fictional bench group ("Group Lambda") runs the alkaline
fading of a violet dye in a batch reactor at three excess-hydroxide levels, calibrates two
peristaltic pumps, runs one stirred tank and two tanks in series, and washes a tracer out of
one tank.  The simulator draws the true values of every systematic input (stock
concentration, glassware scale errors, blank offset, bath temperature, timing lag, ...)
from the same distributions the experiment file states, generates the raw readings through
the same measurement model with random noise, and records the truth, so that the analysis
can be checked against it (coverage of intervals, bias).

:func:`write_demo` writes ``experiment.toml``, the CSV tables and ``truth.json`` into a
folder.  The truth uses the names of ``results.json``.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from ._numeric import RandomLike, as_generator
from .io import atomic_write_text
from .models.batch import arrhenius_factor

__all__ = ["DemoScenario", "SimulatedStudy", "simulate_study", "write_demo"]

KELVIN = 273.15


@dataclass(frozen=True)
class BatchRunPlan:
    """One batch run of the demo: volumes mixed (mL), readings (count, spacing in s)."""

    name: str
    stock_volume: float
    dye_volume: float
    water_volume: float
    readings: int = 25
    spacing: float = 30.0


@dataclass(frozen=True)
class DemoScenario:
    """The invented scenario's true parameters and its stated uncertainties.

    The stated values (what the experiment file says) are the nominal ones below; the true
    values of systematic inputs are drawn around them by :func:`simulate_study`.
    """

    k_stated: float = 0.180  # L/(mol s) at the stated temperature (the demo's truth)
    order: float = 1.0
    activation_energy: float = 60.57e3  # J/mol (plausibility value for this dye)
    u_activation_energy: float = 2.0e3
    temperature_c: float = 22.0  # stated bath temperature, degC
    u_temperature: float = 0.5  # K, normal
    reference_temperature_c: float = 25.0
    stock_oh: float = 0.100  # mol/L
    u_stock_oh: float = 0.0005
    dye_stock: float = 4.6e-5  # mol/L
    u_dye_stock: float = 0.1e-5
    molar_absorptivity: float = 8.7e4  # L/(mol cm)
    u_molar_absorptivity: float = 0.3e4
    baseline: float = 0.010  # A_inf, residual colour
    noise_sd: float = 0.002  # A
    blank_u: float = 0.002  # A
    photometric_half_width: float = 0.005  # A, rectangular
    pathlength: float = 1.000  # cm
    pathlength_half_width: float = 0.003  # cm (rectangular)
    lag_mean: float = 8.0  # s, draw to reading
    u_lag: float = 3.0
    u_jitter: float = 2.0
    cyl50_half_width: float = 0.25  # mL, class A 50 mL cylinder (ASTM E1272)
    cyl10_half_width: float = 0.10  # mL, class A 10 mL cylinder
    cyl100_half_width: float = 0.50  # mL, class A 100 mL cylinder
    reading_u: float = 0.05  # mL, reading one fill of a small cylinder
    runs: tuple[BatchRunPlan, ...] = (
        BatchRunPlan("r1", 10.0, 10.0, 30.0, readings=30),
        BatchRunPlan("r2", 20.0, 10.0, 20.0, readings=25),
        BatchRunPlan("r3", 30.0, 10.0, 10.0, readings=20, spacing=20.0),
    )
    # pumps: Q = q0 + q1 * setting (mL/min), repeatability (relative sd) per collection
    pumps: dict[str, tuple[float, float]] = field(
        default_factory=lambda: {"p_dye": (-1.6, 0.66), "p_oh": (-1.2, 0.63)}
    )
    pump_repeatability: float = 0.012
    pump_settings: tuple[float, ...] = (20.0, 35.0, 50.0, 65.0, 80.0)
    collect_seconds: float = 60.0
    stopwatch_u: float = 0.10  # s per timed interval
    operator_bias_u: float = 0.05  # s
    vessel_volume: float = 500.0  # mL working volume
    u_vessel_volume: float = 5.0  # mL
    tank_setting: float = 50.0
    dye_feed: float = 1.8e-5  # mol/L
    oh_feed: float = 0.080  # mol/L
    active_fraction: float = 0.92  # tracer run (non-ideal tank)
    bypass_fraction: float = 0.03


@dataclass(frozen=True)
class SimulatedStudy:
    """A simulated study: the experiment file, its tables and the truth."""

    experiment: str
    tables: dict[str, str]
    truth: dict[str, float]
    seed: int | None


def _csv(header: list[str], rows: list[list[object]], comment: str = "") -> str:
    lines = []
    if comment:
        lines.extend(f"# {c}" for c in comment.splitlines())
    lines.append(",".join(header))
    for r in rows:
        lines.append(",".join(_fmt(v) for v in r))
    return "\n".join(lines) + "\n"


def _fmt(v: object) -> str:
    if isinstance(v, float):
        return f"{v:.6g}"
    return str(v)


def _rect(rng: np.random.Generator, half_width: float) -> float:
    return float(rng.uniform(-half_width, half_width))


def simulate_study(scenario: DemoScenario | None = None, *, rng: RandomLike = 7) -> SimulatedStudy:
    """Simulate the demo study with true values drawn from the stated uncertainties."""
    sc = scenario or DemoScenario()
    seed = rng if isinstance(rng, int) else None
    gen = as_generator(rng)
    T_s = sc.temperature_c + KELVIN
    T_true = T_s + gen.normal(0.0, sc.u_temperature)
    Ea_true = sc.activation_energy + gen.normal(0.0, sc.u_activation_energy)
    k_true_Ts = sc.k_stated
    k_actual = k_true_Ts * float(arrhenius_factor(Ea_true, T_true, T_s))
    k_ref_true = k_true_Ts * float(
        arrhenius_factor(Ea_true, sc.reference_temperature_c + KELVIN, T_s)
    )
    stock_true = sc.stock_oh + gen.normal(0.0, sc.u_stock_oh)
    dye_true = sc.dye_stock + gen.normal(0.0, sc.u_dye_stock)
    eps_true = sc.molar_absorptivity + gen.normal(0.0, sc.u_molar_absorptivity)
    s50 = _rect(gen, sc.cyl50_half_width) / 50.0  # relative scale errors, shared per item
    s10 = _rect(gen, sc.cyl10_half_width) / 10.0
    s100 = _rect(gen, sc.cyl100_half_width) / 100.0
    blank_true = gen.normal(0.0, sc.blank_u)
    phot_true = _rect(gen, sc.photometric_half_width)
    l_true = sc.pathlength + _rect(gen, sc.pathlength_half_width)

    truth: dict[str, float] = {}
    tables: dict[str, str] = {}

    def vol(nominal: float, scale: float) -> float:
        return nominal * (1.0 + scale) + gen.normal(0.0, sc.reading_u)

    # -- batch runs -----------------------------------------------------------------------
    for plan in sc.runs:
        v_oh = vol(plan.stock_volume, s50)
        v_dye = vol(plan.dye_volume, s10)
        v_w = vol(plan.water_volume, s50)
        total = v_oh + v_dye + v_w
        oh = stock_true * v_oh / total
        d0 = dye_true * v_dye / total
        kp = k_actual * oh**sc.order
        lag = sc.lag_mean + gen.normal(0.0, sc.u_lag)
        t_rec = np.arange(1, plan.readings + 1) * plan.spacing
        t_true = t_rec + lag + gen.normal(0.0, sc.u_jitter, t_rec.size)
        a0 = eps_true * l_true * d0
        A_true = sc.baseline + (a0 - sc.baseline) * np.exp(-kp * t_true)
        A_obs = A_true + blank_true + phot_true + gen.normal(0.0, sc.noise_sd, t_rec.size)
        rows = [[float(t), round(float(a), 4)] for t, a in zip(t_rec, A_obs, strict=True)]
        tables[f"batch_{plan.name}.csv"] = _csv(
            ["time [s]", "absorbance"],
            rows,
            f"invented demo data: batch run {plan.name}, times recorded when each sample was drawn",
        )
        truth[f"pseudo_rate_constant/{plan.name}"] = kp
        truth[f"hydroxide_concentration/{plan.name}"] = oh
        truth[f"second_order_rate_constant/{plan.name}"] = k_true_Ts
    truth["second_order_rate_constant"] = k_true_Ts
    truth["second_order_rate_constant_at_reference"] = k_ref_true
    truth["hydroxide_order"] = sc.order
    truth["rate_constant_free_order"] = k_true_Ts

    # -- pumps ----------------------------------------------------------------------------
    bias = gen.normal(0.0, sc.operator_bias_u)
    flows: dict[str, float] = {}
    for pname, (q0, q1) in sc.pumps.items():
        rows = []
        for s in sc.pump_settings:
            for _rep in range(2):
                q = (q0 + q1 * s) / 60.0 * (1.0 + gen.normal(0.0, sc.pump_repeatability))  # mL/s
                t_true = sc.collect_seconds
                t_read = t_true + bias + gen.normal(0.0, sc.stopwatch_u)
                v = q * t_true * (1.0 + s100) + gen.normal(0.0, 0.3)
                rows.append([s, round(v, 1), round(t_read, 2)])
        tables[f"pump_{pname}.csv"] = _csv(
            ["setting [dial]", "volume [mL]", "time [s]"],
            rows,
            f"invented demo data: calibration of pump {pname}, volume collected over a timed interval",
        )
        flows[pname] = (q0 + q1 * sc.tank_setting) / 60.0
        truth[f"flow_rate/{pname}"] = flows[pname]
    q_total = sum(flows.values())
    v1 = sc.vessel_volume + gen.normal(0.0, sc.u_vessel_volume)
    v2 = sc.vessel_volume + gen.normal(0.0, sc.u_vessel_volume)
    tau1, tau2 = v1 / q_total, v2 / q_total
    truth["residence_time/t1"] = tau1
    truth["residence_time/t2"] = tau2

    # -- tanks: start-up transients sampled every 60 s ------------------------------------
    c_in_dye = sc.dye_feed * flows["p_dye"] / q_total
    oh_in = sc.oh_feed * flows["p_oh"] / q_total
    kp_tank = k_actual * oh_in
    t = np.arange(60.0, 45 * 60.0 + 1, 60.0)

    def absorb(c: NDArray[np.float64]) -> NDArray[np.float64]:
        return eps_true * l_true * c + blank_true + phot_true + gen.normal(0.0, sc.noise_sd, c.size)

    s1 = 1.0 / tau1 + kp_tank
    c1_ss = c_in_dye / (1.0 + kp_tank * tau1)
    c1 = c1_ss * (1.0 - np.exp(-s1 * t))  # tank starts full of water
    tables["tank_single.csv"] = _csv(
        ["time [s]", "absorbance"],
        [[float(a), round(float(b), 4)] for a, b in zip(t, absorb(c1), strict=True)],
        "invented demo data: outlet of one stirred tank after the feeds start",
    )
    # second tank: convolution of the first tank's outlet (closed form for the step start)
    s2 = 1.0 / tau2 + kp_tank
    c2_ss = c1_ss / (1.0 + kp_tank * tau2)
    if abs(s1 - s2) > 1e-12:
        c2 = c2_ss * (1.0 - (s1 * np.exp(-s2 * t) - s2 * np.exp(-s1 * t)) / (s1 - s2))
    else:
        c2 = c2_ss * (1.0 - (1.0 + s1 * t) * np.exp(-s1 * t))
    rows = [[float(a), round(float(b), 4), 1] for a, b in zip(t, absorb(c1), strict=True)]
    rows += [[float(a), round(float(b), 4), 2] for a, b in zip(t, absorb(c2), strict=True)]
    tables["tank_series.csv"] = _csv(
        ["time [s]", "absorbance", "tank"],
        rows,
        "invented demo data: outlets of two stirred tanks in series",
    )
    truth["tank_rate_constant/single"] = k_true_Ts
    truth["tank_rate_constant/series"] = k_true_Ts

    # -- tracer wash-out ------------------------------------------------------------------
    tt = np.arange(0.0, 40 * 60.0 + 1, 60.0)
    a_start = 0.80
    frac = (1.0 - sc.bypass_fraction) * np.exp(
        -(1.0 - sc.bypass_fraction) * q_total * tt / (sc.active_fraction * v1)
    )
    frac[0] = 1.0
    tables["tracer.csv"] = _csv(
        ["time [s]", "absorbance"],
        [
            [float(a), round(float(b), 4)]
            for a, b in zip(tt, absorb(a_start * frac / (eps_true * l_true)), strict=True)
        ],
        "invented demo data: tracer wash-out of tank t1 with clean water at the working flow",
    )
    truth["mean_residence_time/tracer"] = float(
        sc.active_fraction
        * v1
        / ((1.0 - sc.bypass_fraction) * q_total)
        * (1.0 - sc.bypass_fraction)
    )

    return SimulatedStudy(_experiment_toml(sc), tables, truth, seed)


def _experiment_toml(sc: DemoScenario) -> str:
    runs = []
    for p in sc.runs:
        runs.append(
            f"""
[[batch.runs]]
name = "{p.name}"
table = "batch_{p.name}.csv"
blank = "b1"
cuvette = "c1"
hydroxide_solution = "oh_stock"
hydroxide_volume = {{ value = {p.stock_volume:g}, unit = "mL", glassware = "cyl50" }}
dye_solution = "dye_stock"
dye_volume = {{ value = {p.dye_volume:g}, unit = "mL", glassware = "cyl10" }}
water_volume = {{ value = {p.water_volume:g}, unit = "mL", glassware = "cyl50" }}
"""
        )
    return f"""# INVENTED DEMO STUDY: every name and number here is made up to show uqreport at work.
# Nothing in it describes a real laboratory, person or product.
format_version = 1

[study]
title = "Dye fading and stirred tanks (invented demo)"
operator = "Group Lambda (fictional)"
date = 2026-11-20
temperature = {{ value = {sc.temperature_c:g}, unit = "degC", u = {sc.u_temperature:g}, source = "bath thermometer, calibration certificate (invented)" }}
reference_temperature = {{ value = {sc.reference_temperature_c:g}, unit = "degC" }}
invented = true
notes = "Simulated by uqreport's demo: true values are in truth.json."

[chemistry]
dye = "violet dye"
excess_reagent = "hydroxide"
wavelength = {{ value = 590, unit = "nm" }}
molar_absorptivity = {{ value = {sc.molar_absorptivity:g}, unit = "L/(mol*cm)", u = {sc.u_molar_absorptivity:g}, source = "plausibility value for this dye (invented uncertainty)" }}
activation_energy = {{ value = {sc.activation_energy / 1e3:g}, unit = "kJ/mol", u = {sc.u_activation_energy / 1e3:g}, source = "literature value for this reaction (assumed uncertainty)" }}

[spectrophotometer]
wavelength = {{ value = 590, unit = "nm" }}
noise_sd = {sc.noise_sd:g}
photometric_accuracy = {{ half_width = {sc.photometric_half_width:g}, distribution = "rectangular", source = "typical acceptance criterion below 1 A" }}
linear_limit = 1.0
noise_floor = 0.02

[blanks.b1]
offset = {{ value = 0, u = {sc.blank_u:g}, source = "repeat zero readings on water (invented)" }}

[cuvettes.c1]
pathlength = {{ value = {sc.pathlength:g}, unit = "cm", half_width = {sc.pathlength_half_width:g}, distribution = "rectangular", source = "cuvette specification" }}

[glassware.cyl50]
kind = "graduated cylinder"
capacity = {{ value = 50, unit = "mL" }}
class = "A"
reading = {{ u = {sc.reading_u:g}, unit = "mL" }}

[glassware.cyl10]
kind = "graduated cylinder"
capacity = {{ value = 10, unit = "mL" }}
class = "A"
reading = {{ u = {sc.reading_u:g}, unit = "mL" }}

[glassware.cyl100]
kind = "graduated cylinder"
capacity = {{ value = 100, unit = "mL" }}
class = "A"
reading = {{ u = 0.3, unit = "mL" }}

[stopwatch]
start_stop = {{ u = {sc.stopwatch_u:g}, unit = "s" }}
operator_bias = {{ value = 0, u = {sc.operator_bias_u:g}, unit = "s" }}

[timing]
recorded_at = "draw"
lag = {{ value = {sc.lag_mean:g}, u = {sc.u_lag:g}, unit = "s", source = "stopwatch trials of drawing and reading a sample (invented)" }}
jitter = {{ u = {sc.u_jitter:g}, unit = "s" }}

[solutions.oh_stock]
concentration = {{ value = {sc.stock_oh:g}, unit = "mol/L", u = {sc.u_stock_oh:g}, source = "standardised by titration (invented)" }}
reagent = "hydroxide"
description = "sodium hydroxide stock"

[solutions.dye_stock]
concentration = {{ value = {sc.dye_stock:g}, unit = "mol/L", u = {sc.u_dye_stock:g}, source = "weighed and dissolved (invented)" }}
reagent = "dye"

[solutions.dye_feed]
concentration = {{ value = {sc.dye_feed:g}, unit = "mol/L", u = {sc.dye_feed * 0.02:g} }}
reagent = "dye"

[solutions.oh_feed]
concentration = {{ value = {sc.oh_feed:g}, unit = "mol/L", u = {sc.oh_feed * 0.005:g} }}
reagent = "hydroxide"

[batch]
baseline = "fitted"
initial = "free"
{"".join(runs)}
[pumps.p_dye]
table = "pump_p_dye.csv"
glassware = "cyl100"

[pumps.p_oh]
table = "pump_p_oh.csv"
glassware = "cyl100"

[tanks.vessels.t1]
volume = {{ value = {sc.vessel_volume:g}, unit = "mL", u = {sc.u_vessel_volume:g}, source = "filled and drained with the 100 mL cylinder (invented)" }}

[tanks.vessels.t2]
volume = {{ value = {sc.vessel_volume:g}, unit = "mL", u = {sc.u_vessel_volume:g} }}

[[tanks.runs]]
name = "single"
vessels = ["t1"]
table = "tank_single.csv"
dye_feed = {{ solution = "dye_feed", pump = "p_dye", setting = {sc.tank_setting:g} }}
hydroxide_feed = {{ solution = "oh_feed", pump = "p_oh", setting = {sc.tank_setting:g} }}
cuvette = "c1"
blank = "b1"

[[tanks.runs]]
name = "series"
vessels = ["t1", "t2"]
table = "tank_series.csv"
dye_feed = {{ solution = "dye_feed", pump = "p_dye", setting = {sc.tank_setting:g} }}
hydroxide_feed = {{ solution = "oh_feed", pump = "p_oh", setting = {sc.tank_setting:g} }}
cuvette = "c1"
blank = "b1"

[[tracer.runs]]
name = "tracer"
vessel = "t1"
table = "tracer.csv"
feeds = [ {{ pump = "p_dye", setting = {sc.tank_setting:g} }}, {{ pump = "p_oh", setting = {sc.tank_setting:g} }} ]
cuvette = "c1"
blank = "b1"
"""


def write_demo(
    directory: str | Path, *, seed: int = 7, scenario: DemoScenario | None = None
) -> SimulatedStudy:
    """Write the simulated demo study (experiment.toml, tables, truth.json) into ``directory``."""
    out = Path(directory)
    out.mkdir(parents=True, exist_ok=True)
    study = simulate_study(scenario, rng=seed)
    atomic_write_text(out / "experiment.toml", study.experiment)
    for name, text in study.tables.items():
        atomic_write_text(out / name, text)
    truth = {
        "schema": "uqreport.truth/1",
        "invented": True,
        "seed": seed,
        "quantities": {k: float(v) for k, v in sorted(study.truth.items())},
    }
    atomic_write_text(out / "truth.json", json.dumps(truth, indent=2) + "\n")
    return study
