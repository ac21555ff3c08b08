"""Reduction engine: pure computation of hydraulic conductivity, its checks and uncertainty.

The one public path used by the API and the workflow::

    inp = parse_request(payload)        # contract-shaped dict -> validated SI dataclasses
    res = reduce(inp)                   # -> frozen ReductionResult, under the built-in rules
    res = reduce(inp, rules=lab_book)   # ... or under a laboratory's own RuleBook
    body = result_to_dict(res)          # -> the contract's response JSON

What a request may carry (each method's entries, labels, units, examples and standards) is
declared once in :mod:`service.engine.catalogue`.

Methods, rules and sources: docs/methods.md.
"""

from service.engine import catalogue
from service.engine.errors import EngineInputError, InputProblem
from service.engine.model import ReductionInput, ReductionResult
from service.engine.parse import Read, parse_request, read_request
from service.engine.pipeline import reduce, result_to_dict
from service.engine.rules import BUILT_IN, Limit, Rule, RuleBook, RuleSet
from service.engine.version import ENGINE_VERSION

__all__ = [
    "BUILT_IN",
    "ENGINE_VERSION",
    "EngineInputError",
    "InputProblem",
    "Limit",
    "Read",
    "ReductionInput",
    "ReductionResult",
    "Rule",
    "RuleBook",
    "RuleSet",
    "catalogue",
    "parse_request",
    "read_request",
    "reduce",
    "result_to_dict",
]
