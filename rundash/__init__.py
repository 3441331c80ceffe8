"""rundash: start-up and coast-down analysis of rotating machines.

Stores runs in SQLite (or any SQLAlchemy URL), order-tracks 1X/nX vectors against speed,
finds critical speeds and amplification factors, checks separation margins and vibration
limits against guidance profiles, and shows it all in a Dash dashboard.

Results are advisory: the OEM's data, the purchase specification, local codes and
licensed engineering practice govern.
"""

__version__ = "0.1.0"

CAUTION = (
    "Advisory only: these results come from automated processing of measured data. "
    "The OEM's data, the purchase specification, local codes and licensed engineering "
    "practice govern any decision about the machine."
)
