"""Replace (or append) one "## …" section of benchmarks/README.md; shared by the scripts."""

from __future__ import annotations

from pathlib import Path

README = Path(__file__).resolve().parent / "README.md"


def write_section(section: str, lines: list[str]) -> None:
    """The block ``lines`` (its first line is ``section``) replaces that section in place."""
    text = README.read_text() if README.exists() else "# Benchmarks\n\n"
    block = "\n".join(lines) + "\n"
    if section in text:
        head, rest = text.split(section, 1)
        nxt = rest.find("\n## ")
        tail = rest[nxt + 1:] if nxt >= 0 else ""
        text = head + block + ("\n" + tail if tail else "")
    else:
        text = text.rstrip("\n") + "\n\n" + block
    README.write_text(text)
