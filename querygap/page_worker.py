"""A helper process for :func:`querygap.pagetext.in_processes`.

``python -m querygap.page_worker IN OUT`` reads ``(func, items)`` pickled in file IN and writes the
pickled ``[func(x) for x in items]`` to file OUT. querygap runs it on files it has just written
in a private temporary folder; it reads nothing else.
"""

from __future__ import annotations

import pickle
import sys
from pathlib import Path


def main(source: Path, target: Path) -> None:
    func, items = pickle.loads(source.read_bytes())
    target.write_bytes(pickle.dumps([func(x) for x in items], pickle.HIGHEST_PROTOCOL))


if __name__ == "__main__":
    main(Path(sys.argv[1]), Path(sys.argv[2]))
