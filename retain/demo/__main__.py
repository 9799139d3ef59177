"""``python -m retain.demo`` regenerates demo_data/ (the log and truth.json)."""

from __future__ import annotations

from retain.demo.log import write_log
from retain.demo.truth import write_truth


def _main() -> None:  # pragma: no cover - regenerates demo_data/
    from retain.paths import DEMO_DIR

    write_log(DEMO_DIR / "quillfern_events.csv.gz")
    write_truth(DEMO_DIR / "truth.json")


if __name__ == "__main__":  # pragma: no cover
    _main()
