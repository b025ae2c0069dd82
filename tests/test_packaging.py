"""The wheel carries everything a shop needs to run without the checkout.

Before: package data pointed at a ``migrations`` folder outside the package, so
``pip install .`` then ``shopapp db upgrade`` failed. The wheel is built here and
unpacked into a folder outside the checkout; its own migrations then build a
database and its templates are all there.
"""

from __future__ import annotations

import subprocess
import sys
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_the_wheel_ships_migrations_and_templates_and_upgrades_a_database(tmp_path: Path) -> None:
    out = tmp_path / "dist"
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation",
                    "-q", "-w", str(out), str(ROOT)], check=True, capture_output=True,
                   timeout=300)
    wheel = next(out.glob("shopapp-*.whl"))
    names = zipfile.ZipFile(wheel).namelist()
    assert "shopapp/migrations/env.py" in names
    versions = [n for n in names if n.startswith("shopapp/migrations/versions/")]
    in_repo = sorted(p.name for p in (ROOT / "shopapp/migrations/versions").glob("*.py"))
    assert sorted(Path(v).name for v in versions) == in_repo
    templates = {n for n in names if n.endswith(".html")}
    in_repo_t = {str(p.relative_to(ROOT)) for p in (ROOT / "shopapp").rglob("*.html")}
    assert templates == in_repo_t

    site = tmp_path / "site"
    zipfile.ZipFile(wheel).extractall(site)
    db = tmp_path / "shop.sqlite3"
    code = (
        "import sys; sys.path.insert(0, sys.argv[1]);"
        "import shopapp; from shopapp.core import schema;"
        "assert shopapp.__file__.startswith(sys.argv[1]), shopapp.__file__;"
        "schema.upgrade(sys.argv[2]);"
        "from shopapp.core.database import make_engine;"
        "print(schema.current_revision(make_engine(sys.argv[2])))"
    )
    done = subprocess.run([sys.executable, "-I", "-c", code, str(site), f"sqlite:///{db}"],
                          cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == sorted(in_repo)[-1].split("_")[1]
