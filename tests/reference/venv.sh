# Sourced by the scripts of this folder: makes sure tests/reference/.venv holds exactly the pins
# of requirements.txt (pip is not called when they are installed) and sets $venv and $py.
# Needs $here (this folder).
. "$here/../../scripts/lib.sh"
venv="$here/.venv"
ensure_pinned_venv "$venv" "$here/requirements.txt"
