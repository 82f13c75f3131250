"""Pins of the lowest versions pyproject.toml allows, for the low-floor CI job (.ci/lowest).

pyproject.toml is the one owner of the version floors; this script reads them from there.

    python .ci/lowest_pins.py pins     # print NAME==FLOOR for every dependency and extra but 'dev'
    python .ci/lowest_pins.py extras   # print the extras to install, comma-separated
    python .ci/lowest_pins.py check    # exit 1 unless every pinned package is installed at its floor

Every requirement must carry a floor (>=) and an upper bound (<); one without is an error.
"""

from __future__ import annotations

import re
import sys
import tomllib
from importlib import metadata
from pathlib import Path

PYPROJECT = Path(__file__).resolve().parent.parent / "pyproject.toml"
SKIPPED_EXTRAS = {"dev"}  # lint and type tools: pinned to one minor release already, not part of the suite
_REQUIREMENT = re.compile(r"^\s*([A-Za-z0-9][A-Za-z0-9._-]*)\s*(\[[^\]]*\])?\s*(.*)$")


def requirements() -> tuple[list[str], list[str]]:
    """The runtime and extra requirements the low-floor job installs, and those extras' names."""
    project = tomllib.loads(PYPROJECT.read_text(encoding="utf-8"))["project"]
    extras = [name for name in project.get("optional-dependencies", {}) if name not in SKIPPED_EXTRAS]
    reqs = list(project["dependencies"])
    for name in extras:
        reqs.extend(project["optional-dependencies"][name])
    return reqs, extras


def floors() -> dict[str, str]:
    """Package name -> lowest allowed version; refuses a requirement without a floor or an upper bound."""
    result: dict[str, str] = {}
    for req in requirements()[0]:
        match = _REQUIREMENT.match(req.split(";")[0])
        if not match:
            raise SystemExit(f"pyproject.toml: cannot parse requirement {req!r}")
        name, _, spec = match.groups()
        parts = [p.strip() for p in spec.split(",") if p.strip()]
        low = [p[2:].strip() for p in parts if p.startswith(">=")]
        high = [p for p in parts if p.startswith("<") and not p.startswith("<=")]
        if len(low) != 1 or not high:
            raise SystemExit(f"pyproject.toml: {req!r} needs one floor (>=) and an upper bound (<)")
        result[name] = low[0]
    return result


def main(argv: list[str]) -> int:
    """Command-line entry: ``pins``, ``extras`` or ``check``."""
    what = argv[1] if len(argv) > 1 else "pins"
    if what == "pins":
        for name, version in floors().items():
            print(f"{name}=={version}")
        return 0
    if what == "extras":
        print(",".join(requirements()[1]))
        return 0
    if what == "check":
        from packaging.version import Version  # installed with pytest, so present once the suite can run

        wrong = []
        for name, version in floors().items():
            try:
                installed = metadata.version(name)
            except metadata.PackageNotFoundError:
                installed = "missing"
            if installed == "missing" or Version(installed) != Version(version):
                wrong.append(f"{name}: floor {version}, installed {installed}")
        for line in wrong:
            print(f"lowest: {line}", file=sys.stderr)
        return 1 if wrong else 0
    print(f"unknown command {what!r} (pins, extras, check)", file=sys.stderr)
    return 2


if __name__ == "__main__":
    sys.exit(main(sys.argv))
