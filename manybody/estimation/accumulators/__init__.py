"""The accumulators by name: adding a quantity is one file here and one line in ACCUMULATORS.

Each entry's ``build(setup, options)`` returns the accumulator, or None when
the quantity does not apply (no model for the energy, no subsystems for
purities, no per-site map for two qubits per site). The order here is the
order of the variables in the results dataset.
"""

from manybody.estimation.accumulators.base import Accumulator
from manybody.estimation.accumulators.correlations import Correlations
from manybody.estimation.accumulators.energy import Energy
from manybody.estimation.accumulators.fidelity import Fidelity
from manybody.estimation.accumulators.hubbard import Hubbard
from manybody.estimation.accumulators.mutual_information import MutualInformation
from manybody.estimation.accumulators.observables import Observables
from manybody.estimation.accumulators.pt_moments import PartialTransposeMoments
from manybody.estimation.accumulators.purity import Purity
from manybody.estimation.accumulators.total_magnetization import TotalMagnetization

ACCUMULATORS = {
    "energy": Energy,
    "correlations": Correlations,
    "purity": Purity,
    "mutual_information": MutualInformation,
    "total_magnetization": TotalMagnetization,
    "fidelity": Fidelity,
    "observables": Observables,
    "hubbard": Hubbard,
    "pt_moments": PartialTransposeMoments,
}
#: what ``estimate`` computes unless told otherwise
DEFAULT_QUANTITIES = ("energy", "correlations", "purity", "mutual_information", "fidelity", "observables", "hubbard",
                      "pt_moments")

__all__ = ["ACCUMULATORS", "DEFAULT_QUANTITIES", "Accumulator"]
