"""The design run's report: verdict first, then how the run went, the rig, its modes, the balance design, the
swing-up, the verification, the margins, and the hazards with their standards and the cautions.

:func:`design_document` builds the :class:`~upswing.report.html.Document` from a
:class:`~upswing.design.pipeline.DesignRun`; :func:`build_design_report` renders it to one self-contained HTML
string. The verdict shown is the run's own (``run.verdict``), the same object ``summary.json`` is written from.
"""

from __future__ import annotations

from datetime import datetime

import numpy as np

from upswing.design.pipeline import DesignRun
from upswing.report.assemble import facts, modes_section, rig_section
from upswing.report.html import Document, Paragraph, Section, Table, render
from upswing.report.sections_balance import balance_section
from upswing.report.sections_swingup import swingup_section
from upswing.report.sections_verification import margins_section, verification_section
from upswing.synthesis.balance import design_balance

KIND = "upswing design run"
STATUS_WORDS = {"done": "done", "failed": "FAILED", "skipped": "skipped", "missing": "missing"}


def run_section(run: DesignRun, report_s: float | None = None) -> Section:
    """How the run went: every stage with its status, wall time and message, and the settings used."""
    rows = [(s.name, STATUS_WORDS.get(s.status, s.status), f"{s.seconds:.2f}", s.message or "-")
            for s in run.stages]
    if report_s is not None:
        rows.append(("report (this page and its figures)", "done", f"{report_s:.2f}", "-"))
    o = run.options
    text = (f"Settings: {o.rollouts} Monte Carlo rollouts of {o.horizon:g} s, seed {o.seed}, {o.roa_samples} "
            f"region-of-attraction starts in the first round, required success rate {run.required_success:.1%}. "
            f"The stages took {run.total_s:.1f} s in all.")
    return Section("How this run went", (
        Paragraph(text),
        Table(("stage", "status", "wall time [s]", "note"), tuple(rows),
              "Stages in the order they ran. A failed stage's message says what went wrong and what to try; "
              "stages that need it are skipped, and the verdict names both."),
    ), key="run")


def _message(run: DesignRun, stage: str) -> str:
    record = run.stage(stage)
    words = {"failed": "failed", "skipped": "was skipped", "missing": "is missing"}.get(record.status, record.status)
    return "" if record.done else f"The {stage} stage {words}: {record.message}"


def design_document(run: DesignRun, *, made: datetime | None = None, report_s: float | None = None) -> Document:
    """The report of ``run`` as a :class:`~upswing.report.html.Document` (render it with
    :func:`upswing.report.html.render`).

    Parameters
    ----------
    made : datetime, optional
        Time stamp shown under the title (default: now).
    report_s : float, optional
        Wall time of building the report so far [s], shown in the stage table when given.
    """
    made = made or datetime.now()
    rig = run.rig
    handover = ("the verified level set x'Px = rho, inside which the swing-up hands over to the balance loop"
                if run.swingup is not None and not run.swingup.unverified else
                "the verified level set x'Px = rho: the hand-over boundary a swing-up must reach")
    sections = [run_section(run, report_s), rig_section(rig)]
    if run.modes is not None:
        sections.append(modes_section(rig, run.modes))
    else:
        sections.append(Section("Equilibria and modes", (Paragraph(_message(run, "modes")),), key="modes"))
    sections.append(balance_section(rig, run.balance, run.responses, failure=_message(run, "balance")))
    sections.append(swingup_section(rig, run.swingup, _message(run, "swing-up")))
    check = None if run.swingup is None else run.swingup.verification
    boundary = None
    if check is not None and run.verification is not None:
        # The hand-over rule's cost-to-go: the delay-free discrete design (upswing.synthesis.swingup.tracking).
        boundary = (np.asarray(design_balance(rig, delay_samples=0).P_discrete)[:rig.n_states, :rig.n_states],
                    check.rho_in)
    sections.append(verification_section(rig, run.verification, run.required_success,
                                         handover_label=handover, failure=_message(run, "verification"),
                                         handover=boundary))
    sections.append(margins_section(run.margins, run.budgets))
    return Document(title=rig.name, kind=KIND, facts=facts(rig, made), verdict=run.verdict,
                    sections=tuple(sections), hazards=run.hazards)


def build_design_report(run: DesignRun, *, made: datetime | None = None, report_s: float | None = None) -> str:
    """The design run's report as one self-contained HTML string."""
    return render(design_document(run, made=made, report_s=report_s))
