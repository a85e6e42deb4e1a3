#!/bin/sh
# Regenerates DejaVuSans-subset.ttf, the font embedded for plot text (no system fonts needed).
# Source: DejaVu Sans 2.37 as shipped by the Debian package fonts-dejavu-core.
# Needs python3 with fontTools (pip install fonttools). Keeps ASCII, Latin-1, Greek, super-/subscripts,
# arrows and the few math signs axis labels use, which shrinks the file from ~760 kB to ~50 kB.
set -eu
cd "$(dirname "$0")"
python3 -m fontTools.subset /usr/share/fonts/truetype/dejavu/DejaVuSans.ttf \
  --unicodes="U+0020-007E,U+00A0-00FF,U+0391-03C9,U+2013-2014,U+2018-201D,U+2022,U+2026,U+2030,U+2032-2033,U+2070-209F,U+2190-2193,U+2212,U+2264-2265,U+221A,U+221E,U+2248,U+00B5" \
  --layout-features='kern' --output-file=DejaVuSans-subset.ttf
