"""Driver of test_behaviour.py's Ctrl-C-during-write test: writes two different results into one
folder in turn, as fast as it can, until SIGINT arrives; then prints "interrupted" and exits 0.

argv[1]: the folder, argv[2]: a file that receives the two results' files (pickled list of
{name: bytes}). Prints "ready" once the first write is done (the test then sends SIGINT)."""
import pickle
import sys

import trapwork

folder = sys.argv[1]
results = [trapwork.spectrum(trapwork.Scenario.default(), levels=n) for n in (4, 6)]
with open(sys.argv[2], "wb") as f:  # rendered before the loop: the loop only writes
    pickle.dump([r.files() for r in results], f)
try:
    results[0].write(folder)
    print("ready", flush=True)
    n = 0
    while True:
        n += 1
        results[n % 2].write(folder)
except KeyboardInterrupt:
    print("interrupted", flush=True)
    sys.exit(0)
