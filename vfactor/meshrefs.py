"""The files a mesh file refers to, resolved as its loader resolves them.

Some formats pull other files in: an XDMF file's ``DataItem`` elements name HDF5 files
(``Format="HDF"``, ``FILE:/dataset``) or raw binary files (``Format="Binary"``), and
XInclude elements other XML files; an HDF5 file may hold external links and virtual
datasets into other HDF5 files; a glTF file names its buffers and images by URI, an OBJ
file its material libraries. :func:`referenced_files` lists them, resolved as the loaders
resolve them, so that :mod:`vfactor.parts` can refuse a mesh file that reads files
outside the model's folder (unless ``[model] allow_outside_files = true``).
"""

from __future__ import annotations

import json
import os
import struct
from dataclasses import dataclass
from pathlib import Path
from urllib.parse import unquote

__all__ = ["Reference", "referenced_files", "XDMF_SUFFIXES"]

XDMF_SUFFIXES = (".xdmf", ".xmf")


@dataclass(frozen=True)
class Reference:
    """A file that a mesh file makes its loader read.

    Attributes
    ----------
    written : str — the name as the mesh file writes it
    resolved : pathlib.Path — where the loader looks for it (absolute, symbolic links
        resolved)
    kind : str — what refers to it (``XDMF DataItem (HDF)``, ``HDF5 external link``, ...)
    source : pathlib.Path — the file holding the reference
    """

    written: str
    resolved: Path
    kind: str
    source: Path


_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"


def referenced_files(path, depth: int = 4) -> list:
    """The files a mesh file refers to, resolved as its loader resolves them.

    Parameters
    ----------
    path : str or Path — the mesh file
    depth : int — how far references of referenced files are followed (an HDF5 file named
        by an XDMF file may link further)

    Returns
    -------
    list of Reference (empty for formats that refer to no file, and for a file that
    cannot be parsed: its loader then reports what is wrong)

    Notes
    -----
    XDMF (``.xdmf``, ``.xmf``): ``DataItem`` with ``Format="HDF"`` names ``FILE:/path``,
    FILE relative to the XDMF file's folder (meshio's ``XdmfReader``); ``Format="Binary"``
    names a raw file that meshio opens with ``numpy.fromfile``, relative to the current
    folder; ``xi:include`` names an XML file relative to the XDMF file. HDF5 (any file with
    the HDF5 signature, e.g. ``.h5m``, ``.med``, ``.cgns``, and the HDF5 files an XDMF file
    names): external links (relative to the linking file's folder, the HDF5 library's
    first choice) and the source files of virtual datasets. glTF (``.gltf``, ``.glb``):
    buffer and image URIs other than ``data:`` URIs, and OBJ ``mtllib`` names, inside the
    file's folder (trimesh's ``FilePathResolver`` keeps them there).
    """
    path = Path(path)
    out: list = []
    seen = set()
    todo = [(path, depth)]
    while todo:
        current, left = todo.pop()
        key = os.path.realpath(current)
        if key in seen:
            continue
        seen.add(key)
        try:
            found = _references_of(current)
        except (OSError, ValueError, KeyError, TypeError, struct.error):
            found = []
        for ref in found:
            out.append(ref)
            if left > 0 and ref.resolved.is_file():
                todo.append((ref.resolved, left - 1))
    return out


def _resolve(base: Path, name: str) -> Path:
    return Path(os.path.realpath(base / name))


def _references_of(path: Path) -> list:
    suffix = path.suffix.lower()
    folder = path.resolve().parent
    with open(path, "rb") as f:
        head = f.read(8)
    if head == _HDF5_SIGNATURE:
        return _hdf5_references(path)
    if suffix in XDMF_SUFFIXES:
        return _xdmf_references(path, folder)
    if suffix in (".gltf", ".glb"):
        return _gltf_references(path, folder)
    if suffix == ".obj":
        return _obj_references(path, folder)
    return []


def _xdmf_references(path: Path, folder: Path) -> list:
    from xml.etree import ElementTree

    out = []
    for element in ElementTree.parse(path).getroot().iter():
        tag = str(element.tag).rsplit("}", 1)[-1]
        if tag == "DataItem":
            fmt = element.attrib.get("Format", "XML")
            text = (element.text or "").strip()
            if fmt == "HDF" and text:
                name = text.split(":")[0]
                out.append(Reference(name, _resolve(folder, name), "XDMF DataItem (HDF)",
                                     path))
            elif fmt == "Binary" and text:
                out.append(Reference(text, _resolve(Path.cwd(), text),
                                     "XDMF DataItem (Binary, read relative to the current "
                                     "folder)", path))
        elif tag == "include" and "href" in element.attrib:
            name = element.attrib["href"]
            out.append(Reference(name, _resolve(folder, name), "XInclude", path))
    return out


def _hdf5_references(path: Path) -> list:
    import h5py

    out = []
    folder = path.resolve().parent
    with h5py.File(path, "r") as f:
        def visit(name, link):
            if isinstance(link, h5py.ExternalLink):
                out.append(Reference(link.filename, _resolve(folder, link.filename),
                                     f"HDF5 external link {name!r}", path))
            elif isinstance(link, h5py.HardLink):
                obj = f.get(name)
                if isinstance(obj, h5py.Dataset) and obj.is_virtual:
                    for source in obj.virtual_sources():
                        if source.file_name != ".":
                            out.append(Reference(source.file_name,
                                                 _resolve(folder, source.file_name),
                                                 f"HDF5 virtual dataset {name!r}", path))
        f.visititems_links(visit)
    return out


def _gltf_references(path: Path, folder: Path) -> list:
    with open(path, "rb") as f:
        data = f.read()
    if data[:4] == b"glTF":
        length, kind = struct.unpack("<I4s", data[12:20])
        data = data[20:20 + length] if kind == b"JSON" else b"{}"
    doc = json.loads(data.decode("utf-8"))
    out = []
    if not isinstance(doc, dict):
        return out
    for group in ("buffers", "images"):
        for item in doc.get(group) or []:
            uri = item.get("uri") if isinstance(item, dict) else None
            if isinstance(uri, str) and not uri.startswith("data:"):
                # trimesh's resolver looks inside the file's folder only
                name = unquote(uri).strip().lstrip("/")
                out.append(Reference(uri, _resolve(folder, name), f"glTF {group[:-1]} URI",
                                     path))
    return out


def _obj_references(path: Path, folder: Path) -> list:
    out = []
    with open(path, "r", encoding="utf-8", errors="replace") as f:
        for line in f:
            if line.startswith("mtllib"):
                name = line[len("mtllib"):].strip()
                if name:
                    out.append(Reference(name, _resolve(folder, name.lstrip("/")),
                                         "OBJ mtllib", path))
    return out
