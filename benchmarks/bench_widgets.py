"""In-process timing of the dashboard's recompute: set a widget value 50 times, print the mean.

Target (issue 4): a change of input updates the decision within 100 ms; server-side recompute <= 30 ms.
"""

from __future__ import annotations

import statistics
import time

from widgets.app import ContrastAidApp


def main() -> None:
    t0 = time.perf_counter()
    app = ContrastAidApp(query="exam=ct-abdomen-pelvis&creatinine=1.4&unit=mg/dL&age=60&sex=male&weight=80")
    print(f"build app: {(time.perf_counter() - t0) * 1000:.0f} ms")
    for label, setter in (
        ("creatinine typed (mg/dL)", lambda i: setattr(app.patient.creatinine_value, "value", f"{0.8 + i * 0.05:.2f}")),
        ("checkbox toggled (metformin)", lambda i: setattr(app.patient.takes_metformin, "value", i % 2 == 0)),
        ("exam switched", lambda i: setattr(app.exam.select, "value",
                                            ["ct-abdomen-pelvis", "fluoro-esophagram"][i % 2])),
    ):
        times = []
        for i in range(50):
            t = time.perf_counter()
            setter(i)
            times.append((time.perf_counter() - t) * 1000)
        print(f"{label:32s} mean {statistics.mean(times):6.1f} ms  median {statistics.median(times):6.1f} ms  "
              f"max {max(times):6.1f} ms  (n=50)")
    times = []
    for _ in range(50):
        t = time.perf_counter()
        app.recompute()
        times.append((time.perf_counter() - t) * 1000)
    print(f"{'app.recompute() unchanged input':32s} mean {statistics.mean(times):6.1f} ms  (n=50)")


if __name__ == "__main__":
    main()
