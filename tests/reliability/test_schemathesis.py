"""Schemathesis against the OpenAPI schema at /api/v1/openapi.json, on the ASGI app in-process, as an admin
(API token): no answer is a server error (5xx) and every documented answer conforms to its schema.

Three passes, bounded: positive cases (valid by the schema) and negative cases (invalid on purpose) for every
operation, then stateful scenarios that chain operations through the links Schemathesis infers (ids from one
answer fed to the next request). Generation is derandomised, so CI runs the same cases each time.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import pytest
import schemathesis
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis.errors import FlakyStrategyDefinition, Unsatisfiable
from schemathesis.checks import not_a_server_error, response_schema_conformance

from tests.reliability.campaign import Campaign
from tests.reliability.conftest import Figures
from tests.reliability.world import World

POSITIVE_EXAMPLES = 15
NEGATIVE_EXAMPLES = 8
STATEFUL_STEPS = 250
STATEFUL_SECONDS = 20.0
# Left out, with the reason: the fuzzer would revoke its own credentials (tested in test_authorization.py).
EXCLUDED = {("DELETE", "/api/v1/tokens/{token_id}")}


@dataclass
class Tally:
    cases: int = 0
    failures: list[str] = field(default_factory=list)

    def record(self, label: str, error: BaseException) -> None:
        self.failures.append(f"{label}: {str(error)[:800]}")


def _settings(examples: int, **extra: Any) -> settings:
    options: dict[str, Any] = {
        "max_examples": examples,
        "deadline": None,
        "database": None,
        "derandomize": True,
        "suppress_health_check": list(HealthCheck),
        "phases": [Phase.explicit, Phase.generate],
    }
    return settings(**(options | extra))


@pytest.fixture(scope="module")
def schema(campaign: Campaign, world: World) -> Any:
    del world  # records of every kind exist, so generated ids sometimes hit real rows
    loaded = schemathesis.openapi.from_asgi("/api/v1/openapi.json", campaign.app)
    for method, path in EXCLUDED:
        loaded = loaded.exclude(method=method, path=path)
    return loaded


def _auth(campaign: Campaign) -> dict[str, str]:
    return {"Authorization": f"Bearer {campaign.members['admin'].token}"}


def _operations(schema: Any) -> list[Any]:
    return [result.ok() for result in schema.get_all_operations()]


def _run_operation(operation: Any, strategy: Any, examples: int, check: Callable[[Any], None], tally: Tally) -> None:
    label = f"{operation.method.upper()} {operation.path}"

    @_settings(examples)
    @given(case=strategy)
    def run(case: Any) -> None:
        tally.cases += 1
        try:
            check(case)
        except (Exception, BaseExceptionGroup) as error:  # collected, not raised: no shrinking, every failure listed
            tally.record(label, error)

    try:
        run()
    except Unsatisfiable:
        return  # nothing to make invalid (no parameters): the positive pass covers the operation


def test_positive_cases_get_no_server_error_and_conform_to_the_schema(
    campaign: Campaign, schema: Any, figures: Figures
) -> None:
    tally, headers = Tally(), _auth(campaign)
    checks = [not_a_server_error, response_schema_conformance]
    for operation in _operations(schema):
        _run_operation(
            operation,
            operation.as_strategy(),
            POSITIVE_EXAMPLES,
            lambda case: case.call_and_validate(headers=headers, checks=checks),
            tally,
        )
    figures.add(cases=tally.cases, failures=len(tally.failures))
    assert not tally.failures, "\n\n".join(tally.failures[:5])


def test_negative_cases_get_no_server_error(campaign: Campaign, schema: Any, figures: Figures) -> None:
    tally, headers = Tally(), _auth(campaign)
    for operation in _operations(schema):
        _run_operation(
            operation,
            operation.as_strategy(generation_mode=schemathesis.GenerationMode.NEGATIVE),
            NEGATIVE_EXAMPLES,
            lambda case: case.call_and_validate(headers=headers, checks=[not_a_server_error]),
            tally,
        )
    figures.add(cases=tally.cases, failures=len(tally.failures))
    assert not tally.failures, "\n\n".join(tally.failures[:5])


def test_stateful_scenarios_follow_links_without_server_errors(
    campaign: Campaign, schema: Any, figures: Figures
) -> None:
    """Scenarios of up to 10 linked calls, in batches until the step or time budget is spent.

    Hypothesis replays choices to explore around them; against a live database a replayed step can meet other
    data and choose differently, which Hypothesis reports as FlakyStrategyDefinition. That ends a batch (the
    steps already run still count, and their checks already ran); it says nothing about the service.
    """
    tally, headers = Tally(), _auth(campaign)

    class Scenario(schema.as_state_machine()):  # type: ignore[misc]
        def get_call_kwargs(self, case: Any) -> dict[str, Any]:
            return {"headers": headers}

        def after_call(self, response: Any, case: Any) -> None:
            tally.cases += 1

        def validate_response(self, response: Any, case: Any, additional_checks: Any = None, **kwargs: Any) -> None:
            try:
                case.validate_response(
                    response, checks=[not_a_server_error, response_schema_conformance], transport_kwargs=kwargs
                )
            except (Exception, BaseExceptionGroup) as error:
                tally.record(f"{case.operation.method.upper()} {case.operation.path}", error)

    started = time.monotonic()
    while tally.cases < STATEFUL_STEPS and time.monotonic() - started < STATEFUL_SECONDS:
        try:
            Scenario.run(settings=_settings(15, stateful_step_count=10, derandomize=False))
        except FlakyStrategyDefinition:
            continue
    figures.add(cases=tally.cases, failures=len(tally.failures))
    assert tally.cases > 0
    assert not tally.failures, "\n\n".join(tally.failures[:5])
