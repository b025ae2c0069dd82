"""Dispatch ``scripts/bench PART``: each part is a ``scripts/bench_<part>.py`` with ``main()``.

``all`` runs every part, then prints ``{"summary": [...]}``: every ratio or time a part
measured, its goal and whether it is met (parts that return their figures with a
``ratios`` or ``goals`` list).
"""

from __future__ import annotations

import importlib.util
import json
import sys
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
PARTS = ("calc", "certificate", "dashboard", "joblist", "firststart", "generator", "load")


def _run(part: str) -> Any:
    path = HERE / f"bench_{part}.py"
    if not path.is_file():
        print(f'{{"{part}": "not available"}}')
        return None
    spec = importlib.util.spec_from_file_location(f"bench_{part}", path)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module.main()


def main(argv: list[str]) -> int:
    wanted = argv or ["all"]
    parts = PARTS if wanted == ["all"] else wanted
    summary: list[dict[str, Any]] = []
    for part in parts:
        if part not in PARTS:
            print(f"scripts/bench: unknown part {part!r}; choose from {', '.join(PARTS)} or all",
                  file=sys.stderr)
            return 2
        result = _run(part)
        if isinstance(result, dict):
            summary += [{"part": part, **r} for r in (result.get("ratios", [])
                                                       + result.get("goals", []))]
    if wanted == ["all"] or len(parts) > 1:
        print(json.dumps({"summary": summary}))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
