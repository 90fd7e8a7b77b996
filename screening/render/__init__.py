"""Rendering: what the sheets and ranking.pdf show, how it is fitted onto pages, and the PDF writing.

Rooms, lowest first (a module imports only those above it in this list):

- ``display``: number formats, display-text cleaning, the standard caution, the chart ``<img>`` (pure);
- ``filenames``: one safe, distinct file name per building id (pure);
- ``record``: :class:`~screening.render.record.SheetRecord`, the typed sheet record that
  ``outputs.sheet_records`` builds and the sheet view reads (pure);
- ``charts``: the small SVG charts of the sheets and the ranking (pure);
- ``paging``: fitting on pages: paper sizes, the sheet's shrink levels, text measured with the bundled
  font, the ranked table wrapped to its columns and cut into pages, which page each sheet of a chunk
  starts on (pure; reads the bundled font's metrics once);
- ``sheet_view``: a sheet record turned into the strings and charts the sheet template prints (pure);
- ``ranking_view``: the ranking report dict turned into the strings ranking.html.j2 prints (pure);
- ``savings_page``: the savings page of ranking.pdf and the portfolio page's hit-rate lines (pure);
- ``pdfsplit``: a rendered chunk's pages written as one-page PDF files (pydyf objects; file writes);
- ``pdf``: WeasyPrint and Jinja: the asset fetcher, the per-process renderer, the render workers,
  ``render_sheets`` and ``render_ranking`` (layer 3: writes files).
"""
