"""The lab's side of Fluxline: predicted shots under a register noise model, Gauss-law
post-selection, readout-confusion inversion with bootstrap error bars, and measured data in
(``docs/lab.md``)."""
