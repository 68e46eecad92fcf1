"""Writing a benchmark's table into docs/validation.md between its markers (``--no-publish`` on the command
line: printed only)."""
import re
import sys
from pathlib import Path

VALIDATION = Path(__file__).resolve().parents[2] / "docs" / "validation.md"


def write_section(name: str, body: str) -> None:
    """Replace the text between <!-- NAME:start --> and <!-- NAME:end --> with ``body``."""
    start, end = f"<!-- {name}:start -->", f"<!-- {name}:end -->"
    text = VALIDATION.read_text()
    if start not in text:
        raise SystemExit(f"docs/validation.md has no {start} marker")
    new = re.sub(re.escape(start) + ".*?" + re.escape(end), lambda _: start + "\n" + body + "\n" + end, text,
                 flags=re.S)
    VALIDATION.write_text(new)


def publish(name: str, lines: list[str]) -> None:
    """Print a benchmark's table and write it into docs/validation.md."""
    body = "\n".join(lines)
    print(body)
    if "--no-publish" not in sys.argv:
        write_section(name, body)
