import sys
from pathlib import Path

# Test helpers (oracle, strategies) are imported as top-level modules.
sys.path.insert(0, str(Path(__file__).parent))

from hypothesis import settings  # noqa: E402

settings.register_profile("ci", max_examples=60, deadline=None, derandomize=True)
settings.register_profile("dev", max_examples=40, deadline=None)
settings.load_profile("ci")
