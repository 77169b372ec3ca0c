#!/usr/bin/env bash
# The setup command of the test suite: the one step that needs the network. Builds the Python
# reference venv (.venv, pinned by tests/python/requirements.txt) and makes the reference files
# the tests read under target/refdata (or $SUTURA_REFDATA):
#   pillow/     the TIFF test images of Pillow's source distribution (PyPI)
#   nibabel/    the NIfTI/Analyze test files of nibabel's wheel
#   nifti_made/ NIfTI files written by nibabel (tests/python/nifti_make.py, seeded)
#   tifffile/   TIFF files written by tifffile (tests/python/tiff_write_refs.py, seeded)
#   zarr_made/  OME-Zarr multiscale images written by zarr-python (tests/python/zarr_store.py)
#   dicom_made/ DICOM series written by pydicom from known arrays (tests/python/dicom_make.py)
#   pydicom/    CT and MR files of pydicom's wheel, each in a folder of its own, and one
#               5-slice CT series of its DICOMDIR test set
#   pydicom_data/ 512x512 CT and MR files of the pydicom-data package, each in its own folder
# After one run, `cargo test` needs neither the network nor Python: the Python libraries'
# answers are committed under tests/fixtures/reference. Each part is remade when what makes it
# changes (its stamp: the package version and the script's checksum), else left alone.
# Usage: scripts/fetch_refdata.sh [PYTHON]   (default: $SUTURA_PYTHON, else .venv/bin/python)
set -euo pipefail
cd "$(dirname "$0")/.."
PY=${1:-${SUTURA_PYTHON:-.venv/bin/python}}
if [ ! -x "$PY" ]; then
  python3 -m venv .venv
  PY=.venv/bin/python
fi
# every pin already satisfied: pip does not go to the network
"$PY" -m pip install -q --disable-pip-version-check -r tests/python/requirements.txt
dest=${SUTURA_REFDATA:-target/refdata}
mkdir -p "$dest"

# fresh PART STAMP: true when $dest/PART was made with STAMP (stamps live beside the parts,
# not in them: the tests check the parts' bytes against their fixtures)
fresh() { [ -d "$dest/$1" ] && [ -f "$dest/.stamps/$1" ] && [ "$(cat "$dest/.stamps/$1")" = "$2" ]; }
# made PART STAMP: records that PART is complete
made() { mkdir -p "$dest/.stamps" && printf '%s' "$2" >"$dest/.stamps/$1"; }
sum() { sha256sum "$@" | cut -c1-16 | tr '\n' ' '; }

pillow=13.0.0
if ! fresh pillow "$pillow"; then
  rm -rf "$dest/pillow"
  tmp=$(mktemp -d)
  # pip prepares an sdist's metadata before it keeps the file; with build isolation that would
  # build Pillow's build tools from source, so use the venv's own setuptools instead.
  "$PY" -m pip install -q --disable-pip-version-check "setuptools>=77" pybind11
  "$PY" -m pip download -q --disable-pip-version-check --no-deps --no-binary :all: \
    --no-build-isolation -d "$tmp" "pillow==$pillow"
  mkdir -p "$dest/pillow"
  tar -xzf "$tmp"/pillow-*.tar.gz -C "$dest/pillow" --strip-components=1 --wildcards '*/Tests/images/*'
  rm -rf "$tmp"
  made pillow "$pillow"
fi

nib=$("$PY" -c 'import nibabel; print(nibabel.__version__)')
if ! fresh nibabel "$nib"; then
  rm -rf "$dest/nibabel"
  mkdir -p "$dest/nibabel"
  src=$("$PY" -c 'import nibabel, os; print(os.path.join(os.path.dirname(nibabel.__file__), "tests", "data"))')
  # the scans and headers only (NIfTI-1/2, Analyze, CIFTI), not the other formats' files
  find "$src" -maxdepth 1 -type f \( -name '*.nii' -o -name '*.nii.gz' -o -name '*.hdr' \
    -o -name '*.img' -o -name '*.hdr.gz' -o -name '*.img.gz' \) -exec cp {} "$dest/nibabel/" \;
  made nibabel "$nib"
fi

stamp="nibabel $nib numpy $("$PY" -c 'import numpy; print(numpy.__version__)') $(sum tests/python/nifti_make.py)"
if ! fresh nifti_made "$stamp"; then
  rm -rf "$dest/nifti_made"
  "$PY" tests/python/nifti_make.py "$dest/nibabel" "$dest/nifti_made" >/dev/null
  made nifti_made "$stamp"
fi

stamp="tifffile $("$PY" -c 'import tifffile; print(tifffile.__version__)') $(sum tests/python/tiff_write_refs.py)"
if ! fresh tifffile "$stamp"; then
  rm -rf "$dest/tifffile"
  "$PY" tests/python/tiff_write_refs.py "$dest/tifffile" >/dev/null
  made tifffile "$stamp"
fi

stamp="zarr $("$PY" -c 'import zarr; print(zarr.__version__)') numcodecs $("$PY" -c 'import numcodecs; print(numcodecs.__version__)') $(sum tests/python/zarr_store.py)"
if ! fresh zarr_made "$stamp"; then
  rm -rf "$dest/zarr_made"
  "$PY" tests/python/zarr_store.py write "$dest/zarr_made"
  made zarr_made "$stamp"
fi

stamp="pydicom $("$PY" -c 'import pydicom; print(pydicom.__version__)') numpy $("$PY" -c 'import numpy; print(numpy.__version__)') $(sum tests/python/dicom_make.py)"
if ! fresh dicom_made "$stamp"; then
  rm -rf "$dest/dicom_made"
  "$PY" tests/python/dicom_make.py "$dest/dicom_made" >/dev/null
  made dicom_made "$stamp"
fi

pyd=$("$PY" -c 'import pydicom; print(pydicom.__version__)')
if ! fresh pydicom "$pyd"; then
  rm -rf "$dest/pydicom"
  src=$("$PY" -c 'import pydicom, os; print(os.path.join(os.path.dirname(pydicom.__file__), "data", "test_files"))')
  for f in CT_small MR_small MR_small_implicit MR_small_bigendian MR_small_expb MR_small_RLE \
    MR_small_padded MR_truncated 693_J2KI rtdose SC_rgb_rle JPEG-lossy; do
    mkdir -p "$dest/pydicom/$f" && cp "$src/$f.dcm" "$dest/pydicom/$f/"
  done
  mkdir -p "$dest/pydicom/CT5N" && cp "$src"/dicomdirtests/98892001/CT5N/* "$dest/pydicom/CT5N/"
  mkdir -p "$dest/pydicom/MR700" && cp "$src"/dicomdirtests/98892003/MR700/* "$dest/pydicom/MR700/"
  made pydicom "$pyd"
fi

pdd=$("$PY" -c 'import importlib.metadata as m; print(m.version("pydicom-data"))')
if ! fresh pydicom_data "$pdd"; then
  rm -rf "$dest/pydicom_data"
  src=$("$PY" -c 'import data_store, os; print(os.path.join(os.path.dirname(data_store.__file__), "data"))')
  for f in 693_UNCI 693_UNCR MR2_UNCI MR2_UNCR; do
    mkdir -p "$dest/pydicom_data/$f" && cp "$src/$f.dcm" "$dest/pydicom_data/$f/"
  done
  made pydicom_data "$pdd"
fi
