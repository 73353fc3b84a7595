"""Driver of test_interrupt.py: a long work run that the test interrupts with SIGINT.

argv[1]: the output folder the run would write into after computing (it must not appear).
Prints "started" when the computation has begun (its first progress call), then either
"interrupted <time.monotonic()>" when KeyboardInterrupt arrives (and exits 0), or "finished"
(exit 3: the interruption did not work)."""
import sys
import time

import trapwork

# The built-in scenario with far more time steps than it needs: about a minute of propagation,
# so that a SIGINT after a second arrives in the middle of it.
scenario = trapwork.Scenario.from_text(trapwork.Scenario.default().text + "\n[work]\nsteps = 400000\n", "long.toml")
started = False


def progress(stage, fraction):
    global started
    if not started:
        started = True
        print("started", flush=True)


try:
    result = trapwork.work(scenario, progress=progress)
    result.write(sys.argv[1])
except KeyboardInterrupt:
    print(f"interrupted {time.monotonic()!r}", flush=True)
    sys.exit(0)
print("finished", flush=True)
sys.exit(3)
