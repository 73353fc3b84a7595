"""Run by the ctest python_installed_import: the package installed by `cmake --install` into a
scratch prefix (argv[1]) is the one imported (PYTHONPATH names only its site folder), and it
computes."""
import pathlib
import sys

import trapwork

where = pathlib.Path(trapwork.__file__).resolve()
prefix = pathlib.Path(sys.argv[1]).resolve()
assert prefix in where.parents, f"trapwork imported from {where}, not from the prefix {prefix}"
result = trapwork.spectrum(trapwork.Scenario.default(), levels=3)
assert len(result.energies) == 3, result.energies
print(f"trapwork imported from {where}")
