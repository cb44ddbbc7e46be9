"""Images with embedded colour profiles, and JPEG 2000 files, with the reference decode of each.

Usage: make_set.py OUT           the files and their references
       make_set.py --score OUT   differences of NAME.ours.npy (written by the test) from them

Writes into OUT each test file and `NAME.ref.npy` (the reference pixels in sRGB, rows of width * 3
values) and `NAME.raw.npy` (the same file's pixels with the profile left aside, as a decoder that
ignores profiles gives them). Prints one line per file: name, tolerance of the mean CIEDE2000
difference, and whether the profile must make a difference ("moves") or not ("same").

References (outside the project):
- Pillow's ImageCms (LittleCMS) converts each file's pixels from its profile to LittleCMS's own
  sRGB profile (`ImageCms.profileToProfile`, perceptual intent, no black-point compensation).
- Pillow decodes JPEG 2000 with OpenJPEG; its `reduce` attribute decodes a coarser resolution level.
- The RGB and grey profiles are written here, as ICC version 2 matrix/tone-curve profiles, from the
  primaries, white points and tone curves the colour spaces' specifications publish: Adobe RGB
  (1998) (the colour space's published specification, 2005), eciRGB v2 (the European Color
  Initiative's published primaries and L* tone curve), grey with a gamma of 1.0 and 1.8. The ICC
  tag layout follows ICC.1:2001-04 (version 2.4).
- Two compact profiles are committed beside this script (tests/colour/*.icc): a CMYK press profile
  (CGATS001Compat-v2-micro.icc, a CMYK lookup-table profile for CGATS TR 001 printing) and
  ProPhoto (ProPhoto-v2-micro.icc), both from the Compact-ICC-Profiles collection under CC0 1.0,
  as the hayro-jpeg2000 crate ships them in its assets.
"""

import io
import os
import struct
import sys

import numpy as np
from PIL import Image, ImageCms
from skimage import data

HERE = os.path.dirname(os.path.abspath(__file__))
D50 = np.array([0.9642, 1.0, 0.8249])
PAPER = np.array([0xF3, 0xEE, 0xE4], dtype=np.uint32)


def s15f16(v):
    return struct.pack(">i", int(round(v * 65536)))


def xyz_type(xyz):
    return b"XYZ " + b"\0" * 4 + b"".join(s15f16(v) for v in xyz)


def curve_type(gamma=None, table=None):
    if table is None:
        # One entry: a gamma in u8Fixed8Number.
        return b"curv" + b"\0" * 4 + struct.pack(">IH", 1, int(round(gamma * 256)))
    return b"curv" + b"\0" * 4 + struct.pack(">I", len(table)) + b"".join(
        struct.pack(">H", int(round(v * 65535))) for v in table)


def text_description(text):
    a = text.encode("ascii") + b"\0"
    return (b"desc" + b"\0" * 4 + struct.pack(">I", len(a)) + a + struct.pack(">II", 0, 0)
            + struct.pack(">HB", 0, 0) + b"\0" * 67)


def icc_profile(space, tags):
    """An ICC v2 display profile: `space` is b"RGB " or b"GRAY", tags a list of (signature, body)."""
    table = b""
    bodies = b""
    offset = 128 + 4 + 12 * len(tags)
    for sig, body in tags:
        while len(body) % 4:
            body += b"\0"
        table += sig + struct.pack(">II", offset + len(bodies), len(body))
        bodies += body
    size = offset + len(bodies)
    header = (struct.pack(">I", size) + b"\0" * 4 + struct.pack(">I", 0x02400000) + b"mntr" + space
              + b"XYZ " + struct.pack(">6H", 2026, 12, 5, 0, 0, 0) + b"acsp" + b"\0" * 4
              + struct.pack(">I", 0) + b"\0" * 8 + b"\0" * 8 + struct.pack(">I", 0)
              + b"".join(s15f16(v) for v in D50) + b"\0" * 4 + b"\0" * 16 + b"\0" * 28)
    assert len(header) == 128
    return header + struct.pack(">I", len(tags)) + table + bodies


def xy_to_xyz(x, y):
    return np.array([x / y, 1.0, (1 - x - y) / y])


def bradford(src_white, dst_white):
    """The Bradford chromatic adaptation matrix (as ICC.1 Annex E gives it)."""
    m = np.array([[0.8951, 0.2664, -0.1614], [-0.7502, 1.7135, 0.0367], [0.0389, -0.0685, 1.0296]])
    s = m @ src_white
    d = m @ dst_white
    return np.linalg.inv(m) @ np.diag(d / s) @ m


def rgb_profile(name, primaries, white, trc):
    """A matrix/TRC profile of an RGB space given by its primaries' and white's xy chromaticities."""
    p = np.array([xy_to_xyz(*c) for c in primaries]).T
    w = xy_to_xyz(*white)
    scale = np.linalg.solve(p, w)
    m = bradford(w, D50) @ (p * scale)  # columns: the red, green and blue colorants under D50
    return icc_profile(b"RGB ", [
        (b"desc", text_description(name)),
        (b"wtpt", xyz_type(D50)),
        (b"rXYZ", xyz_type(m[:, 0])),
        (b"gXYZ", xyz_type(m[:, 1])),
        (b"bXYZ", xyz_type(m[:, 2])),
        (b"rTRC", trc),
        (b"gTRC", trc),
        (b"bTRC", trc),
        (b"cprt", b"text" + b"\0" * 4 + b"No copyright, test profile\0"),
    ])


def grey_profile(name, gamma):
    return icc_profile(b"GRAY", [
        (b"desc", text_description(name)),
        (b"wtpt", xyz_type(D50)),
        (b"kTRC", curve_type(gamma)),
        (b"cprt", b"text" + b"\0" * 4 + b"No copyright, test profile\0"),
    ])


def lstar_curve(n=1024):
    """The L* tone curve eciRGB v2 uses: the encoded value is L*/100 (CIE 15, 1976 L*)."""
    v = np.linspace(0, 1, n) * 100
    return np.where(v > 8, ((v + 16) / 116) ** 3, v * 27 / 24389)


ADOBE = rgb_profile("Adobe RGB (1998) compatible, test", [(0.64, 0.33), (0.21, 0.71), (0.15, 0.06)],
                    (0.3127, 0.3290), curve_type(563 / 256))
ECI = rgb_profile("eciRGB v2 compatible, test", [(0.67, 0.33), (0.21, 0.71), (0.14, 0.08)],
                  (0.3457, 0.3585), curve_type(table=lstar_curve()))
GREY_LINEAR = grey_profile("Grey, gamma 1.0, test", 1.0)
GREY_18 = grey_profile("Grey, gamma 1.8, test", 1.8)
CMYK = open(os.path.join(HERE, "CGATS001Compat-v2-micro.icc"), "rb").read()
PROPHOTO = open(os.path.join(HERE, "ProPhoto-v2-micro.icc"), "rb").read()
SRGB = ImageCms.ImageCmsProfile(ImageCms.createProfile("sRGB")).tobytes()


def to_srgb(img, icc):
    """LittleCMS's conversion of `img` (its pixels as decoded) from `icc` to sRGB, as RGB."""
    src = ImageCms.ImageCmsProfile(io.BytesIO(icc))
    dst = ImageCms.ImageCmsProfile(ImageCms.createProfile("sRGB"))
    return ImageCms.profileToProfile(img, src, dst, outputMode="RGB")


def save_array(path, arr):
    h, w, _ = arr.shape
    np.save(path, arr.reshape(h, w * 3).astype(np.float32))


def chart():
    """A 96 x 64 chart: saturated hues at full and half strength, a grey ramp, and dark colours,
    where profiles move colours most."""
    a = np.zeros((64, 96, 3), dtype=np.uint8)
    hues = np.linspace(0, 1, 96, endpoint=False)
    for y in range(64):
        for x in range(96):
            h6 = hues[x] * 6
            c = np.clip([abs(h6 - 3) - 1, 2 - abs(h6 - 2), 2 - abs(h6 - 4)], 0, 1)
            band = y // 16
            if band == 0:
                v = c
            elif band == 1:
                v = 0.5 + 0.5 * c
            elif band == 2:
                v = np.full(3, x / 95)
            else:
                v = 0.3 * c
            a[y, x] = np.round(v * 255)
    return Image.fromarray(a)


def main(out):
    photo = Image.fromarray(data.astronaut()).resize((256, 256), Image.LANCZOS)
    coffee = Image.fromarray(data.coffee()).resize((300, 200), Image.LANCZOS)
    chart_img = chart()

    def emit(name, img_written, reference, raw, tol, moves):
        save_array(f"{out}/{name}.ref.npy", np.asarray(reference))
        save_array(f"{out}/{name}.raw.npy", np.asarray(raw))
        mode = moves if isinstance(moves, str) else ("moves" if moves else "same")
        print(name, tol, mode)

    def tagged(name, img, fmt, icc, tol, moves=True, **kw):
        path = f"{out}/{name}"
        img.save(path, fmt, icc_profile=icc, **kw)
        back = Image.open(path)
        back.load()
        assert back.info.get("icc_profile") == icc, name
        ref = to_srgb(back, icc)
        emit(name, back, ref, back.convert("RGB"), tol, moves)

    # Tolerances: mean CIEDE2000 from LittleCMS's result. Measured (2026-12): lossless RGB and grey
    # 0.015-0.05 (the two libraries' 8-bit fixed-point arithmetic); JPEG 0.27-0.43, most of it the
    # two JPEG decoders' rounding (about 0.2 of 255 per sample, see the decoding test); CMYK through
    # the lookup tables 0.36-0.43 (the two libraries interpolate them differently). A difference of
    # about 1 is the smallest most viewers see side by side.
    tagged("adobe.png", chart_img, "PNG", ADOBE, 0.1)
    tagged("adobe.jpg", photo, "JPEG", ADOBE, 0.5, quality=92)
    tagged("eci.tif", chart_img, "TIFF", ECI, 0.1)
    tagged("eci.jpg", coffee, "JPEG", ECI, 0.5, quality=92)
    tagged("prophoto.png", chart_img, "PNG", PROPHOTO, 0.1)
    tagged("prophoto.webp", coffee, "WEBP", PROPHOTO, 0.1, lossless=True)
    # An sRGB profile changes nothing.
    tagged("srgb.png", chart_img, "PNG", SRGB, 0.1, moves=False)
    # Greyscale with its own gamma: a linear (gamma 1.0) scan would look far too dark as sRGB.
    tagged("grey-linear.png", chart_img.convert("L"), "PNG", GREY_LINEAR, 0.1)
    tagged("grey18.jpg", photo.convert("L"), "JPEG", GREY_18, 0.5, quality=92)
    # CMYK with a press profile: JPEG (Adobe's inverted CMYK) and TIFF. The raw pixels are Pillow's
    # naive conversion, which is what a decoder that ignores the profile gives.
    tagged("cmyk.jpg", photo.convert("CMYK"), "JPEG", CMYK, 0.7, quality=92)
    tagged("cmyk.tif", chart_img.convert("CMYK"), "TIFF", CMYK, 0.6)
    # 16-bit greyscale with a linear profile, converted at 16 bits: the reference is the sRGB
    # transfer function (IEC 61966-2-1) applied to the 16-bit values in floating point. Cut to 8
    # bits first, the shadows would band (several levels off); "deep" asks for at most 1 level.
    ramp = (np.linspace(0, 1, 512) ** 3 * 65535).round().astype(np.uint16)
    grey16 = Image.fromarray(np.tile(ramp, (16, 1)))
    grey16.save(f"{out}/grey16-linear.png", icc_profile=GREY_LINEAR)
    lin = np.tile(ramp, (16, 1)).astype(np.float64) / 65535
    enc = np.where(lin <= 0.0031308, 12.92 * lin, 1.055 * lin ** (1 / 2.4) - 0.055)
    ref16 = np.repeat((enc * 255).round().astype(np.uint8)[..., None], 3, axis=2)
    raw16 = np.repeat(((np.tile(ramp, (16, 1)).astype(np.uint32) + 128) // 257).astype(np.uint8)[..., None], 3, axis=2)
    emit("grey16-linear.png", None, ref16, raw16, 0.1, "deep")
    # A profile for other pixels (an RGB profile on CMYK inks) is refused: the pixels are taken as
    # they are, by the naive formula, as a decoder that ignores profiles gives them.
    cmyk_srgb = f"{out}/cmyk-srgb.jpg"
    photo.convert("CMYK").save(cmyk_srgb, "JPEG", quality=92, icc_profile=SRGB)
    back = Image.open(cmyk_srgb)
    emit("cmyk-srgb.jpg", back, back.convert("RGB"), back.convert("RGB"), 0.5, "refused")
    # Alpha over a profile: converted first, then flattened onto the paper colour.
    rgba = chart_img.copy()
    rgba.putalpha(Image.fromarray(np.tile(np.linspace(0, 255, 96).astype(np.uint8), (64, 1))))
    rgba.save(f"{out}/adobe-alpha.png", "PNG", icc_profile=ADOBE)
    back = Image.open(f"{out}/adobe-alpha.png")
    conv = np.asarray(to_srgb(back.convert("RGB"), ADOBE)).astype(np.uint32)
    a = np.asarray(back)[..., 3:4].astype(np.uint32)
    flat = ((conv * a + PAPER * (255 - a) + 127) // 255).astype(np.uint8)
    raw = ((np.asarray(back)[..., :3].astype(np.uint32) * a + PAPER * (255 - a) + 127) // 255)
    emit("adobe-alpha.png", back, flat, raw.astype(np.uint8), 0.1, True)

    # JPEG 2000: lossless (the reversible 5/3 wavelet) must decode exactly as OpenJPEG decodes it;
    # lossy (9/7) within the two decoders' rounding; a profile in the colr box (method 2, written
    # by `with_icc`: Pillow writes none) is applied; the JPX brand and a raw codestream are read.
    def jp2(name, img, tol, moves=False, icc=None, brand=None, **kw):
        path = f"{out}/{name}"
        img.save(path, "JPEG2000", **kw)
        if icc is not None or brand is not None:
            with open(path, "rb") as f:
                patched = with_icc(f.read(), icc, brand)
            with open(path, "wb") as f:
                f.write(patched)
        back = Image.open(path)
        back.load()
        ref = to_srgb(back, icc) if icc is not None else back.convert("RGB")
        emit(name, back, ref, back.convert("RGB"), tol, moves)

    jp2("lossless.jp2", coffee, 0.0)
    jp2("grey.jp2", photo.convert("L"), 0.0)
    jp2("lossy.jp2", coffee, 0.1, irreversible=True, quality_mode="rates", quality_layers=[20])
    jp2("codestream.j2k", chart_img, 0.0)
    jp2("adobe.jp2", chart_img, 0.1, moves=True, icc=ADOBE)
    jp2("adobe.jpx", chart_img, 0.1, moves=True, icc=ADOBE, brand=b"jpx ")
    # A large master decoded at a quarter of its size (two resolution levels skipped), against
    # OpenJPEG's decode of the same level (Pillow's `reduce`).
    big = Image.fromarray(data.astronaut()).resize((1536, 1024), Image.BICUBIC)
    big.save(f"{out}/big.jp2", "JPEG2000", irreversible=True, num_resolutions=6)
    small = Image.open(f"{out}/big.jp2")
    small.reduce = 2
    small.load()
    emit("big.jp2", small, small.convert("RGB"), small.convert("RGB"), 0.1, False)


def boxes(b):
    """The (type, payload) boxes of a JPEG 2000 file (ISO/IEC 15444-1 Annex I.4)."""
    i = 0
    while i < len(b):
        size, kind = struct.unpack(">I4s", b[i:i + 8])
        head = 8
        if size == 1:
            size = struct.unpack(">Q", b[i + 8:i + 16])[0]
            head = 16
        elif size == 0:
            size = len(b) - i
        yield kind, b[i + head:i + size]
        i += size


def box(kind, payload):
    return struct.pack(">I", 8 + len(payload)) + kind + payload


def with_icc(b, icc, brand):
    """A JP2 file with its colour specification box replaced by one that carries `icc` (method 2,
    a restricted ICC profile, Annex I.5.3.3), and its file-type brand set to `brand`."""
    out = b""
    for kind, payload in boxes(b):
        if kind == b"ftyp" and brand is not None:
            payload = brand + payload[4:] + brand
        if kind == b"jp2h" and icc is not None:
            inner = b""
            for k, p in boxes(payload):
                if k == b"colr":
                    p = bytes([2, 0, 0]) + icc
                inner += box(k, p)
            payload = inner
        out += box(kind, payload)
    return out


def score(out):
    """Mean and largest CIEDE2000 difference (scikit-image's) of our decode and of the raw pixels
    from the reference, per file; the mean and the largest absolute sample difference of ours."""
    from skimage.color import deltaE_ciede2000, rgb2lab
    for line in open(f"{out}/list.txt"):
        name = line.split()[0]
        ref = np.load(f"{out}/{name}.ref.npy")
        h = ref.shape[0]
        as_img = lambda a: a.reshape(h, -1, 3) / 255.0
        ours = np.load(f"{out}/{name}.ours.npy")
        raw = np.load(f"{out}/{name}.raw.npy")
        lab = rgb2lab(as_img(ref))
        de_ours = deltaE_ciede2000(lab, rgb2lab(as_img(ours)))
        de_raw = deltaE_ciede2000(lab, rgb2lab(as_img(raw)))
        mae = np.abs(ours - ref).mean()
        print(name, f"{de_ours.mean():.4f}", f"{de_ours.max():.4f}", f"{de_raw.mean():.4f}",
              f"{mae:.4f}", int(np.abs(ours - ref).max()))


if __name__ == "__main__":
    if sys.argv[1] == "--score":
        score(sys.argv[2])
    else:
        main(sys.argv[1])
