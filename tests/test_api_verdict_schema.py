"""The verdict in the OpenAPI document (``components/schemas/Verdict``, ``ballast.verdict/1``).

Real verdicts, run by the engine and through the API (a batch on the Flask test client, a
worker's run), are validated against the committed document with the ``jsonschema`` library's
Draft 2020-12 validator (the schema dialect of OpenAPI 3.1.0, section 4.8.24). The circuits are
the project's invented ones; what each verdict must say comes from outside the engine: rational
NDFs with chosen zeros (``tests.support.closed_forms``), the parallel RLC closed form
(``tests.api_fixtures.rlc_request``) and the lumped families' natural frequencies from
scipy.linalg.eig (quoted in ``workers.lumped.families``). A field-coverage test then checks that
every key of those verdicts is declared and every declared property is met, with a value, in
at least one of them (or is listed in ``RARE`` with why).
"""

from __future__ import annotations

import copy
import functools
import json
from typing import Any

import numpy as np
import pytest
from jsonschema import Draft202012Validator
from referencing import Registry, Resource
from referencing.jsonschema import DRAFT202012

from service.openapi_export import OPENAPI_PATH
from service.runner import run_check_json
from tests.api_fixtures import rlc_request, run_worker, tiny_request
from tests.support.closed_forms import ndf_request, rational
from tests.support.grids import COARSE_HZ
from tests.support.refine_cases import tank
from tests.support.sweeps import SweepCircuit, request_at
from workers.engine import CheckOptions, run_check
from workers.lumped.families import combined_power_stage, two_stage_lna

TWO_PI = 2 * np.pi
POLES = [TWO_PI * (-0.3e9 + 0.9e9j), TWO_PI * (-2e9 + 6e9j)]
GROWING = TWO_PI * (+0.05e9 + 2e9j)          # an oscillation at 2 GHz
DAMPED = TWO_PI * (-0.2e9 + 3e9j)
WIDE_HZ = np.geomspace(1e6, 1e12, 1201)
FLOW_HZ = np.linspace(300e6, 15e9, 401)      # a design flow's band: its DC end is open
LUMPED_HZ = np.geomspace(1e6, 1e11, 801)
DOC_URI = "urn:ballast:openapi"

#: declared properties no circuit here fills, and why (component, property) → reason
RARE: dict[tuple[str, str], str] = {}


def _lumped(case, **options: Any) -> dict[str, Any]:
    sweep = SweepCircuit(case.name, case.name, case, 1e10, LUMPED_HZ, LUMPED_HZ)
    return run_check(request_at(sweep, LUMPED_HZ, options=CheckOptions(**options))).to_dict()


def _rational(zeros, f, **kw: Any) -> dict[str, Any]:
    return run_check(ndf_request(rational(TWO_PI * 1j * f, zeros, POLES), f, **kw)).to_dict()


#: name → (how to run it, the verdict its outside oracle says)
CASES: dict[str, tuple[Any, str]] = {
    # NDF = rational function with only left-half-plane zeros over 1 MHz–1 THz: both ends settle
    "rational stable, wide band": (lambda: _rational([DAMPED, TWO_PI * (-1e9 + 8e9j)], WIDE_HZ),
                                   "stable"),
    # the top end closed by the devices' f_max at the band top (no_gain_above_fmax)
    "rational stable, fmax statement": (
        lambda: _rational([DAMPED, TWO_PI * (-1e9 + 8e9j)], np.geomspace(1e6, 15e9, 801),
                          fmax_hz=15e9), "stable"),
    # a growing pair at 2 GHz inside a flow's band: unstable, with a next sweep for the DC end
    "rational unstable, flow band": (lambda: _rational([GROWING, DAMPED], FLOW_HZ, fmax_hz=5e11),
                                     "unstable"),
    # a growing pair only 2 kHz wide between 37 MHz steps: reported, not pinned, not counted
    "rational unpinned mode": (lambda: _rational([TWO_PI * (+2e3 + 2.0e9j), DAMPED], FLOW_HZ),
                               "indeterminate"),
    # parallel RLC with a negative conductance, σ/ω₀ = 0.003 at 1.3 GHz: Kurokawa's point
    "tank, Kurokawa refined": (lambda: run_check(tank(1.3e9, 0.003).request(COARSE_HZ)).to_dict(),
                               "unstable"),
    # two-stage LNA without its gate damping resistor: +6.57 MHz ± j145.4 MHz (eig)
    "LNA unstable, operating band": (
        lambda: _lumped(two_stage_lna(gate_return_damping_ohm=None),
                        operating_band_hz=(4e9, 6e9)), "unstable"),
    # two-stage LNA as designed: −8.99 MHz ± j145.2 MHz (eig)
    "LNA stable": (lambda: _lumped(two_stage_lna()), "stable"),
    # combined stage without the drain-to-drain resistor: odd mode +102 MHz ± j2242 MHz (eig)
    "PA odd mode": (lambda: _lumped(combined_power_stage(odd_mode_ohm=None),
                                    operating_band_hz=(2.4e9, 2.6e9)), "unstable"),
    # a unilateral gm between resistively loaded ports, as JSON: det Y_on = det Y_off (Y12 = 0),
    # so NDF ≡ 1
    "tiny two-port, JSON": (lambda: run_check_json(tiny_request()), "stable"),
}


@functools.cache
def _document() -> dict[str, Any]:
    return json.loads(OPENAPI_PATH.read_text())


@functools.cache
def _validator(component: str) -> Draft202012Validator:
    registry = Registry().with_resource(
        DOC_URI, Resource.from_contents(_document(), default_specification=DRAFT202012))
    schema = {"$ref": f"{DOC_URI}#/components/schemas/{component}"}
    Draft202012Validator.check_schema(_document()["components"]["schemas"][component])
    return Draft202012Validator(schema, registry=registry)


@functools.cache
def _verdict(name: str) -> dict[str, Any]:
    run, _ = CASES[name]
    return run()


def _assert_valid(component: str, instance: Any) -> None:
    errors = sorted(_validator(component).iter_errors(instance), key=lambda e: list(e.path))
    assert not errors, "\n".join(f"{list(e.path)}: {e.message}" for e in errors[:10])


@pytest.mark.parametrize("name", list(CASES))
def test_engine_verdicts_validate_against_the_document(name):
    verdict = _verdict(name)
    assert verdict["verdict"] == CASES[name][1], (name, verdict["verdict"])
    _assert_valid("Verdict", verdict)


def _batch_verdicts(client, auth, api_stores) -> list[dict[str, Any]]:
    """A batch of two RLC tanks (R = 200 Ω stable, R = 500 Ω unstable: G = 1/R − 3 mS)
    submitted, run by a worker and read back as the API serves each check."""
    f = np.geomspace(1e7, 1e12, 801)
    requests = [rlc_request(r, f) for r in (200.0, 500.0)]
    shared = {k: requests[0][k] for k in ("frequency_hz", "ports", "devices")}
    variants = [{"label": f"R={r:g}", "parameters": q["parameters"], "data": q["data"],
                 "z0_ohm": q["z0_ohm"]} for r, q in zip((200.0, 500.0), requests, strict=True)]
    response = client.post("/v1/batches", json={"map": shared, "variants": variants},
                           headers=auth)
    assert response.status_code == 202
    check_ids = response.get_json()["check_ids"]
    run_worker(api_stores.checks, check_ids)
    return [client.get(f"/v1/checks/{i}", headers=auth).get_json() for i in check_ids]


def test_a_batch_through_the_api_validates_as_served(client, auth, api_stores):
    views = _batch_verdicts(client, auth, api_stores)
    assert [v["verdict"]["verdict"] for v in views] == ["stable", "unstable"]
    for view in views:
        _assert_valid("Check", view)  # the check view, its verdict through the $ref
        _assert_valid("Verdict", view["verdict"])
    _assert_valid("Check", {**views[0], "status": "queued", "verdict": None})


def _mutations(verdict: dict[str, Any]) -> list[tuple[str, dict[str, Any]]]:
    broken = []
    extra = copy.deepcopy(verdict)
    extra["surprise"] = 1
    broken.append(("an undeclared top-level field", extra))
    nested = copy.deepcopy(verdict)
    nested["modes"][0]["surprise"] = 1
    broken.append(("an undeclared mode field", nested))
    missing = copy.deepcopy(verdict)
    del missing["margin"]
    broken.append(("a required field left out", missing))
    wrong_enum = copy.deepcopy(verdict)
    wrong_enum["diagnostics"][0]["severity"] = "fatal"
    broken.append(("a severity outside the Literal", wrong_enum))
    wrong_format = copy.deepcopy(verdict)
    wrong_format["format"] = "ballast.verdict/2"
    broken.append(("another format", wrong_format))
    wrong_band = copy.deepcopy(verdict)
    wrong_band["band_hz"].append(1.0)
    broken.append(("a band of three numbers", wrong_band))
    null_count = copy.deepcopy(verdict)
    null_count["n_points"] = None
    broken.append(("null where the field is not nullable", null_count))
    return broken


def test_the_schema_refuses_verdicts_that_break_the_format():
    verdict = _verdict("rational unstable, flow band")
    assert verdict["modes"] and verdict["diagnostics"]
    for what, broken in _mutations(verdict):
        assert not _validator("Verdict").is_valid(broken), what


def _component(schema: dict[str, Any]) -> str | None:
    ref = schema.get("$ref", "")
    return ref.rsplit("/", 1)[1] if ref.startswith("#/components/schemas/") else None


def _walk(schema: dict[str, Any], value: Any, where: str | None,
          seen: set[tuple[str, str]], undeclared: set[str]) -> None:
    """Record (component, property) met with a non-null value; collect keys not declared."""
    if value is None:
        return
    name = _component(schema)
    if name is not None:
        _walk(_document()["components"]["schemas"][name], value, name, seen, undeclared)
        return
    if "anyOf" in schema:
        (option,) = [o for o in schema["anyOf"] if o != {"type": "null"}]
        _walk(option, value, where, seen, undeclared)
    elif isinstance(value, dict):
        declared = schema.get("properties", {})
        for key, item in value.items():
            if key in declared:
                if item is not None:
                    seen.add((str(where), key))
                _walk(declared[key], item, where, seen, undeclared)
            elif isinstance(schema.get("additionalProperties"), dict):
                _walk(schema["additionalProperties"], item, where, seen, undeclared)
            else:
                undeclared.add(f"{where}.{key}")
    elif isinstance(value, list):
        shapes = schema.get("prefixItems") or [schema.get("items", {})] * len(value)
        for shape, item in zip(shapes, value, strict=True):
            _walk(shape, item, where, seen, undeclared)


def test_every_field_is_declared_and_every_declared_field_is_met(client, auth, api_stores):
    verdicts = [_verdict(name) for name in CASES]
    verdicts += [v["verdict"] for v in _batch_verdicts(client, auth, api_stores)]
    seen: set[tuple[str, str]] = set()
    undeclared: set[str] = set()
    for verdict in verdicts:
        _walk({"$ref": "#/components/schemas/Verdict"}, verdict, None, seen, undeclared)
    assert not undeclared, f"keys in real verdicts the document does not declare: {undeclared}"
    declared = {(name, key) for name, component in _verdict_components().items()
                for key in component["properties"]}
    assert set(RARE) <= declared, set(RARE) - declared
    never = declared - seen - set(RARE)
    assert not never, f"declared but never met with a value: {sorted(never)}"
    assert not set(RARE) & seen, f"listed as rare but met: {sorted(set(RARE) & seen)}"


def _verdict_components() -> dict[str, dict[str, Any]]:
    """The Verdict component and every component it reaches."""
    schemas = _document()["components"]["schemas"]
    found: dict[str, dict[str, Any]] = {}
    pending = ["Verdict"]
    while pending:
        name = pending.pop()
        if name in found:
            continue
        found[name] = schemas[name]
        text = json.dumps(schemas[name])
        pending += [part.split('"')[0] for part in text.split('"#/components/schemas/')[1:]]
    return found
