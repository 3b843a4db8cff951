"""The model: interactions, the kernel and its regularisation, Bethe–Salpeter channels as data, the ladder kernel operator (shared by the shifted gap solve and the BSE)."""
