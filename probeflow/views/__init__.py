"""Operator views: the per-probe status table and the HTML report with plots.

Both read the SQLite store the service writes (see :mod:`probeflow.views.source`).
"""
