# Sourced by scripts/serve and scripts/test: create .venv and install the project once,
# again only when pyproject.toml changes.
ensure_venv() {
  local extras="$1"
  local py="${PYTHON:-python3}"
  if [ ! -x .venv/bin/python ]; then
    "$py" -m venv .venv
  fi
  local stamp=".venv/.shopapp-installed${extras:+-$extras}"
  if [ ! -f "$stamp" ] || [ pyproject.toml -nt "$stamp" ]; then
    .venv/bin/python -m pip install --quiet --disable-pip-version-check --upgrade pip >/dev/null
    .venv/bin/python -m pip install --quiet --disable-pip-version-check -e ".${extras:+[$extras]}"
    touch "$stamp"
  fi
}
