"""Print pip constraints pinning every dependency to its floor in pyproject.toml.

``python .ci/floors.py > floors.txt; pip install -c floors.txt -e ".[test]"`` installs the
lowest versions the project claims to support (the dependencies and the ``test`` extra), so CI
can check that the floors are honest. A requirement without a ``>=`` floor is an error.
"""

import re
import sys
import tomllib
from pathlib import Path

project = tomllib.loads((Path(__file__).parents[1] / "pyproject.toml").read_text())["project"]
requirements = project["dependencies"] + project["optional-dependencies"]["test"]
for requirement in requirements:
    match = re.fullmatch(
        r"([A-Za-z0-9_.-]+)(\[[^\]]*\])?\s*>=\s*([0-9][0-9A-Za-z.]*)(,.*)?", requirement
    )
    if match is None:
        sys.exit(f"floors.py: {requirement!r} has no '>=' floor")
    print(f"{match[1]}=={match[3]}")
