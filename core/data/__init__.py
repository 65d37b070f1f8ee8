"""Bundled data files: the invented demo robots in ``robots/*.yaml``.

Load them with :func:`kipup.core.robot_file.load_bundled`.
"""
