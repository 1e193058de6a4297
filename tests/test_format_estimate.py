"""Numbers as a reader sees them: values rounded to their uncertainty (JCGM 100:2008, GUM 7.2.6)."""

import math

import pytest

from engine.summary import format_estimate, format_text, verdict


@pytest.mark.parametrize("value, uncertainty, text", [
    # GUM 7.2.6: the uncertainty to at most two significant digits, the value to the same decimal place.
    (0.08799, 0.027, "0.088 ± 0.027"),
    (0.1136, 0.011, "0.114 ± 0.011"),
    (2.0437, 0.0512, "2.044 ± 0.051"),
    # GUM 7.2.2 example (memory): m_S = 100.021 47 g with u_c = 0.35 mg.
    (100.021473, 0.000354, "100.02147 ± 0.00035"),
    # rounding the uncertainty can add a digit's place: 0.0996 -> 0.10
    (1.23456, 0.0996, "1.23 ± 0.10"),
    (12345.6, 270.0, "12350 ± 270"),
    (-0.0001, 0.05, "0.000 ± 0.050"),  # no "-0.000"
    (1.2e-7, 3.1e-9, "(1.200 ± 0.031)e-7"),
    (0.5, 0.0, "0.5 ± 0"),
])
def test_value_rounded_to_two_significant_digits_of_its_uncertainty(value, uncertainty, text):
    assert format_estimate(value, uncertainty) == text


def test_without_uncertainty_and_missing_values():
    assert format_estimate(None) == "n/a" and format_estimate(None, 0.1) == "n/a"
    assert format_estimate(math.nan, 0.1) == "n/a"
    assert format_estimate(0.123456) == "0.123" and format_estimate(0.0487, digits=2) == "0.049"
    assert format_estimate(2.5, math.nan) == "2.5"


def _summary(statistic="prediction_error"):
    return {"input": {"file": "x.csv", "variable": "x", "samples": 1000, "sampling_interval": 0.01,
                      "time_unit": "s"},
            "delay": {"samples": 12, "time": 0.12, "reason": "r"}, "embedding_dimension": {"value": 3, "reason": "r"},
            "theiler_window": {"samples": 20},
            "correlation_dimension": {"value": 2.0437, "uncertainty": 0.0512, "saturates": True},
            "capacity_dimension": {"value": None},
            "largest_lyapunov_exponent": {"per_time_unit": 0.8799, "uncertainty": 0.027},
            "surrogate_test": {"kind": "iaaft", "statistic": statistic, "p_value": 0.05, "rejects_linear_null": True},
            "warnings": [], "caution": "c"}


@pytest.mark.parametrize("statistic, words", [("prediction_error", "nonlinear prediction error"),
                                              ("time_asymmetry", "time asymmetry")])
def test_verdict_and_text_use_plain_words_and_rounded_numbers(statistic, words):
    s = _summary(statistic)
    s["verdict"] = text = verdict(s)
    assert words in text and statistic not in text
    assert "D2 = 2.044 ± 0.051" in text and "0.880 ± 0.027 per s" in text
    printed = format_text(s)
    assert "2.044 ± 0.051" in printed and "capacity dim.   n/a" in printed


def test_long_spans_in_seconds_are_also_read_in_days_hours_or_minutes():
    # Exact conversions: 1 week = 604,800 s, 1 h = 3,600 s, Julian year = 365.25 d (IAU; common practice).
    from engine.recording import duration_text

    assert duration_text(604800, "s") == "604,800 s (7 days)"
    assert duration_text(5 * 3600, "s") == "18,000 s (5 hours)"
    assert duration_text(300, "s") == "300 s (5 minutes)"
    assert duration_text(10 * 365.25 * 86400, "s") == "315,576,000 s (10 years)"
    assert duration_text(90, "s") == "90 s" and duration_text(1234.5, "s") == "1234 s (20.6 minutes)"


def test_durations_name_their_unit_in_the_plural_when_due():
    # English usage: "1 sample", "3 years"; symbols such as "s" take no plural (SI Brochure, 9th ed., 5.4.3).
    from engine.recording import duration_text

    assert duration_text(1, "sample") == "1 sample" and duration_text(4, "sample") == "4 samples"
    assert duration_text(3, "year") == "3 years" and duration_text(0.05, "s") == "0.05 s"
    summary = dict(_summary(), verdict="v")
    summary["input"]["time_unit"], summary["input"]["sampling_interval"] = "sample", 1.0
    summary["delay"] = {"samples": 4, "time": 4.0, "reason": "r"}
    text = format_text(summary)
    assert "delay           4 samples  -- r" in text and "4 sample\n" not in text
    summary["input"]["time_unit"] = "year"
    assert "4 samples = 4 years" in format_text(summary) and "every 1 year)" in format_text(summary)


def test_a_time_column_without_a_unit_reads_in_time_units():
    # A time column with no unit in its file: spans read "4.3 time units", rates "per time unit".
    from engine.loading import load_recording
    from engine.recording import UNSTATED, duration_text, time_unit

    rec = load_recording(b"time,strain\n" + b"".join(b"%.2f,%.5f\n" % (0.05 * i, (i * 0.37) % 1)
                                                       for i in range(600)), name="logger.csv")
    assert time_unit(rec) == UNSTATED
    assert duration_text(4.3, UNSTATED) == "4.3 time units" and duration_text(1, UNSTATED) == "1 time unit"
    summary = dict(_summary(), verdict="v")
    summary["input"]["time_unit"], summary["input"]["sampling_interval"] = UNSTATED, 0.05
    text = format_text(summary)
    assert "every 0.05 time units)" in text and "per time unit" in text and "unknown" not in text
    summary["largest_lyapunov_exponent"] = {"per_time_unit": None}
    assert "largest exp.    n/a\n" in format_text(summary)
