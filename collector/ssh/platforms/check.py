"""Check a platform definition against output captured from a real session.

    python -m lightwarden.collector.ssh.platforms.check DEFINITION.yaml TRANSCRIPT.txt

DEFINITION is a path or a shipped name ("qmos"). TRANSCRIPT is a terminal session copied
to a file: each command line starts with the device's prompt, followed by that command's
output. Prints every reading found and every problem. Exit codes: 0 all output understood,
1 problems found, 2 the definition or transcript cannot be used.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass
from pathlib import Path

from lightwarden.collector.readings import ReadingStatus
from lightwarden.collector.ssh.cli_parse import ParseResult, parse_outputs, split_transcript
from lightwarden.collector.ssh.platforms.platform import Platform, PlatformError, load_platform

EXIT_CLEAN, EXIT_PROBLEMS, EXIT_UNUSABLE = 0, 1, 2


@dataclass(slots=True)
class CheckReport:
    platform: Platform
    outputs: dict[str, str]
    result: ParseResult

    @property
    def clean(self) -> bool:
        return not self.result.problems

    def render(self) -> str:
        lines = [f"platform {self.platform.name}: commands found: "
                 + (", ".join(repr(c) for c in self.outputs) or "none")]
        batch = self.result.batch
        for optic, lane, q, value, status, note in batch.rows():
            shown = (f"{value:.3f} {q.unit}" if status is ReadingStatus.OK
                     else f"{status.name.lower()} ({note})")
            lines.append(f"  {optic.port:<10} lane {lane}  {q.label:<12} {shown}")
        for optic in batch.optics:
            if optic.thresholds or optic.pmd:
                lines.append(f"  {optic.port:<10} pmd {optic.pmd or '-'}  "
                             f"thresholds for {len(optic.thresholds)} quantities")
        if self.result.problems:
            lines.append(f"{len(self.result.problems)} problem(s):")
            lines += [f"  {p}" for p in self.result.problems]
        else:
            lines.append(f"ok: {len(batch)} readings from {len(batch.optics)} modules")
        return "\n".join(lines)


def check_transcript(platform: Platform, transcript: str, device: str = "captured") -> CheckReport:
    """Parse a captured session with ``platform``; the report says what was understood."""
    outputs = split_transcript(platform, transcript)
    return CheckReport(platform, outputs, parse_outputs(device, platform, outputs, 0.0))


def main(argv: list[str] | None = None) -> int:
    args = sys.argv[1:] if argv is None else argv
    if len(args) != 2:
        print(__doc__.strip(), file=sys.stderr)
        return EXIT_UNUSABLE
    try:
        platform = load_platform(args[0])
    except PlatformError as exc:
        print(f"definition: {exc}", file=sys.stderr)
        return EXIT_UNUSABLE
    try:
        transcript = Path(args[1]).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        print(f"transcript {args[1]}: cannot read ({exc.__class__.__name__})", file=sys.stderr)
        return EXIT_UNUSABLE
    report = check_transcript(platform, transcript)
    print(report.render())
    return EXIT_CLEAN if report.clean else EXIT_PROBLEMS


if __name__ == "__main__":
    raise SystemExit(main())
