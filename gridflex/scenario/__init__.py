"""Scenario files: the schema engine (``schema``), the run scenario's key tables and loader
(``tables``), its cross-table checks (``checks``) and where-prefixed errors (``context``)."""
