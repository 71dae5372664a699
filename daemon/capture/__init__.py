"""The capture stages, in the order data passes through them.

    link.py     SerialLink: the reader thread owns the port; bytes and link changes on a queue
    acquire.py  Acquirer: volts → SI, ring buffer, trigger ──► HitRecord
    hits.py     check_hit: rejections and warnings ──► HitVerdict
    spectra.py  windows, rfft, running Gff/Gxx/Gfx ──► H1, H2, γ²
    session.py  Session: cursor on the grid, accept policy ──► PointSet when averages are reached

Each stage is fed the previous stage's output and imports nothing further down the daemon
(no store, no service); the rig (daemon/rig.py) drives them on its processing thread.
"""
