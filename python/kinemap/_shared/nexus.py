"""The frame of every NeXus file kinemap writes: NXroot → NXentry → the default NXdata."""

from __future__ import annotations


def nexus_entry(f, file_name: str, *, default: str = "data", program: str = "kinemap", version: str = "",
                start_time: str | None = None):
    """Mark the open HDF5 file `f` as NeXus and create ``/entry`` (NXentry) whose ``default``
    names the NXdata group to plot; returns the entry group."""
    f.attrs["NX_class"] = "NXroot"
    f.attrs["default"] = "entry"
    f.attrs["creator"] = "kinemap"
    f.attrs["file_name"] = file_name
    entry = f.create_group("entry")
    entry.attrs["NX_class"] = "NXentry"
    entry.attrs["default"] = default
    entry.create_dataset("program_name", data=program).attrs["version"] = version
    if start_time is not None:
        entry.create_dataset("start_time", data=start_time)
    return entry


__all__ = ["nexus_entry"]
