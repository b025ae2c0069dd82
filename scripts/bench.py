"""Dispatch ``scripts/bench PART``: each part is a ``scripts/bench_<part>.py`` with ``main()``."""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
PARTS = ("calc", "certificate", "dashboard", "load")


def _run(part: str) -> None:
    path = HERE / f"bench_{part}.py"
    if not path.is_file():
        print(f'{{"{part}": "not available"}}')
        return
    spec = importlib.util.spec_from_file_location(f"bench_{part}", path)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    module.main()


def main(argv: list[str]) -> int:
    wanted = argv or ["all"]
    parts = PARTS if wanted == ["all"] else wanted
    for part in parts:
        if part not in PARTS:
            print(f"scripts/bench: unknown part {part!r}; choose from {', '.join(PARTS)} or all",
                  file=sys.stderr)
            return 2
        _run(part)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
