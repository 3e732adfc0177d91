"""Text shared by the library and the CLI: the safety cautions printed with every motion, and plain tables."""

from __future__ import annotations

#: Printed by every command that writes a motion, and in every report.
SAFETY_CAUTIONS = """\
SAFETY: moving a real robot can hurt people.
  - Run the motion at reduced speed first (speed override), then at full speed.
  - Clear the workspace; keep people out of the robot's reach while it moves.
  - Keep an emergency stop within reach of the operator at all times.
  - Keep the robot's own safety limits and functions (joint, speed, force limits, safety zones) active.
  - Follow local regulations, the published robot-safety standards (for example ISO 10218) and the
    robot maker's manual; they take precedence over anything this tool computes."""


def format_table(headers: list[str], rows: list[list], align: str | None = None) -> str:
    """Plain-text table with a header rule; `align` is a string of 'l'/'r' per column."""
    cells = [[str(c) for c in r] for r in rows]
    widths = [max([len(h)] + [len(r[i]) for r in cells]) for i, h in enumerate(headers)]
    align = align or "l" * len(headers)

    def fmt(r):
        return "  ".join(c.ljust(w) if a == "l" else c.rjust(w) for c, w, a in zip(r, widths, align)).rstrip()

    lines = [fmt(headers), "  ".join("-" * w for w in widths)]
    lines += [fmt(r) for r in cells]
    return "\n".join(lines)
