"""Run the examples and collect their pictures into the documentation's gallery (``make docs`` runs this first).

Each example (``examples/<name>/``) is copied to ``docs/_build/examples/`` and run there exactly as
``examples/README.md`` says (``make_snapshot.py``, ``rtrace run job.toml``, ``run.py``), so nothing is
written into the source tree but ``docs/_gallery/`` (the pictures) and the page ``docs/gallery.md``
(both ignored by git).
A picture an example does not write fails the build: the gallery shows what the examples make today.

Usage: ``python docs/gallery.py [--reuse]`` from the repository root; ``--reuse`` keeps examples
already run in ``docs/_build/examples`` (for editing the text of the docs).
"""

import argparse
import pathlib
import shutil
import subprocess
import sys

ROOT = pathlib.Path(__file__).resolve().parents[1]
RUNS = ROOT / "docs" / "_build" / "examples"
GALLERY = ROOT / "docs" / "_gallery"

# (example, snapshot file or None, [(picture, caption)]): the pictures shown, in order
EXAMPLES = [
    (
        "compact_core",
        None,
        [
            ("out/cut.png", "A cut through the compact core and its halo, with and without absorption."),
            (
                "out/comparison.png",
                "The ring array's image (left) against the model and their difference: the array filters out the halo.",
            ),
        ],
    ),
    (
        "ionized_jet",
        "jet.h5",
        [
            ("jet-output/inclined_45_intensity.png", "Intensity of the bipolar wind at 45 degrees."),
            (
                "jet-output/inclined_45_observed.png",
                "The same, convolved with a beam whose width scales as 1/frequency (grey disk).",
            ),
            ("jet-output/inclined_45_spectral_index.png", "Spectral index map."),
            ("jet-output/pole_on_tau_unity_frequency.png", "Frequency at which the optical depth reaches 1, pole-on."),
            ("jet-output/edge_on_sed.png", "Spectrum of the whole source, edge-on."),
        ],
    ),
    (
        "hii_gradient",
        "hii.h5",
        [
            ("hii-output/face_intensity.png", "A blister HII region whose density falls across its face."),
            ("hii-output/face_spectral_index.png", "Its spectral index, from optically thick to thin across the face."),
            ("hii-output/face_observed.png", "Observed with a beam and noise."),
        ],
    ),
    (
        "stars_in_clumpy_cloud",
        "cloud.h5",
        [
            ("cloud-output/face_intensity.png", "HII regions of three stars in a clumpy sheet, face-on."),
            ("cloud-output/side_tau_unity_frequency.png", "The optical-depth-1 frequency, side-on."),
            ("out/shadows.png", "Electron density in the midplane beside the 22 GHz map: globules cast shadows."),
        ],
    ),
]


def run(cmd, cwd):
    """Run one step of an example; stop the build with its output if it fails."""
    print(f"[{cwd.name}] {' '.join(cmd)}", flush=True)
    done = subprocess.run(cmd, check=False, cwd=cwd, capture_output=True, text=True)
    if done.returncode:
        sys.exit(f"gallery: {' '.join(cmd)} failed in {cwd}:\n{done.stdout[-3000:]}\n{done.stderr[-3000:]}")


def run_example(name, snapshot, reuse):
    """Copy ``examples/<name>`` into the build folder and run it there; returns its folder."""
    where = RUNS / name
    if reuse and where.exists():
        return where
    shutil.rmtree(where, ignore_errors=True)
    shutil.copytree(ROOT / "examples" / name, where, ignore=shutil.ignore_patterns("out", "*-output", "*.h5"))
    antennas = RUNS / "antennas"
    if not antennas.exists():
        shutil.copytree(ROOT / "examples" / "antennas", antennas)
    py = sys.executable
    if snapshot is not None:
        run([py, "make_snapshot.py", snapshot], where)
        run(
            [py, "-c", "import sys; from rtrace.cli import main; sys.exit(main())", "run", "job.toml", "--quiet"], where
        )
    run([py, "run.py"], where)
    return where


def main(argv=None):
    """Run the examples and write ``docs/_gallery``."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reuse", action="store_true", help="keep examples already run in docs/_build/examples")
    args = parser.parse_args(argv)
    RUNS.mkdir(parents=True, exist_ok=True)
    shutil.rmtree(GALLERY, ignore_errors=True)
    GALLERY.mkdir(parents=True)
    lines = [
        "# Gallery",
        "",
        "Pictures written by the examples (`examples/`), each an invented scenario; `make docs` runs them first",
        "(`docs/gallery.py`). See each example's `run.py` and job file for how a picture was made.",
        "",
    ]
    for name, snapshot, pictures in EXAMPLES:
        where = run_example(name, snapshot, args.reuse)
        lines += [f"## {name.replace('_', ' ')}", "", f"From `examples/{name}/`.", ""]
        for rel, caption in pictures:
            src = where / rel
            if not src.is_file():
                sys.exit(f"gallery: examples/{name} did not write {rel}")
            dest = f"{name}__{src.name}"
            shutil.copyfile(src, GALLERY / dest)
            lines += [f"```{{figure}} _gallery/{dest}", ":width: 90%", "", caption, "```", ""]
    (ROOT / "docs" / "gallery.md").write_text("\n".join(lines))
    print(f"gallery: {sum(len(p) for _, _, p in EXAMPLES)} pictures in {GALLERY}")


if __name__ == "__main__":
    main()
