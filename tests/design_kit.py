"""Shared pieces of the design-run tests: reduced run settings, reading a report's verdict, file hashes."""

from __future__ import annotations

import hashlib
import html
import math
import re
from pathlib import Path

from upswing.design.pipeline import DesignOptions

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
DEMO_RIGS = ("acrobot", "pendubot", "cart-double", "arm-2dof")

# Reduced settings for tests. The tests check that a run writes every file and that its parts agree with each other
# and with outside references, not the statistics: 200 Monte Carlo rollouts and 300 region-of-attraction starts keep
# one run to a few seconds on a shared 2-core machine (the command's default is 1000 and 1500; the benchmark runs
# those). With 200 rollouts the success rate's 95 % Wilson interval is still narrow enough (about +-3 % near 97 %) for
# the verdict to mean something, and the command warns that so few are too few to decide on.
TEST_OPTIONS = DesignOptions(rollouts=200, roa_samples=300)


def file_hashes(folder: Path) -> dict[str, str]:
    """SHA-256 of every file in ``folder`` (hashlib: a general-purpose reference)."""
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())}


def report_verdict(page: str) -> dict[str, object]:
    """The verdict as the report shows it: the status class, the status words, the headline and the reasons."""
    block = re.search(r'<section class="verdict ([a-z-]+)" aria-label="verdict">(.*?)</section>', page, re.S)
    assert block is not None, "the report has no verdict block"
    words = re.search(r'<p class="status">[^ ]+ (.*?)</p>', block.group(2)).group(1)
    headline = re.search(r'<p class="headline">(.*?)</p>', block.group(2), re.S).group(1)
    reasons = re.findall(r"<li>(.*?)</li>", block.group(2), re.S)
    return {"status": block.group(1), "words": html.unescape(words), "headline": html.unescape(headline),
            "reasons": [html.unescape(r) for r in reasons], "html": block.group(2)}


def wilson(successes: int, trials: int) -> tuple[float, float]:
    """95 % Wilson score interval written out from the paper (Wilson, 1927, J. Am. Stat. Assoc. 22:209-212, the
    interval solved from |p_hat - p| = z sqrt(p (1 - p) / n)), z = 1.959963984540054 (the normal 97.5 % point,
    standard tables)."""
    z = 1.959963984540054
    n, p = float(trials), successes / trials
    centre = p + z * z / (2 * n)
    spread = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    return (centre - spread) / (1 + z * z / n), (centre + spread) / (1 + z * z / n)
