"""The lab-tests service, imported under one name everywhere:
``from service.lab_tests import service as lab_tests``.

The rules live in modules by concern: `lifecycle` (request, assign, conditions, start,
submit, approve, send back, issue), `recording` (specimen, saturation, trials and the live
reduction), `corrections` (new revisions, recomputation), `reading` (a test and its
record, lists), `permissions` (who may do what: `allowed_actions`) and `reduction` (the one
door to the engine). What typed values are kept and how: see `recording`.
"""

from __future__ import annotations

from service.lab_tests.corrections import recompute, request_correction
from service.lab_tests.lifecycle import (
    approve_test,
    mark_issued,
    request_test,
    send_back,
    start_test,
    submit_test,
    update_test,
)
from service.lab_tests.permissions import (
    EDITABLE,
    Action,
    allowed_actions,
    may_assign,
    may_request_tests,
    may_review,
)
from service.lab_tests.preview import PreviewInputs, preview_inputs
from service.lab_tests.reading import (
    TestRecord,
    apparatus_of,
    assigned_tests,
    awaiting_review,
    describe_test,
    get_test,
    load_record,
    read_test,
    readings_of,
    sample_tests,
    saturation_of,
    specimen_of,
    state_counts,
    tests_of_samples,
    trials_of,
)
from service.lab_tests.recording import (
    PreparedTrial,
    add_saturation_step,
    exclude_trial,
    live_reduction,
    prepare_trial,
    record_trial,
    update_trial,
    write_specimen,
)

__all__ = [
    "EDITABLE",
    "Action",
    "PreparedTrial",
    "PreviewInputs",
    "TestRecord",
    "add_saturation_step",
    "allowed_actions",
    "apparatus_of",
    "approve_test",
    "assigned_tests",
    "awaiting_review",
    "describe_test",
    "exclude_trial",
    "get_test",
    "live_reduction",
    "load_record",
    "mark_issued",
    "may_assign",
    "may_request_tests",
    "may_review",
    "prepare_trial",
    "preview_inputs",
    "read_test",
    "readings_of",
    "recompute",
    "record_trial",
    "request_correction",
    "request_test",
    "sample_tests",
    "saturation_of",
    "send_back",
    "specimen_of",
    "start_test",
    "state_counts",
    "submit_test",
    "tests_of_samples",
    "trials_of",
    "update_test",
    "update_trial",
    "write_specimen",
]
