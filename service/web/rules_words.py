"""What pages say about the rules a result was judged by: each check's source (with "limit
not yet confirmed by the laboratory" until the laboratory confirms it), the coverage factor
and its effective degrees of freedom, and the decision rule, as the engine returned them.

    {{ c|check_source }}   {{ result|coverage }}   {{ result|decision_rule }}
"""

from __future__ import annotations

from service.lab_tests.reduction import coverage_words, decision_rule_words
from service.scope.service import check_label, source_words


def install(env_filters: dict[str, object]) -> None:
    env_filters["check_source"] = source_words
    env_filters["check_label"] = check_label
    env_filters["coverage"] = coverage_words
    env_filters["decision_rule"] = decision_rule_words
