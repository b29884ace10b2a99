"""The Python API behind ``labtool``'s public names (listed in ``labtool.__all__``; docs/api.md).

A thin layer over the internal modules: each public function calls the same functions the commands
call, so the API and the CLI give the same numbers. Import the public names from ``labtool``, not from
here: these modules are private and may move.
"""
