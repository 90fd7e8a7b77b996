"""A rendered chunk's pages written as one-page PDF files, straight from WeasyPrint's pydyf objects.

``write_split(doc, picks)`` writes each picked page as its own file (:class:`PageSplitter`), falling
back to WeasyPrint's public API when pydyf's objects look different; ``atomic_write`` puts every
output file in place. Measurements behind it: docs/performance.md "Rendering: strategy and measurements".
"""

from __future__ import annotations

import logging
import os
import re
import tempfile
import zlib
from collections.abc import Iterable
from pathlib import Path

from .. import __version__

LOGGER = logging.getLogger(__name__)


def atomic_write(data: bytes, target: Path) -> None:
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=".pdf", dir=target.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes the file private; outputs are for readers
        os.replace(tmp, target)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


_REF = re.compile(rb"(\d+) 0 R\b")
_NAME = re.compile(rb"/([^\s/\[\]()<>{}%]+)")


def _ref_number(ref: bytes) -> int:
    """The object number of an indirect reference such as ``b"12 0 R"``."""
    m = _REF.match(ref)
    if m is None:
        raise ValueError(f"not an indirect reference: {ref[:40]!r}")
    return int(m.group(1))


_PRUNED = ("XObject", "Pattern", "Shading", "ExtGState")  # per-name resources a page may not use


class PageSplitter:
    """A ``write_pdf(finisher=...)`` that writes chosen pages of the chunk as one-page files.

    WeasyPrint hands the finisher the whole document as pydyf objects before it serializes
    them. Each picked page is written as a small PDF of its own: the page, its content, the
    resources its content names and every object those reach (fonts, chart forms), each
    object serialized once per chunk and copied as bytes under its original number; a
    cross-reference stream lists the objects present (``/Index`` ranges), so no reference
    needs rewriting. Each file gets its own catalog, page tree and ``/Title``. The chunk
    itself is never serialized (``pdf.write`` is replaced by a no-op), which with the split
    done here instead of by parsing the chunk again with pypdf saves ~10 ms per sheet
    (DEVELOPERS.md "Rendering").

    WeasyPrint shares one resource dictionary between all pages of a document; without the
    pruning each file would copy the chart forms and patterns of every sheet in the chunk.
    """

    def __init__(self, picks: Iterable[tuple[int, Path, str]]):
        self.picks = list(picks)

    def __call__(self, document, pdf) -> None:
        import pydyf

        objs = pdf.objects
        n_objs = len(objs)
        # the page tree's kids as object numbers, whether pydyf keeps them as (n, 0, "R") triples or as references
        page_numbers = [int(m) for m in _REF.findall(pydyf.Array(pdf.pages["Kids"]).data)]
        skip = {pdf.pages.number, pdf.catalog.number, *page_numbers}
        cache: dict[int, tuple[bytes, list[int]]] = {}

        raws: dict[int, bytes] = {}

        def body(n: int) -> tuple[bytes, list[int]]:
            """Serialized object ``n`` and the object numbers its dictionary refers to."""
            hit = cache.get(n)
            if hit is None:
                obj = objs[n]
                if isinstance(obj, pydyf.Stream):
                    head = pydyf.Dictionary(obj.extra).data
                    data = _stream_bytes(obj, raws.pop(n, None))
                else:
                    head = data = obj.data
                hit = cache[n] = (data, [int(m) for m in _REF.findall(head)])
            return hit

        for index, target, title in self.picks:
            page = objs[page_numbers[index]]
            res = objs[_ref_number(page["Resources"])]
            content = objs[_ref_number(page["Contents"])]
            raws[content.number] = raw = _raw_stream(content)  # to read the resource names it uses
            used = {m.decode("latin-1") for m in _NAME.findall(raw)}
            new_res = pydyf.Dictionary(
                {
                    k: (
                        pydyf.Dictionary({name: v2 for name, v2 in v.items() if name in used})
                        if k in _PRUNED and isinstance(v, dict)
                        else v
                    )
                    for k, v in res.items()
                }
            )
            info_n, res_n, xref_n = n_objs, n_objs + 1, n_objs + 2
            new_page = pydyf.Dictionary(page)
            new_page["Resources"] = f"{res_n} 0 R".encode()
            info = pydyf.Dictionary(
                {
                    "Title": pydyf.String(title),
                    "Creator": pydyf.String(f"ddscreen {__version__}"),
                    "Producer": pydyf.String(f"ddscreen via WeasyPrint {_weasyprint_version()}"),
                }
            )
            catalog = pydyf.Dictionary({k: v for k, v in pdf.catalog.items() if k in ("Type", "Pages", "Lang")})
            tree = pydyf.Dictionary({"Type": "/Pages", "Kids": pydyf.Array([page.number, 0, "R"]), "Count": 1})
            own = {
                pdf.pages.number: tree.data,
                pdf.catalog.number: catalog.data,
                page.number: new_page.data,
                info_n: info.data,
                res_n: new_res.data,
            }
            # every object reachable from the page's own dictionaries
            todo = [int(m) for m in _REF.findall(new_page.data + new_res.data)]
            seen: dict[int, bytes] = {}
            while todo:
                n = todo.pop()
                if n in seen or n in skip or n in own or not 0 < n < n_objs or objs[n].free == "f":
                    continue
                data, refs = body(n)
                seen[n] = data
                todo.extend(refs)
            seen.update(own)
            atomic_write(_pdf_file(seen, root_n=pdf.catalog.number, info_n=info_n, xref_n=xref_n), target)
        pdf.write = lambda *args, **kwargs: None  # the chunk itself is not needed


def _pdf_file(objects: dict[int, bytes], *, root_n: int, info_n: int, xref_n: int) -> bytes:
    """A PDF 1.7 file of serialized objects under their own numbers, closed by a
    cross-reference stream (object ``xref_n``) whose ``/Index`` ranges list the numbers present:
    type-1 entries (byte offset), object 0 the head of the free list."""
    import pydyf

    out = [b"%PDF-1.7\n%\xf0\x9f\x96\xa4\n"]
    pos = len(out[0])
    offsets: dict[int, int] = {}
    for n in sorted(objects):
        chunk = b"%d 0 obj\n%s\nendobj\n" % (n, objects[n])
        offsets[n] = pos
        out.append(chunk)
        pos += len(chunk)
    offsets[xref_n] = pos
    index_ranges: list[int] = []
    rows = [b"\x00\x00\x00\x00\x00\xff\xff"]
    start: int | None = None
    prev = 0
    for n in [0, *sorted(offsets)]:
        if start is None:
            start = prev = n
        elif n == prev + 1:
            prev = n
        else:
            index_ranges += [start, prev - start + 1]
            start = prev = n
        if n:
            rows.append(b"\x01" + offsets[n].to_bytes(4, "big") + b"\x00\x00")
    assert start is not None  # the list starts with object 0, so the loop set it
    index_ranges += [start, prev - start + 1]
    xref = pydyf.Stream(
        [b"".join(rows)],
        pydyf.Dictionary(
            {
                "Type": "/XRef",
                "Size": xref_n + 1,
                "Index": pydyf.Array(index_ranges),
                "W": pydyf.Array([1, 4, 2]),
                "Root": f"{root_n} 0 R".encode(),
                "Info": f"{info_n} 0 R".encode(),
            }
        ),
        compress=True,
    )
    out.append(b"%d 0 obj\n%s\nendobj\nstartxref\n%d\n%%%%EOF\n" % (xref_n, xref.data, pos))
    return b"".join(out)


_ZLIB_LEVEL = 6  # pydyf uses 9: measured 2.9 -> 0.9 ms per sheet, files ~1% larger


def _raw_stream(obj) -> bytes:
    """The uncompressed bytes of a pydyf stream."""
    import pydyf

    data = pydyf.Stream(obj.stream).data  # b"<</Length n>>\nstream\n" + bytes + b"\nendstream"
    return data[data.index(b"\nstream\n") + 8 : -10]


def _stream_bytes(obj, raw: bytes | None = None) -> bytes:
    """A pydyf stream object serialized as pydyf does, but deflated at level ``_ZLIB_LEVEL``."""
    import pydyf

    if not obj.compress or "Filter" in obj.extra:
        return obj.data
    body = zlib.compress(_raw_stream(obj) if raw is None else raw, _ZLIB_LEVEL)
    extra = pydyf.Dictionary({**obj.extra, "Filter": "/FlateDecode", "Length": len(body)})
    return b"\n".join((extra.data, b"stream", body, b"endstream"))


def _weasyprint_version() -> str:
    import weasyprint

    return weasyprint.__version__


def write_split(doc, picks: Iterable[tuple[int, Path, str]]) -> None:
    """Write chosen pages of a rendered WeasyPrint document as one-page files (see PageSplitter).

    The splitter reads pydyf's objects, which are not a public API: if a WeasyPrint or pydyf
    release changes them, the pages are written through the public ``Document.copy`` and
    ``write_pdf`` instead (slower: fonts are subset once per page), with a warning in the log.
    """
    picks = list(picks)
    try:
        doc.write_pdf(finisher=PageSplitter(picks))
    except (AttributeError, KeyError, TypeError, IndexError, ValueError) as exc:
        LOGGER.warning(
            "fast page split unavailable with this WeasyPrint/pydyf (%s: %s); writing pages one by one",
            type(exc).__name__,
            exc,
        )
        _write_pages_public(doc, picks)


def _write_pages_public(doc, picks: Iterable[tuple[int, Path, str]]) -> None:
    """One ``write_pdf`` per picked page through WeasyPrint's public API, each with its /Title."""
    for index, target, title in picks:
        one = doc.copy([doc.pages[index]])
        one.metadata.title = title
        one.metadata.generator = f"ddscreen {__version__}"
        atomic_write(one.write_pdf(), target)
