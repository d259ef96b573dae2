"""regionmap: regional snowpack-structure guidance for avalanche forecasters.

Model output is guidance for trained people. It never replaces field observations, the
local avalanche service's products, or professional judgement and standards.
"""

__version__ = "0.1.0"

CAUTION = (
    "regionmap output is model guidance for trained avalanche professionals. It is not a "
    "forecast and never a substitute for field observations, the local avalanche service's "
    "bulletins, or professional judgement and standards of practice."
)

#: shown by the report and the console when ``[region] invented_data = true`` (the demo)
INVENTED_DATA = (
    "Invented demo data: an invented mountain range at a fictitious location, with invented "
    "zones and weather. Nothing here describes a real place or real snow."
)
