"""The floors section the benchmark scripts print: each floor PASS or FAIL with its detail."""


class Floors:
    """Floors checked by a benchmark run, in the order they were added."""

    def __init__(self):
        self.items: list[dict] = []

    def __len__(self) -> int:
        return len(self.items)

    def add(self, name: str, ok: bool, detail: str) -> None:
        self.items.append({"floor": name, "pass": bool(ok), "detail": detail})

    def report(self, *, note: str = "", width: int = 42) -> int:
        """Print the section (after a blank line) and return the number of failed floors."""
        print("\nfloors" + (f"  ({note})" if note else ""))
        for f in self.items:
            print(f"  {'PASS' if f['pass'] else 'FAIL'}  {f['floor']:<{width}s} {f['detail']}")
        return sum(not f["pass"] for f in self.items)
