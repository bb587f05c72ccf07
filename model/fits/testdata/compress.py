"""Writes tile-compressed FITS files with astropy and astropy's own decoding
of each, for model/fits/tile_test.go.

usage: compress.py OUTDIR [small]

For every case NAME it writes OUTDIR/NAME.fits (a primary HDU and one
CompImageHDU named 'IMG') and OUTDIR/NAME.f64 (astropy's decoded pixels as
little-endian float64, C order = FITS order with NAXIS1 fastest), and
prints one line "NAME ZCMPTYPE ZQUANTIZ ZTILE" for the log. With 'small'
only a few small cases are written (the fuzz seeds kept in testdata/).
"""
import sys
import numpy as np
from astropy.io import fits

out = sys.argv[1]
small = len(sys.argv) > 2 and sys.argv[2] == 'small'
rng = np.random.default_rng(7)

def scene(shape):
    # A smooth field plus noise: granulation-like values around 1000.
    z, y, x = np.indices(shape)
    v = 1000 + 200 * np.sin(x / 3.0) * np.cos(y / 4.0) + 10 * z
    return v + rng.normal(0, 5, shape)

cases = []
shape3 = (3, 20, 23)       # frames, ny, nx: edge tiles are partial
for cmp in ['RICE_1', 'GZIP_1', 'GZIP_2']:
    cases.append(('i16_' + cmp, scene(shape3).astype(np.int16), cmp, {}))
    cases.append(('i32_' + cmp, (scene(shape3) * 1000).astype(np.int32), cmp, {}))
    cases.append(('u8_' + cmp, (scene(shape3) / 8).astype(np.uint8), cmp, {}))
    cases.append(('u16_' + cmp, (scene(shape3) * 50).astype(np.uint16), cmp, {}))
    for q, name in [(-1, 'nodither'), (1, 'dither1'), (2, 'dither2')]:
        f = scene(shape3).astype(np.float32)
        f[0, 0, :5] = 0.0          # exact zeros (kept exactly by SUBTRACTIVE_DITHER_2)
        f[1, 3, 4] = np.nan        # an undefined pixel (ZBLANK)
        cases.append(('f32_%s_%s' % (name, cmp), f, cmp,
                      dict(quantize_level=16.0, quantize_method=q, dither_seed=1234)))
    cases.append(('f64_dither1_' + cmp, scene(shape3), cmp, dict(quantize_level=4.0, quantize_method=1, dither_seed=77)))
# 3-D tiles, and a large image so that the dither sequence wraps.
cases.append(('i16_tile3d_RICE_1', scene((4, 16, 18)).astype(np.int16), 'RICE_1', dict(tile_size=(5, 4, 3))))
cases.append(('f32_tile3d_GZIP_2', scene((4, 16, 18)).astype(np.float32), 'GZIP_2',
              dict(tile_size=(7, 5, 2), quantize_method=2, dither_seed=9999)))
cases.append(('f32_wrap_RICE_1', scene((1, 120, 130))[0].astype(np.float32), 'RICE_1',
              dict(tile_size=(130, 120), quantize_method=1, dither_seed=5000)))
cases.append(('f32_lossless_GZIP_2', scene(shape3).astype(np.float32), 'GZIP_2', dict(quantize_level=0.0)))
nocompress = ['i16_GZIP_1', 'u8_GZIP_1', 'f32_dither2_GZIP_1', 'f64_dither1_GZIP_1']
if small:
    keep = {'i16_RICE_1', 'f32_dither2_GZIP_2', 'u16_GZIP_1', 'f32_tile3d_GZIP_2'}
    cases = [c for c in cases if c[0] in keep]

def write_nocompress(src, name, decoded):
    import gzip
    with fits.open(src, disable_image_compression=True) as h:
        t = h['IMG']
        cells = [np.frombuffer(gzip.decompress(bytes(c)), dtype=np.uint8) for c in t.data['COMPRESSED_DATA']]
        cols = []
        for c in t.columns:
            if c.name == 'COMPRESSED_DATA':
                cols.append(fits.Column(name=c.name, format='1PB(%d)' % max(len(x) for x in cells),
                                        array=np.array(cells, dtype=object)))
            else:
                cols.append(fits.Column(name=c.name, format=c.format, array=t.data[c.name]))
        new = fits.BinTableHDU.from_columns(cols)
        for card in t.header.cards:
            k = card.keyword
            if k in ('XTENSION', 'BITPIX', 'NAXIS', 'NAXIS1', 'NAXIS2', 'PCOUNT', 'GCOUNT', 'TFIELDS', 'THEAP') or \
               k.startswith('TTYPE') or k.startswith('TFORM'):
                continue
            new.header[k] = (card.value, card.comment)
        new.header['ZCMPTYPE'] = 'NOCOMPRESS'
        fits.HDUList([fits.PrimaryHDU(), new]).writeto('%s/%s.fits' % (out, name), overwrite=True)
    decoded.astype('<f8').tofile('%s/%s.f64' % (out, name))
    print(name, 'NOCOMPRESS (from the GZIP_1 tiles)')

for name, data, cmp, kw in cases:
    hdu = fits.CompImageHDU(data, compression_type=cmp, name='IMG', **kw)
    path = '%s/%s.fits' % (out, name)
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(path, overwrite=True)
    with fits.open(path) as h:
        d = np.asarray(h['IMG'].data, dtype=np.float64)
        hdr = h['IMG']._header
        print(name, hdr['ZCMPTYPE'], hdr.get('ZQUANTIZ', '-'), hdr.get('ZTILE1'), hdr.get('ZTILE2'), hdr.get('ZTILE3', '-'))
    if not small:
        d.astype('<f8').tofile('%s/%s.f64' % (out, name))
    if name in nocompress and not small:
        # astropy 5.2 writes no NOCOMPRESS images: store the same tiles
        # uncompressed (ZCMPTYPE = 'NOCOMPRESS', FITS Standard 4.0 section
        # 10.4), the expected pixels being astropy's decoding of the GZIP_1
        # file.
        write_nocompress(path, name.replace('GZIP_1', 'NOCOMPRESS'), d)
