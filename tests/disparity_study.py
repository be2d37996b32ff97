"""Demo-study fixtures for the export and disparity CLI tests: each gets its own ledger.

A second config file next to the shared demo's differs only in ``[review] ledger``; review
settings are not part of the snapshot id, so the fitted snapshot is reused, not refitted.
"""

from __future__ import annotations

import re
import uuid
from pathlib import Path


def config_with_ledger(demo_config: Path, **review: object) -> Path:
    """A copy of the demo config with a fresh ledger file (and optional [review] keys)."""
    name = f"disp-{uuid.uuid4().hex[:10]}"
    text = demo_config.read_text(encoding="utf-8")
    text, count = re.subn(r'(?m)^ledger = ".*"', f'ledger = "{name}.sqlite"', text)
    assert count == 1, "demo config layout changed: no [review] ledger line"
    for key, value in review.items():
        line = f"{key} = {value!r}".replace("'", '"')
        text, count = re.subn(rf"(?m)^{key} = .*$", line, text)
        assert count == 1, f"demo config has no [review] {key} line"
    out = demo_config.parent / f"{name}.toml"
    out.write_text(text, encoding="utf-8")
    return out
