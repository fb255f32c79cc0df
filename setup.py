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
# Files each bundled folder ships besides Python modules. The globs are recursive: folders whose
# names are not package names (static/vendor/swagger-ui-dist-5.35.0) travel only this way.
BUNDLED_FILES = {"server.templates": ["**/*.html"], "server.static": ["**/*"], "server.migrations": ["*.mako"]}


def _with_subfolders(package: str, folder: str) -> list[str]:
    # Sub-folders that could be imported (pages/, partials/, vendor/, versions/...) are listed as
    # (namespace) packages, as setuptools asks; their Python modules (migrations/versions) travel so.
    subs = find_namespace_packages(where=folder, exclude=["*__pycache__*"])
    return [package] + [f"{package}.{sub}" for sub in subs]


packages = find_packages(include=["server", "server.*", "seed_demo", "seed_demo.*"]) + ["seed_demo.examples"]
package_data = {"seed_demo.examples": ["*"]}
for package, folder in BUNDLED.items():
    packages += _with_subfolders(package, folder)
    package_data[package] = BUNDLED_FILES[package]

setup(
    packages=packages,
    package_dir=BUNDLED,
    package_data=package_data,
    exclude_package_data={"": ["*.pyc"]},
)
