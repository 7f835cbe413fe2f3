"""Reference buffers: pH(S) against temperature, user buffer sets, buffer recognition.

Shipped buffers follow the IUPAC 2002 recommendations on pH measurement (Buck et
al., Pure Appl. Chem. 74 (2002) 2169, Table 2) and, for tetroxalate and calcium
hydroxide, the NBS values (Bates 1962/1973); see :mod:`probeflow.buffers.published`
for the sources and the note that the tables were transcribed from memory.
"""

from probeflow.buffers.buffer_set import BufferSet, load_buffer_set
from probeflow.buffers.recognition import (
    DEFAULT_TOLERANCE_PH,
    BufferMatch,
    identify_buffer,
    recognise_buffer,
)
from probeflow.buffers.standard import BUFFER_NAMES, BUFFER_SETS, buffer_ph, standard_buffer
from probeflow.buffers.table import BufferTable

__all__ = [
    "BUFFER_NAMES",
    "BUFFER_SETS",
    "DEFAULT_TOLERANCE_PH",
    "BufferMatch",
    "BufferSet",
    "BufferTable",
    "buffer_ph",
    "identify_buffer",
    "load_buffer_set",
    "recognise_buffer",
    "standard_buffer",
]
