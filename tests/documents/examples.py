"""An invented, valid proposal for the document tests to vary (the demo observatory's imager and band)."""

from __future__ import annotations

from typing import Any

GOOD: dict[str, Any] = {
    "id": "T-1",
    "semester": "2027A",
    "title": "A test proposal",
    "pi": {"name": "Test Person", "email": "person@example.org"},
    "requests": [
        {
            "label": "r1",
            "target": {"name": "somewhere", "ra": "05:35:17.3", "dec": "-05:23:28"},
            "instrument": "KESTREL",
            "setup": {"filter": "V"},
            "brightness": {"magnitude": 15.0, "band": "V"},
            "goal": {"snr": 50},
            "hours_requested": 2,
        }
    ],
}
