"""HTTP service for the acquisition chain (FastAPI app in :mod:`.app`; framework-free work in :mod:`.engine`).

Importing this package does not import FastAPI; :func:`detector.service.app.create_app` does.
"""
