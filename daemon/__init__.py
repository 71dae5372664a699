"""taprig daemon: acquisition, checks, spectra, session, store and service."""
