"""The data layer: strain in, synthetic noise, PSDs and conditioned (whitened) data.

Modules
-------
io
    Read GWOSC HDF5 / GWF / text strain, data-quality segments, write GWOSC HDF5.
noise
    Analytic and file PSDs, seeded stationary Gaussian noise coloured by a PSD.
psd
    Welch median PSD estimation over NaN-free stretches, with on-source exclusion.
condition
    Whitening with inverse-spectrum truncation, band limiting and gating into a
    :class:`~ringsearch.data.condition.ConditionedData` the search takes.
inject
    Add signals to strain (only on their support) and their sampled-signal SNRs.
injections
    Injection lists (one ringdown per row): schema, checks, CSV/Parquet files and
    the sources they make, shared by ``ringsearch inject`` and campaigns.
plots
    ASD, whitened time series and time-frequency figures.

Imports stay lazy here so that ``import ringsearch.data`` does not pull in gwpy.
"""
