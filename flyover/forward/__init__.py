"""The moving-source forward model, shared by the unit sources of the imaging and the simulator."""
