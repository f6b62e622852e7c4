"""The Python API in a few lines: vet a table, look at the result, fit a model.

Run from anywhere: ``python examples/api_example.py [OUT_DIR]``. It uses the demo tables that
ship with kkcheck, prints the verdict and the model, and saves one overview figure.
"""

import sys
from pathlib import Path

import kkcheck  # import kkcheck before numpy: it asks for one BLAS thread (see README)
from kkcheck.pipeline import demo_inputs


def main(out_dir: str = "kkcheck-example") -> int:
    out = Path(out_dir)
    uv = demo_inputs()[0]  # one path is enough; a list, a DataFrame or arrays work the same
    checked = kkcheck.check(uv)
    print(repr(checked))  # one line, never the arrays
    print(checked.report())  # what the command line prints
    frame = checked.to_frame()  # data, KK reconstruction and residuals per point
    worst = frame.loc[frame["z2"].abs().idxmax()]
    print(f"largest eps2 residual: {worst['z2']:+.1f} sigma at {worst['energy_ev']:.3f} eV")

    fitted = kkcheck.fit(uv, out_dir=out / "fit", pairs=3)
    model = fitted.model  # the pole-pair model object; fitted.model_json is model.json
    print(f"model eps at 2 eV: {complex(model.eps(2.0)):.4f}")
    out.mkdir(parents=True, exist_ok=True)
    fitted.plot().savefig(out / "overview.png")
    return 0


if __name__ == "__main__":
    sys.exit(main(*sys.argv[1:]))
