"""Release regression: record reference estimates of a scenario suite, check a build against them.

    record_baseline([Path("suite/cold-store")], Path("baseline"), RunSettings(iterations=4))
    result = check_baseline([Path("suite/cold-store")], Path("baseline"))
    result.passed, write_report(result, out), write_junit(result, out / "junit.xml")

Format, checks and exit codes: docs/baseline.md.
"""

from .check import CHECKS, CheckResult, check_baseline
from .junit import write_junit
from .manifest import RunSettings
from .record import record_baseline
from .report import write_report

__all__ = ["CHECKS", "CheckResult", "RunSettings", "check_baseline", "record_baseline", "write_junit", "write_report"]
