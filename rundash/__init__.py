"""rundash: start-up and coast-down analysis of rotating machines.

Stores runs in SQLite (or any SQLAlchemy URL), order-tracks 1X/nX vectors against speed,
finds critical speeds and amplification factors, checks separation margins and vibration
limits against guidance profiles, and shows it all in a Dash dashboard.

Results are advisory: the OEM's data, the purchase specification, local codes and
licensed engineering practice govern.
"""

__version__ = "0.1.0"

#: The public Python API (rundash/api.py), loaded on first use so that ``import rundash``
#: stays light: ``rundash.open(path)``, ``rundash.import_file(...)``, ``rundash.process(...)``,
#: ``rundash.compare(...)``.
_API = ("open", "import_file", "process", "compare", "RunDatabase", "Run", "Findings",
        "Comparison")

CAUTION = (
    "Advisory only: these results come from automated processing of measured data. "
    "The OEM's data, the purchase specification, local codes and licensed engineering "
    "practice govern any decision about the machine."
)


def __getattr__(name: str):
    if name in _API:
        from rundash import api  # lazy: pandas and SQLAlchemy load only when used

        return getattr(api, name)
    raise AttributeError(f"module 'rundash' has no attribute {name!r}")


def __dir__():
    return sorted(list(globals()) + list(_API))
