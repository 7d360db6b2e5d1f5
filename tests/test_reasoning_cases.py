"""Knowledge test cases: pass when the top after all steps is one of expect_top."""

from __future__ import annotations

import io
from dataclasses import replace
from pathlib import Path

from rich.console import Console

from diagnose.kb.model import Case, Step
from diagnose.reasoning.synthetic import tiny_model
from diagnose.service.cases import run_case, run_cases

FIXTURES = Path(__file__).parent / "fixtures"


def test_tiny_model_case_passes():
    results = run_cases(tiny_model())
    assert [(r.case, r.passed, r.top) for r in results] == [("fuse_found", True, "fuse_blown")]


def test_a_failing_case_shows_the_ranking():
    m = tiny_model()
    case = Case("wrong", ("will_not_release",), (Step(check="fuse", answer="blown"),),
                ("coil_open",))
    r = run_case(m, case)
    assert not r.passed and r.top == "fuse_blown" and r.ranking[0][0] == "fuse_blown"
    d = r.to_dict()
    assert d["ranking"][0]["cause"] == "fuse_blown" and "expected coil_open" in d["message"]
    from diagnose.views import CaseResultView

    out = io.StringIO()
    Console(file=out, width=80, color_system=None).print(CaseResultView(r))
    assert "FAIL wrong" in out.getvalue() and "fuse_blown" in out.getvalue()


def test_a_refused_step_fails_the_case_with_the_reason():
    m = tiny_model()
    case = Case("bad", ("will_not_release",), (Step(check="fuse", answer="melted"),),
                ("fuse_blown",))
    r = run_case(m, case)
    assert not r.passed and "melted" in r.message


def test_cases_use_nameplate_mode_and_max_faults():
    base = tiny_model()
    # frequent causes (q = 0.2): a pair is then far likelier than "unknown" (u = 0.005)
    m = replace(base, causes={k: replace(c, prior=200.0) for k, c in base.causes.items()})
    case = Case("pair", ("noise_and_slip",), (Step(check="oil_traces", answer="oily"),),
                ("lining_oily", "lining_worn"), nameplate={"gravity_load": "no"}, max_faults=2)
    assert run_case(m, case).passed
    phone = replace(case, mode="phone", steps=(Step(check="listen_click", answer="click"),),
                    expect_top=("lining_worn",), max_faults=2)
    assert run_case(m, phone).top is not None


def test_fixture_pack_cases_pass():
    from diagnose.kb.loader import load_model

    results = run_cases(load_model(str(FIXTURES / "mini")))
    assert results and all(r.passed for r in results)
