"""The equations: the Craya-Herring frame, the terms and models, the implicit operator, the explicit tendency, the reported numbers and the initial states."""
