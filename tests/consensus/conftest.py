import sys
from pathlib import Path

# The synthetic-data helper lives beside the tests.
sys.path.insert(0, str(Path(__file__).parent))
