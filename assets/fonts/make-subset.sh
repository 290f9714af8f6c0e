#!/bin/sh
# Rebuild the embedded font subset used by src/plot for chart text.
#
# Source: DejaVu Sans from the Debian package fonts-dejavu-core
# (Bitstream Vera licence with public-domain DejaVu changes; see
# LICENSE-DejaVu.txt beside this script). The full font is ~760 KB; the
# subset keeps only what chart labels need and is ~50 KB.
#
# Characters kept:
#   U+0020-007E  ASCII
#   U+00A0-00FF  Latin-1 supplement (degree, micro, plus-minus, times, ...)
#   U+0391-03C9  basic Greek capitals and small letters, plus the symbol
#                variants theta/phi/pi/epsilon (U+03D1,03D5,03D6,03F5)
#   U+2070-209F  superscripts and subscripts
#   U+2190-21FF  arrows
#   math signs   minus, plus-minus, less/greater-or-equal, approx, not
#                equal, infinity, root, partial, nabla, sum, product,
#                integral, element-of, proportional, dot operator, ...
#   punctuation  thin space, en/em dash, ellipsis, prime, double prime
#
# Options:
#   --legacy-kern    keep the TrueType 'kern' table: the renderer reads
#                    pair kerning from it (ab_glyph), not from GPOS.
#   --no-hinting     drop TrueType hinting programs; the renderer
#                    rasterizes outlines unhinted, so they are never used.
#   --drop-tables+=MATH  the math layout table is not used either.
#
# Requires fonttools (pip install fonttools), which provides pyftsubset.
set -eu
here=$(cd "$(dirname "$0")" && pwd)
src=${1:-/usr/share/fonts/truetype/dejavu/DejaVuSans.ttf}
math="U+2202,U+2206-2209,U+220F,U+2211-2213,U+2215,U+2217-221A,U+221D,U+221E,U+2220,U+2223,U+2225,U+2227-222B,U+2234,U+223C,U+2243,U+2245,U+2248,U+2260-2265,U+226A,U+226B,U+2282-2287,U+22C5"
pyftsubset "$src" \
  --unicodes="U+0020-007E,U+00A0-00FF,U+0391-03A9,U+03B1-03C9,U+03D1,U+03D5,U+03D6,U+03F5,U+2070-209F,U+2190-21FF,$math,U+2009,U+2013,U+2014,U+2026,U+2032,U+2033" \
  --layout-features='kern' \
  --legacy-kern \
  --no-hinting \
  --drop-tables+=MATH \
  --output-file="$here/DejaVuSans-subset.ttf"
