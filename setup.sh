#!/usr/bin/env bash
# Everything stepper needs on a fresh Debian machine: TeX Live from Debian's packages (for report.pdf;
# poppler-utils for the tests that read PDFs back) and the Python packages, stepper itself included.
set -euo pipefail
cd "$(dirname "$0")"
tex_packages="texlive-latex-base texlive-latex-recommended texlive-fonts-recommended lmodern poppler-utils"
if ! command -v pdflatex >/dev/null 2>&1 || ! command -v pdftotext >/dev/null 2>&1; then
  if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then
    echo "setup: installing TeX Live from Debian's packages (a few minutes)..." >&2
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends $tex_packages >/dev/null
  else
    echo "setup: pdflatex is missing and cannot be installed here; as root run: apt-get install $tex_packages" >&2
  fi
fi
python3 -m pip install --quiet --disable-pip-version-check --root-user-action=ignore -e '.[test]'
# Byte-compile stepper once: where PYTHONDONTWRITEBYTECODE is set, every run would otherwise compile it again
# (about 0.1 s of each run's start).
python3 -m compileall -q stepper
