"""A policy file cannot silently switch a safety rule off (issue 9, section 3).

Each refusal below was accepted by `contrast-aid knowledge check` before issue 9. The threshold sweep
proves, for every ordering of the three renal thresholds on a grid, that the verdicts never become less
restrictive as eGFR falls (before issue 9, 10 of the 125 did) (an invariant of the renal rules, whose sources
— ACR-NKF 2020 consensus, ESUR 2018 guideline — grade risk by falling eGFR).
"""

from __future__ import annotations

import itertools
import time
from pathlib import Path

import pytest
import yaml

from knowledge import KnowledgeError, decide, load_knowledge
from knowledge.cli import main
from knowledge.tables import models as m
from knowledge.tables.loader import DEFAULT_POLICY, MAX_YAML_NODES, load_policy

BASE = DEFAULT_POLICY.read_text(encoding="utf-8")


def write(tmp_path: Path, text: str | bytes, name: str = "policy.yaml") -> Path:
    p = tmp_path / name
    if isinstance(text, bytes):
        p.write_bytes(text)
    else:
        p.write_text(text, encoding="utf-8")
    return p


def setting(text: str, name: str, value: str) -> str:
    lines = text.splitlines()
    for i, line in enumerate(lines):
        if line.startswith(name + ":"):
            lines[i] = f"{name}: {value}"
            return "\n".join(lines) + "\n"
    raise AssertionError(name)


def refused(tmp_path, text, *needles):
    with pytest.raises(KnowledgeError) as e:
        load_knowledge(policy=write(tmp_path, text))
    msg = e.value.message
    assert "\n" not in msg and len(msg) <= 1000
    for needle in needles:
        assert needle in msg, msg
    return msg


def test_duplicate_keys_are_refused(tmp_path):
    # main: the last won, and a second egfr_hydration_below: 5 turned hydration off at eGFR 27.9
    refused(tmp_path, BASE + "egfr_hydration_below: 5\n", "duplicate key 'egfr_hydration_below'")


def test_duplicate_keys_in_a_nested_mapping_are_refused(tmp_path):
    text = BASE.replace("  - id: prednisone-13h\n", "  - id: prednisone-13h\n    id: other\n")
    refused(tmp_path, text, "duplicate key 'id'")


@pytest.mark.parametrize("value", ["yes", "on", "true", '"30"', "'30'", "thirty"])
def test_yaml_booleans_and_strings_are_not_numbers(tmp_path, value):
    # main: `yes` was read as 1.0
    refused(tmp_path, setting(BASE, "egfr_hydration_below", value), "policy.egfr_hydration_below",
            "is not a number")


@pytest.mark.parametrize("name, value", [
    ("iodine_g_per_gfr_max", ".inf"),
    ("iodine_g_per_gfr_max", "1.0e+300"),  # (YAML 1.1 reads 1e300 as text: refused too)
    ("egfr_hydration_below", ".nan"),
    ("creatinine_max_age_days_outpatient", "1.0e+300"),
    ("creatinine_max_age_days_inpatient", "400"),
    ("first_pass_iodine_g_per_gfr_max", ".inf"),
    ("radioiodine_delay_weeks", "1.0e+9"),
])
def test_every_setting_is_finite_and_plausible(tmp_path, name, value):
    refused(tmp_path, setting(BASE, name, value), f"policy.{name}")


def test_repeat_interval_cannot_build_millions_of_doses(tmp_path):
    text = BASE.replace("repeat_every_hours: 4", "repeat_every_hours: 0.0000001")
    refused(tmp_path, text, "repeat_every_hours", "at least 0.5")
    text = BASE.replace("hours_before: 13, drug: prednisone", "hours_before: 1.0e+6, drug: prednisone")
    refused(tmp_path, text, "hours_before", "at most 48")


def test_every_numeric_setting_has_an_upper_bound():
    """Each float setting of the policy and its regimens has a finite maximum (documented in DEVELOPERS.md)."""
    import annotated_types as at

    for model in (m.Policy, m.Regimen, m.RegimenStep):
        for name, f in model.model_fields.items():
            kinds = {a for a in (f.annotation, *getattr(f.annotation, "__args__", ())) if a in (int, float)}
            if not kinds or f.annotation is bool:
                continue
            assert any(isinstance(c, (at.Le, at.Lt)) for c in f.metadata), f"{model.__name__}.{name}"
            assert any(isinstance(c, (at.Ge, at.Gt)) for c in f.metadata), f"{model.__name__}.{name}"


def test_bounds_are_documented():
    text = (Path(__file__).resolve().parents[1] / "DEVELOPERS.md").read_text()
    for name in ("creatinine_max_age_days_outpatient", "iodine_g_per_gfr_max", "repeat_every_hours"):
        assert name in text


def test_anchor_bomb_is_refused_quickly(tmp_path):
    # main: an alias bomb inside a known field took 30-50 s and more than 2 GB
    lines = ["x0: &x0 [{source: acr-nkf-2020, section: s}]"]
    lines += [f"x{i}: &x{i} [" + ",".join([f"*x{i - 1}"] * 10) + "]" for i in range(1, 10)]
    head, rest = BASE.split("based_on:", 1)
    rest = rest.split("egfr_prophylaxis_consider_below", 1)[1]
    text = "\n".join(lines) + "\n" + head + "based_on: *x9\negfr_prophylaxis_consider_below" + rest
    start = time.process_time()
    refused(tmp_path, text, f"more than {MAX_YAML_NODES} values")
    print(f"alias bomb refused after {time.process_time() - start:.2f} s CPU")


def test_non_utf8_policy_is_one_line(tmp_path, capsys):
    p = write(tmp_path, BASE.encode("utf-8").replace(b"North American", b"Nord-Am\xe9rique"))
    code = main(["knowledge", "check", "--policy", str(p)])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and "not UTF-8" in err and "Traceback" not in err


@pytest.mark.parametrize("target", ["/dev/zero", "fifo", "folder"])
def test_policy_must_be_a_regular_file(tmp_path, capsys, target):
    import os

    if target == "fifo":
        path = str(tmp_path / "pipe")
        os.mkfifo(path)
    elif target == "folder":
        path = str(tmp_path)
    else:
        path = target
    code = main(["knowledge", "check", "--policy", path])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1


def test_bundled_policies_still_load():
    for path in sorted((DEFAULT_POLICY.parent).glob("*.yaml")):
        pol, _ = load_policy(path)
        assert pol.egfr_hydration_below <= pol.egfr_prophylaxis_consider_below


# ---------------------------------------------------------------------------------- threshold sweep
GRID = (10, 20, 30, 45, 60)
NAMES = ("egfr_first_pass_hydration_below", "egfr_hydration_below", "egfr_prophylaxis_consider_below")
# eGFR probes: each side of every grid threshold and between them (verdicts are constant in between)
PROBES = sorted({5.0, 90.0} | {g + d for g in GRID for d in (-0.5, 0.5)} | {(a + b) / 2 for a, b in zip(GRID, GRID[1:])})


def _restrictiveness(k) -> dict[tuple[str, int, str], list[int]]:
    """(exam, role, agent) -> verdict severity at each probe eGFR, lowest eGFR first."""
    out: dict[tuple[str, int, str], list[int]] = {}
    for exam in k.tables.exams:
        if not any(r.route in m.INTRAVASCULAR for r in exam.roles):
            continue
        for egfr in PROBES:
            d = decide({"exam": exam.id, "patient": {"egfr": egfr}}, k)
            for i, role in enumerate(d.roles):
                for o in role.options:
                    out.setdefault((exam.id, i, o.agent), []).append(o.verdict.severity)
    return out


def _violations(k) -> list[str]:
    bad = []
    for key, sev in _restrictiveness(k).items():
        for (e1, s1), (e2, s2) in zip(zip(PROBES, sev), zip(PROBES[1:], sev[1:])):
            if s1 < s2:  # lower eGFR e1 less restrictive than higher e2
                bad.append(f"{key}: eGFR {e1} -> {s1}, eGFR {e2} -> {s2}")
    return bad


def test_exhaustive_threshold_sweep():
    """All 125 orders of the three renal thresholds on the grid: each is monotone in eGFR (the rules hold for
    any order), and the orders models.POLICY_ORDER calls inconsistent are refused at load as well."""
    base = m.Policy.model_validate(yaml.safe_load(BASE))
    accepted = rejected = non_monotone = 0
    for values in itertools.product(GRID, repeat=3):
        data = {**base.model_dump(), **dict(zip(NAMES, values))}
        try:
            pol = m.Policy.model_validate(data)
            accepted += 1
        except ValueError:
            rejected += 1
            pol = m.Policy.model_construct(**{**dict(base), **dict(zip(NAMES, values))})  # built anyway
        bad = _violations(load_knowledge(policy=pol))
        non_monotone += bool(bad)
        assert bad == [], dict(zip(NAMES, values))
    print(f"threshold sweep: 125 policies, {accepted} accepted, {rejected} refused as inconsistent; "
          f"{non_monotone} make a lower eGFR less restrictive")
    assert accepted + rejected == 125 and accepted > 0 and rejected > 0


def test_an_overlay_cannot_switch_a_threshold_off_with_a_yaml_boolean_or_text(tmp_path):
    # issue 9 for department overlays (issue 12): `yes` would be read as 1.0 and turn hydration off
    from knowledge.tables.loader import load_policy

    for value in ("yes", "'30'", "on"):
        path = tmp_path / "overlay.yaml"
        path.write_text(f"base: default\nid: invented-dept\nname: Invented\nthresholds:\n"
                        f"  egfr_hydration_below: {value}\n", encoding="utf-8")
        with pytest.raises(KnowledgeError) as exc:
            load_policy(path)
        assert "overlay.thresholds.egfr_hydration_below" in str(exc.value) and "is not a number" in str(exc.value)
