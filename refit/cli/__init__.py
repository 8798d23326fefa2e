"""refit's command line: a thin shell over the library.

Each verb lives in its own module (``refit/cli/<verb>.py``); this module only builds the
group. Heavy libraries (pandas, pandera, statsmodels, ...) are imported inside the command
bodies, never at module level, so ``refit --help`` answers at once.
"""

from __future__ import annotations

import click

from refit import __version__
from refit.cli.admit import admit
from refit.cli.apply import apply
from refit.cli.check import check
from refit.cli.common import RefitGroup, add_common_options
from refit.cli.compare import compare
from refit.cli.demo import demo
from refit.cli.diff import diff
from refit.cli.fit import fit
from refit.cli.init import init
from refit.cli.keygen import keygen
from refit.cli.publish import publish
from refit.cli.report import report
from refit.cli.section import section
from refit.cli.verify import verify

CONTEXT = {"help_option_names": ["-h", "--help"], "max_content_width": 100}


@click.group(cls=RefitGroup, context_settings=CONTEXT)
@click.version_option(__version__, prog_name="refit")
def main() -> None:
    """refit: curate modern-soil calibration sets and refit paleosol transfer functions.

    \b
    Exit codes: 0 success, 1 invalid data or failure, 2 usage error or unreadable input.
    Estimates carry wide intervals; they are for research use, not for engineering,
    hazard or regulatory decisions.

    \b
    Examples (every --help example runs in the folder `refit demo --out DIR` writes):
      refit demo --out refit-demo && cd refit-demo
      refit check incoming_soils.csv

    \b
    -q/--quiet and -v/--verbose work on every command; REFIT_DEBUG=1 is -v everywhere.
    Shell completion (bash; zsh and fish alike, see README):
      eval "$(_REFIT_COMPLETE=bash_source refit)"
    """


for _command in (check, admit, init, fit, publish, verify, keygen, diff, apply, compare, section,
                 report, demo):
    main.add_command(add_common_options(_command))
