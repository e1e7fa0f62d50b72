"""A report started early (its figures drawn while a run writes its exports)."""

from __future__ import annotations

import dataclasses

from bench import report


def test_a_started_report_is_the_report_written_at_once(summary, written_report, tmp_path):
    _, _, at_once = written_report
    draft = report.start_report(tmp_path, summary)
    path = report.write_report(tmp_path, summary, draft=draft)
    assert path.read_text(encoding="utf-8") == at_once
    assert sorted(p.name for p in (tmp_path / "plots").iterdir()) == sorted(
        p.name for p in (written_report[0] / "plots").iterdir()
    )


def test_a_draft_of_another_summary_is_not_used(summary, written_report, tmp_path):
    _, _, at_once = written_report
    other = dataclasses.replace(summary, run_id="another-run")
    draft = report.start_report(tmp_path / "other", other)
    path = report.write_report(tmp_path, summary, draft=draft)
    assert path.read_text(encoding="utf-8") == at_once
    assert not (tmp_path / "other").exists()  # the draft's figures were never written


def test_a_cancelled_draft_leaves_no_work_running(summary, tmp_path):
    draft = report.start_report(tmp_path, summary)
    started = draft.figs._started
    draft.cancel()
    assert started.done()
    assert not (tmp_path / "report.html").exists()
