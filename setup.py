"""Install the source folders ``sim/``, ``sensors/`` and ``controllers/`` as
subpackages of the one import package ``rollrig``.

The folders stay at the top of the repository (where contributors expect
them); setuptools' ``package_dir`` maps each to ``rollrig.<folder>``, so only
``rollrig`` lands at the top level of site-packages and a user's own ``sim`` or
``controllers`` package cannot shadow ours. Subpackages are found, not listed,
so a new ``sim/<feature>/`` folder with an ``__init__.py`` is packaged with no
edit here. Everything else lives in ``pyproject.toml``.
"""

from setuptools import find_packages, setup

SUBPACKAGES = ("sim", "sensors", "controllers")

packages = ["rollrig"]
package_dir = {"rollrig": "rollrig"}
for top in SUBPACKAGES:
    for name in [top, *(f"{top}.{sub}" for sub in find_packages(top))]:
        packages.append(f"rollrig.{name}")
        package_dir[f"rollrig.{name}"] = name.replace(".", "/")

setup(packages=packages, package_dir=package_dir)
