"""The walkthrough notebooks: where they are, and executing one into an output folder."""
from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path

from ..core.errors import InputError
from ..core.fileio import write_text_atomic

__all__ = ["notebook_dir", "notebook_names", "execute_notebook", "execute_walkthrough"]

WALKTHROUGH = "01_quickstart.ipynb"


def notebook_dir() -> Path:
    """Folder of the bundled notebooks (installed package or source checkout)."""
    pkg = Path(__file__).resolve().parent.parent
    for cand in (pkg / "notebooks", pkg.parent / "notebooks"):
        if (cand / WALKTHROUGH).is_file():
            return cand
    raise InputError("the walkthrough notebooks were not found (looked in "
                     f"{pkg / 'notebooks'} and {pkg.parent / 'notebooks'}).",
                     hint="Reinstall tallyform.")


def notebook_names() -> list[str]:
    return sorted(p.name for p in notebook_dir().glob("[0-9][0-9]_*.ipynb"))


def _local_kernel_manager(folder):
    """A kernel reached through local sockets (IPC files in ``folder``) where the system has
    them: no network port, so nothing to encrypt and no warning about it. None elsewhere
    (nbclient's default, TCP on 127.0.0.1)."""
    if os.name != "posix":
        return None
    from jupyter_client.manager import KernelManager
    return KernelManager(kernel_name="python3", transport="ipc",
                         ip=str(Path(folder) / "kernel"))


def execute_notebook(source, target, *, cwd=None, timeout: int = 900, progress=None):
    """Execute ``source`` top to bottom (nbclient) and write the executed copy to ``target``.

    ``progress(done, total)`` is called after each cell. The working folder is ``cwd`` (a
    temporary folder by default), so the notebook's own files never land in the sources.
    """
    import nbformat
    from nbclient import NotebookClient

    nb = nbformat.read(str(source), as_version=4)
    total = sum(1 for c in nb.cells if c.cell_type == "code")
    with tempfile.TemporaryDirectory(prefix="tallyform-nb-") as tmp:
        work = Path(cwd) if cwd is not None else Path(tmp)
        km = _local_kernel_manager(tmp)
        client = NotebookClient(nb, timeout=timeout, kernel_name="python3",
                                resources={"metadata": {"path": str(work)}},
                                record_timing=False, km=km)
        done = 0
        if progress is not None:
            progress(0, total)
        # the kernel imports the same tallyform as this process (not another install)
        pkg_parent = str(Path(__file__).resolve().parents[2])
        env = dict(os.environ)
        env["PYTHONPATH"] = os.pathsep.join(p for p in (pkg_parent, env.get("PYTHONPATH"))
                                            if p)
        env["TALLYFORM_PROGRESS"] = "0"     # a shared notebook keeps results, not bars
        try:
            with client.setup_kernel(env=env):
                for index, cell in enumerate(nb.cells):
                    if cell.cell_type != "code":
                        continue
                    client.execute_cell(cell, index)
                    done += 1
                    if progress is not None:
                        progress(done, total)
        finally:                  # a manager given to nbclient is ours to stop
            if km is not None and km.has_kernel:
                km.shutdown_kernel(now=False)
    write_text_atomic(target, nbformat.writes(nb))
    return Path(target)


def execute_walkthrough(out, *, progress=None) -> Path:
    """Execute the quick-start walkthrough into ``out/walkthrough.ipynb``."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    src = notebook_dir() / WALKTHROUGH
    work = out / ".notebook-work"
    work.mkdir(exist_ok=True)
    try:
        return execute_notebook(src, out / "walkthrough.ipynb", cwd=work, progress=progress)
    finally:
        shutil.rmtree(work, ignore_errors=True)


def refresh_notebooks(folder=None, *, progress=None) -> list[Path]:
    """Re-execute every bundled notebook in place (for maintainers: run after API changes).

    Each runs in a temporary working folder, so files it writes (reports) stay out of the
    sources; static PNG copies of the figures are stored when an exporter works.
    """
    folder = Path(folder) if folder is not None else notebook_dir()
    done = []
    for nb in sorted(folder.glob("[0-9][0-9]_*.ipynb")):
        done.append(execute_notebook(nb, nb, progress=progress))
    return done


if __name__ == "__main__":        # python -m tallyform.render.notebooks
    for p in refresh_notebooks():
        print("executed", p)
