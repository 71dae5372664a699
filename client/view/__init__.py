"""Looking at modes: the structure's geometry, the local page of `taprig view`, and the
animated pictures for reports.

geometry.py  Geometry: points, faces (triangles), lines; from a test's grid or an outline file
outline.py   the outline file format (ours), parsed with line-numbered errors
unfold.py    the flat multi-face layout: faces opened out like a book around shared edges
modes.py     ModeSet: what the page and pictures need of a modal model, and the one adapter
payload.py   the page's JSON, built by pure functions from (TestData, ModeSet, Geometry)
server.py    the loopback aiohttp server of the page (web/)
pictures.py  one animated GIF per mode and one PNG sheet (matplotlib + Pillow)
"""
