"""Print pip constraints pinning every dependency to its floor in pyproject.toml.

``python .ci/floors.py > floors.txt; pip install -c floors.txt -e ".[test]"`` installs the
lowest versions the project claims to support (the dependencies and the ``test`` extra), so CI
can check that the floors are honest. A package named twice (the tests may need more than the
library does) gets the higher floor. A requirement without a ``>=`` floor is an error.
"""

import re
import sys
import tomllib
from pathlib import Path

project = tomllib.loads((Path(__file__).parents[1] / "pyproject.toml").read_text())["project"]
requirements = project["dependencies"] + project["optional-dependencies"]["test"]
REQUIREMENT = re.compile(r"([A-Za-z0-9_.-]+)(\[[^\]]*\])?\s*>=\s*([0-9][0-9.]*)(,.*)?")
floors: dict[str, tuple[int, ...]] = {}
for requirement in requirements:
    match = REQUIREMENT.fullmatch(requirement)
    if match is None:
        sys.exit(f"floors.py: {requirement!r} has no '>=' floor")
    name, floor = match[1].lower(), tuple(int(p) for p in match[3].split("."))
    floors[name] = max(floor, floors.get(name, floor))
for name, floor in floors.items():
    print(f"{name}=={'.'.join(map(str, floor))}")
