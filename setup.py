"""Package layout for setuptools; the project metadata is in pyproject.toml.

templates/, static/ and migrations/ are top-level folders of the repository (that is where
developers edit them), but an installed wheel must carry them. setuptools' package-dir mapping
ships each one inside the ``server`` package (``server/templates`` and so on in site-packages);
``server.package_files`` finds them in either layout at run time.
"""

from setuptools import find_namespace_packages, find_packages, setup

# Package inside the wheel -> folder in the repository (the same three as server.package_files.BUNDLED_FOLDERS;
# tests/packaging/test_wheel.py checks the installed wheel has each).
BUNDLED = {"server.templates": "templates", "server.static": "static", "server.migrations": "migrations"}
# Files each bundled folder ships besides Python modules (sub-folders included).
BUNDLED_FILES = {"server.templates": ["*.html"], "server.static": ["*"], "server.migrations": ["*.mako"]}


def _with_subfolders(package: str, folder: str) -> list[str]:
    # Every sub-folder is listed as a (namespace) package of its own, as setuptools asks,
    # so that pages/, partials/, vendor/..., versions/ travel with their files.
    subs = find_namespace_packages(where=folder, exclude=["*__pycache__*"])
    return [package] + [f"{package}.{sub}" for sub in subs]


packages = find_packages(include=["server", "server.*", "seed_demo", "seed_demo.*"]) + ["seed_demo.examples"]
package_data = {"seed_demo.examples": ["*"]}
for package, folder in BUNDLED.items():
    for name in _with_subfolders(package, folder):
        packages.append(name)
        package_data[name] = BUNDLED_FILES[package]

setup(
    packages=packages,
    package_dir=BUNDLED,
    package_data=package_data,
    exclude_package_data={"": ["*.pyc"]},
)
