"""The panels of the main window, in the order a stakeholder asks its questions."""
