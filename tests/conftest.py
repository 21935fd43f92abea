"""Suite-wide hooks: the outside references' own findings go to the terminal summary."""
from __future__ import annotations


def pytest_terminal_summary(terminalreporter, exitstatus, config):
    try:
        from reference.findings import FINDINGS
    except ImportError:  # the reference tests were not collected
        return
    if not FINDINGS:
        return
    terminalreporter.section("findings about the outside references (informational)")
    for topic in sorted(FINDINGS):
        lines = sorted(FINDINGS[topic])
        terminalreporter.write_line(f"[{topic}] {len(lines)}:")
        for line in lines:
            terminalreporter.write_line(f"  {line}")
