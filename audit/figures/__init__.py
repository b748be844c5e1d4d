"""Figures of every stage, drawn with matplotlib from the stages' result objects only.

Each stage has a module here with ``write_figures(result, folder) -> list[Path]``; none of
them recomputes anything. ``style`` holds the shared look: colours, markers and hatches that
stay apart in greyscale.
"""
