"""Logger rows to typed readings: units, clock times, and row/column refusals.

Unit factors are exact by definition (1 min = 60 s; 1 kPa = 1000 Pa; 1 mL = 1e-6 m³;
1 psi = 6894.757 Pa, NIST SP 811 Appendix B; t/°C = (t/°F − 32)/1.8, NIST SP 811).
"""

from __future__ import annotations

from datetime import datetime

import pytest

from service.engine.errors import EngineInputError
from service.engine.logger import (
    MAX_PROBLEMS,
    Channel,
    LoggerMapping,
    TimeColumn,
    cell_message,
    column_index,
    parse_logger_rows,
)
from service.engine.units import PRESSURE, TEMPERATURE, VOLUME

HEADER = ["Elapsed (min)", "Cell kPa", "Back kPa", "Volume mL", "Water temp"]


def mapping(**time: str) -> LoggerMapping:
    return LoggerMapping(
        time=TimeColumn(**({"column": "Elapsed (min)", "unit": "min"} | time)),
        channels=(
            Channel("cell_pressure", "Cell kPa", "kPa", PRESSURE),
            Channel("back_pressure", "back kpa", "kPa", PRESSURE),  # case ignored
            Channel("volume_change", "4", "mL", VOLUME),  # by column number
            Channel("temperature", "Water temp", "degF", TEMPERATURE, required=False),
        ),
    )


def refused(header, rows, mapping_, **kwargs) -> EngineInputError:
    with pytest.raises(EngineInputError) as info:
        parse_logger_rows(header, rows, mapping_, **kwargs)
    return info.value


def test_elapsed_minutes_and_channels_in_si():
    rows = [
        ["0", "350", "300", "0.00", "68"],
        ["", "", "", "", ""],  # blank row: skipped, row numbers kept
        ["1.5", "350.5", "300", "1.25", ""],
    ]
    log = parse_logger_rows(HEADER, rows, mapping())
    assert [r.row for r in log.rows] == [2, 4]
    assert log.times_s == pytest.approx((0.0, 90.0))  # 1.5 min = 90 s
    assert log.series("cell_pressure") == pytest.approx((350e3, 350.5e3))
    assert log.series("volume_change") == pytest.approx((0.0, 1.25e-6))
    assert log.series("temperature")[0] == pytest.approx(20.0, abs=1e-9)  # 68 °F = 20 °C
    assert log.series("temperature")[1] is None  # optional channel, empty cell
    assert log.rows[1].texts["cell_pressure"] == "350.5"  # the file's text kept
    assert log.headers["volume_change"] == "Volume mL"


def test_psi_channel():
    m = LoggerMapping(
        TimeColumn("Elapsed (min)", unit="min"),
        (Channel("cell_pressure", "Cell kPa", "psi", PRESSURE),),
    )
    log = parse_logger_rows(HEADER, [["0", "50", "", "", ""]], m)
    assert log.series("cell_pressure")[0] == pytest.approx(50 * 6894.757, rel=1e-6)


def test_iso_clock_times_count_from_the_first_row_or_time_zero():
    header = ["Stamp", "Cell kPa"]
    rows = [["2026-03-02T09:00:00", "350"], ["2026-03-02T09:15:30", "351"]]
    m = LoggerMapping(
        TimeColumn("Stamp", datetime_format="iso"),
        (Channel("cell_pressure", "Cell kPa", "kPa", PRESSURE),),
    )
    assert parse_logger_rows(header, rows, m).times_s == pytest.approx((0.0, 930.0))
    shifted = parse_logger_rows(header, rows, m, time_zero=datetime(2026, 3, 2, 8, 59, 0))
    assert shifted.times_s == pytest.approx((60.0, 990.0))
    assert shifted.rows[0].clock == datetime(2026, 3, 2, 9, 0, 0)


def test_clock_times_in_a_pattern():
    header = ["When", "Cell kPa"]
    rows = [["02/03/2026 23:59:00", "350"], ["03/03/2026 00:01:00", "350"]]
    m = LoggerMapping(
        TimeColumn("When", datetime_format="%d/%m/%Y %H:%M:%S"),
        (Channel("cell_pressure", "Cell kPa", "kPa", PRESSURE),),
    )
    assert parse_logger_rows(header, rows, m).times_s == pytest.approx((0.0, 120.0))


def test_every_bad_cell_is_named_by_row_and_column_and_nothing_is_returned():
    rows = [
        ["0", "350", "300", "0.0", ""],
        ["1", "abc", "300", "0,5", ""],  # row 3: not a number; decimal comma
        ["2", "", "300", "1.0", ""],  # row 4: empty required cell
        ["1.5", "350", "300", "1.2", ""],  # row 5: time goes back
        ["4", "350", "inf", "1.3", ""],  # row 6: not finite
    ]
    err = refused(HEADER, rows, mapping())
    locs = [p.loc for p in err.problems]
    assert locs == [
        ("file", "row", 3, "column", "Cell kPa"),
        ("file", "row", 3, "column", "Volume mL"),
        ("file", "row", 4, "column", "Cell kPa"),
        ("file", "row", 5, "column", "Elapsed (min)"),
        ("file", "row", 6, "column", "Back kPa"),
    ]
    kinds = [p.kind for p in err.problems]
    assert kinds == ["not_a_number", "not_a_number", "missing", "time_order", "not_a_number"]
    assert "decimal comma" in err.problems[1].reason
    assert cell_message(err.problems[0]) == (
        "row 3, column 'Cell kPa': is not a number (got 'abc'); accepted: a number in kPa, "
        "such as 101.3"
    )


def test_mapping_problems_come_first_and_name_the_setting():
    m = LoggerMapping(
        TimeColumn("Clock", unit="degC"),  # no such column; not a time unit
        (
            Channel("cell_pressure", "Cell kPa", "mL", PRESSURE),  # wrong dimension
            Channel("back_pressure", "Cell kPa", "kPa", PRESSURE),  # same column again
        ),
    )
    err = refused(HEADER, [["0", "1", "2", "3", "4"]], m)
    assert [p.loc for p in err.problems] == [
        ("mapping", "time", "unit"),
        ("mapping", "time", "column"),
        ("mapping", "cell_pressure", "unit"),
        ("mapping", "back_pressure", "column"),
    ]
    assert "'Elapsed (min)'" in err.problems[1].accepted


def test_time_needs_exactly_one_of_unit_and_format():
    err = refused(HEADER, [["0"] * 5], mapping(datetime_format="iso"))
    assert err.loc == ("mapping", "time")


def test_bad_clock_time_is_refused():
    header = ["Stamp", "Cell kPa"]
    m = LoggerMapping(
        TimeColumn("Stamp", datetime_format="iso"),
        (Channel("cell_pressure", "Cell kPa", "kPa", PRESSURE),),
    )
    err = refused(header, [["yesterday", "350"]], m)
    assert err.loc == ("file", "row", 2, "column", "Stamp")
    assert err.kind == "bad_datetime"


def test_an_empty_file_is_refused():
    err = refused(HEADER, [["", "", "", "", ""]], mapping())
    assert err.loc == ("file",)


def test_refusals_are_capped_with_a_count():
    rows = [[str(j), "x", "300", "1", ""] for j in range(MAX_PROBLEMS + 20)]
    err = refused(HEADER, rows, mapping())
    assert len(err.problems) == MAX_PROBLEMS + 1
    assert err.problems[-1].value == 20


def test_column_index_by_name_or_number():
    assert column_index(HEADER, " cell KPA ") == 1
    assert column_index(HEADER, "5") == 4
    assert column_index(HEADER, "6") is None
    assert column_index(HEADER, "") is None
