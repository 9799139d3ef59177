"""Assemble bench/RESULTS.md from the per-area files in bench/results/.

Each benchmark script writes its own bench/results/<area>.md (figures, the exact
command, peak memory, growth slope); this joins them in the flow's order.
Run: python bench/collect_results.py
"""

from pathlib import Path

HERE = Path(__file__).resolve().parent
ORDER = ["prepare", "demo_generator", "curves", "cox", "parametric", "actuarial", "value", "site"]


def main() -> None:
    files = {p.stem: p for p in sorted((HERE / "results").glob("*.md"))}
    names = [n for n in ORDER if n in files] + sorted(set(files) - set(ORDER))
    parts = [
        "# Benchmark results\n",
        "Measured on the project's 2-core, 24 GB machine while other work shared it: "
        "compare the ratios in each table (both sides ran in one process run), not the "
        "absolute seconds. Each section names the command that produced it; rerun that "
        "command to refresh the section, then `python bench/collect_results.py`.\n",
    ]
    missing = [n for n in ORDER if n not in files]
    if missing:
        parts.append("Not yet measured: " + ", ".join(missing) + ".\n")
    for n in names:
        parts.append(files[n].read_text(encoding="utf-8").strip() + "\n")
    (HERE / "RESULTS.md").write_text("\n".join(parts), encoding="utf-8")


if __name__ == "__main__":
    main()
