"""Rebuild the two small fonts the templates embed (run by hand; output is committed).

Source: the system DejaVu Sans Condensed regular and bold (Debian fonts-dejavu-core).
Kept: Latin, Latin-1, Latin Extended-A/B, Greek, general punctuation, super/subscripts,
currency, letterlike symbols, arrows, mathematical operators, box/geometric shapes; no
OpenType layout tables and no hinting, so WeasyPrint's per-document subsetting is quick.
Renamed to "ddscreen Sans" as the Bitstream Vera / DejaVu licence asks of modified fonts
(LICENSE-fonts.txt beside this file). Text outside these ranges (Hebrew, Arabic, CJK ...)
falls back to the system fonts through fontconfig.

    python templates/fonts/make_fonts.py
"""

from pathlib import Path

from fontTools import subset
from fontTools.ttLib import TTFont

SRC = Path("/usr/share/fonts/truetype/dejavu")
OUT = Path(__file__).resolve().parent
RANGES = [(0x20, 0x7E), (0xA0, 0x24F), (0x370, 0x3FF), (0x2000, 0x206F), (0x2070, 0x209F), (0x20A0, 0x20BF),
          (0x2100, 0x214F), (0x2190, 0x21FF), (0x2200, 0x22FF), (0x2500, 0x25FF)]
FAMILY = "ddscreen Sans"

for src, style, out in (("DejaVuSansCondensed.ttf", "Regular", "ddscreen-sans.ttf"),
                        ("DejaVuSansCondensed-Bold.ttf", "Bold", "ddscreen-sans-bold.ttf")):
    font = TTFont(SRC / src)
    opts = subset.Options()
    opts.layout_features = []
    opts.hinting = False
    opts.name_IDs = [0, 1, 2, 3, 4, 5, 6]
    opts.notdef_outline = True
    sub = subset.Subsetter(opts)
    sub.populate(unicodes=[u for a, b in RANGES for u in range(a, b + 1)])
    sub.subset(font)
    for table in ("GSUB", "GPOS", "GDEF"):
        if table in font:
            del font[table]
    name = font["name"]
    ps = f"ddscreenSans-{style}"
    for rec in list(name.names):
        if rec.nameID in (1, 16):
            rec.string = FAMILY
        elif rec.nameID == 4:
            rec.string = f"{FAMILY} {style}" if style != "Regular" else FAMILY
        elif rec.nameID == 6:
            rec.string = ps
        elif rec.nameID == 3:
            rec.string = f"{ps};derived from DejaVu Sans Condensed"
    font.save(OUT / out)
    print(out, (OUT / out).stat().st_size)
