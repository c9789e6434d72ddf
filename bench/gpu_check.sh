#!/bin/sh
# GPU check on the DiffWave-sized example (see bench/gpu_check.py). Installs nothing; run from the
# repository root with the project and torch installed. Extra arguments go to the script.
exec "${PYTHON:-python}" "$(dirname "$0")/gpu_check.py" "$@"
