"""Driver of the Ctrl-C tests (test_behaviour.py, test_tasks.py): a long run that the test interrupts with SIGINT.

argv[1]: the output folder the run would write into after computing (it must not appear);
argv[2]: "work" (default) or "sweep" with argv[3] a scenario with [sweep] (its points made long
by 400000 time steps each, two at a time), or "spectrum" (150 levels on 60000 grid points: the
sparse eigensolver, about a minute).
Prints "started" when the computation has begun (its first progress call), then either
"interrupted <time.monotonic()>" when KeyboardInterrupt arrives (and exits 0), or "finished"
(exit 3: the interruption did not work)."""
import sys
import time

import trapwork

# Far more time steps than the scenario needs: a minute or more of propagation, so that a SIGINT
# after a second arrives in the middle of it.
command = sys.argv[2] if len(sys.argv) > 2 else "work"
if command == "work":
    scenario = trapwork.Scenario.from_text(trapwork.Scenario.default().text + "\n[work]\nsteps = 400000\n", "long.toml")
elif command == "spectrum":
    scenario = trapwork.Scenario.default().with_values({"grid.points": 60000, "spectrum.levels": 150})
else:
    scenario = trapwork.Scenario.from_file(sys.argv[3]).with_values({"work.steps": 400000})
started = False


def progress(stage, fraction):
    global started
    if not started:
        started = True
        print("started", flush=True)


try:
    if command == "work":
        result = trapwork.work(scenario, progress=progress)
    elif command == "spectrum":
        result = trapwork.spectrum(scenario, progress=progress)
    else:
        result = trapwork.sweep(scenario, jobs=2, progress=progress)
    result.write(sys.argv[1])
except KeyboardInterrupt:
    print(f"interrupted {time.monotonic()!r}", flush=True)
    sys.exit(0)
print("finished", flush=True)
sys.exit(3)
