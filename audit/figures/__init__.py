"""Figures of every stage, drawn with matplotlib from the stages' result objects only.

Each stage has a module here with ``write_figures(result, folder, formats=("png",)) ->
list[Path]``; none of them recomputes anything. PDF is drawn only where a report asks for it
(``formats=("png", "pdf")``), and a result whose figures are already in the folder is not drawn
again (``drawn_once``). That module imports no matplotlib: its drawing module (``<stage>_charts``)
draws, imported only by the process that draws, so that a command can leave the drawing to worker
processes, or skip it when every figure is drawn, without paying matplotlib's import. ``style``
holds the shared look: colours, markers and hatches that stay apart in greyscale.
"""
