# Sourced by the scripts of this folder: makes sure tests/reference/.venv holds exactly the pins
# of requirements.txt (pip is not called when they are installed) and sets $venv and $py.
# Needs $here (this folder).
venv="$here/.venv"
py="$venv/bin/python"

if [ ! -x "$py" ]; then
    "${PYTHON:-python3}" -m venv "$venv"
fi
if ! "$py" - "$here/requirements.txt" <<'PY'
import sys
from importlib.metadata import PackageNotFoundError, version

for line in open(sys.argv[1], encoding="utf-8"):
    line = line.split("#", 1)[0].strip()
    if not line:
        continue
    name, pinned = line.split("==")
    try:
        if version(name) != pinned:
            sys.exit(1)
    except PackageNotFoundError:
        sys.exit(1)
PY
then
    "$venv/bin/pip" install --quiet --disable-pip-version-check -r "$here/requirements.txt"
fi
