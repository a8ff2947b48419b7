"""Terminal UI (Textual): the only part of reviewer that imports textual."""
