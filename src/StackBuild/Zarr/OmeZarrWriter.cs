using System.Buffers;
using System.IO.Compression;
using System.Text.Json;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Nifti;

namespace StackBuild.Zarr;

/// <summary>The stored arrays' element type: the volume's grey levels as the NIfTI volume stores them.</summary>
public enum ZarrElementType { UInt8, UInt16 }

/// <summary>What the group's attributes say besides the pyramid: the image's name and the NIfTI affine it shares with the NIfTI output.</summary>
public sealed record OmeZarrDescription(string Name, Affine Affine, string Description);

/// <summary>
/// Writes a volume as an OME-Zarr image: a Zarr v2 group holding one array per resolution level, with OME-NGFF 0.4
/// "multiscales" metadata (axes z, y, x in micrometres; per level one scale and one translation).
/// </summary>
/// <remarks>
/// <para>Specifications: Zarr storage specification version 2 (<c>.zgroup</c>, <c>.zattrs</c>, <c>.zarray</c> JSON; one file per
/// chunk, C order, edge chunks stored whole and padded with the fill value) and OME-NGFF 0.4 (chunks in the nested layout,
/// <c>"dimension_separator": "/"</c>; "multiscales" with "version", "axes", "datasets" ordered from the finest level, each with
/// exactly one "scale" and an optional "translation" after it).</para>
/// <para>Array index [z, y, x] of level 0 is NIfTI voxel (i, j, k) = (x, y, z): the bytes of a plane are laid out as in the
/// NIfTI file. Chunks are compressed with zlib (RFC 1950, <c>{"id": "zlib", "level": 6}</c>), which numcodecs reads without
/// plugins.</para>
/// <para>Planes are taken one at a time (<see cref="AddPlane"/>) and each level keeps only one chunk's depth of its planes
/// (<see cref="OmeZarrLayout.ChunkPlanes"/>) plus one plane of sums for the next level, so the writer holds about 1.2 chunk
/// depths of level-0 planes whatever the volume's depth.</para>
/// <para>Levels after 0 are block means of the level before them as stored (rounded), over the 1, 2, 4 or 8 voxels of each
/// block (fewer at an odd edge), rounded half up: (2 × sum + n) / (2 n) in integers.</para>
/// </remarks>
public sealed class OmeZarrWriter
{
    /// <summary>The zlib level written into every chunk and stated in <c>.zarray</c>.</summary>
    public const int ZlibLevel = 6;

    /// <summary>The key under the group's attributes that holds StackBuild's own description (the NIfTI affine); also how an earlier output is recognised.</summary>
    public const string AttributesKey = "stackbuild";

    private readonly string _folder;
    private readonly OmeZarrLayout _layout;
    private readonly int _bytesPerVoxel;
    private readonly double _max;
    private readonly LevelState[] _levels;
    private readonly OmeZarrDescription _description;
    private readonly ushort[] _input;
    private bool _finished;

    /// <summary>
    /// Starts an image in <paramref name="folder"/>, which must exist and be empty: writes <c>.zgroup</c> and each level's
    /// <c>.zarray</c> now; the chunks as their planes come; <c>.zattrs</c> on <see cref="Finish"/>.
    /// </summary>
    public OmeZarrWriter(string folder, OmeZarrLayout layout, ZarrElementType type, OmeZarrDescription description)
    {
        _folder = folder;
        _layout = layout;
        _description = description;
        _bytesPerVoxel = type == ZarrElementType.UInt8 ? 1 : 2;
        _max = type == ZarrElementType.UInt8 ? byte.MaxValue : ushort.MaxValue;
        _levels = layout.Levels.Select((l, i) => new LevelState(l, i)).ToArray();
        for (int l = 0; l + 1 < _levels.Length; l++) _levels[l].Sums = new uint[_levels[l + 1].Level.Nx * _levels[l + 1].Level.Ny];
        var top = layout.Levels[0];
        _input = new ushort[top.Nx * top.Ny];
        WriteJson(Path.Combine(folder, ".zgroup"), w => { w.WriteStartObject(); w.WriteNumber("zarr_format", 2); w.WriteEndObject(); });
        foreach (var level in _levels)
        {
            Directory.CreateDirectory(LevelFolder(level.Index));
            WriteArrayMetadata(level);
        }
    }

    /// <summary>Writes a whole volume in memory, plane by plane, into <paramref name="folder"/> (existing and empty).</summary>
    public static void Write(string folder, Volume volume, ZarrElementType type, string name, string description)
    {
        var (si, sj, sk) = volume.Affine.VoxelSizes;
        var layout = OmeZarrLayout.For(volume.Nx, volume.Ny, volume.Nz, si * 1000, sj * 1000, sk * 1000);
        var writer = new OmeZarrWriter(folder, layout, type, new OmeZarrDescription(name, volume.Affine, description));
        for (int k = 0; k < volume.Nz; k++) writer.AddPlane(volume.Plane(k));
        writer.Finish();
    }

    /// <summary>
    /// Takes the next plane of level 0 (NIfTI order: i fastest, <c>Nx × Ny</c> values). Values are rounded half away from
    /// zero and clamped to the element type as the NIfTI writer stores them with scl_slope 1; not-a-number is stored as 0.
    /// </summary>
    public void AddPlane(ReadOnlySpan<float> plane)
    {
        if (_finished) throw new InvalidOperationException("The image is already finished.");
        var top = _levels[0];
        if (plane.Length != _input.Length) throw new ArgumentException($"A plane has {_input.Length} values, not {plane.Length}.", nameof(plane));
        if (top.PlanesTaken == top.Level.Nz) throw new InvalidOperationException($"The volume has {top.Level.Nz} planes.");
        for (int n = 0; n < plane.Length; n++)
            _input[n] = (ushort)NiftiScaling.Stored(plane[n], 1, 0, 0, _max, 0);
        Take(0, _input);
    }

    /// <summary>Writes what the levels still hold (the last, partly filled chunks) and the group's attributes.</summary>
    public void Finish()
    {
        if (_finished) return;
        if (_levels[0].PlanesTaken != _levels[0].Level.Nz)
            throw new InvalidOperationException($"{_levels[0].PlanesTaken} of {_levels[0].Level.Nz} planes were given.");
        for (int l = 0; l < _levels.Length; l++)
        {
            var level = _levels[l];
            // A level whose plane count is odd leaves one plane summed alone for the next level.
            if (l + 1 < _levels.Length && level.Pending > 0) EmitNext(l);
            if (level.InSlab > 0) WriteSlab(level);
        }
        for (int l = 0; l < _levels.Length; l++)
            if (_levels[l].PlanesTaken != _levels[l].Level.Nz)
                throw new InvalidOperationException($"Level {l} received {_levels[l].PlanesTaken} of {_levels[l].Level.Nz} planes.");
        WriteJson(Path.Combine(_folder, ".zattrs"), WriteAttributes);
        _finished = true;
    }

    /// <summary>A plane of level <paramref name="l"/> as stored: into its slab, and into the next level's sums.</summary>
    private void Take(int l, ReadOnlySpan<ushort> plane)
    {
        var level = _levels[l];
        plane.CopyTo(level.Slab.AsSpan(level.InSlab * plane.Length, plane.Length));
        level.InSlab++;
        level.PlanesTaken++;
        if (level.InSlab == level.Level.ChunkZ) WriteSlab(level);
        if (l + 1 == _levels.Length) return;
        var next = _levels[l + 1];
        int fy = next.Level.FactorY / level.Level.FactorY, fx = next.Level.FactorX / level.Level.FactorX;
        int fz = next.Level.FactorZ / level.Level.FactorZ;
        int nx = level.Level.Nx, ny = level.Level.Ny, nxNext = next.Level.Nx;
        var sums = level.Sums!;
        for (int y = 0; y < ny; y++)
        {
            var row = plane.Slice(y * nx, nx);
            var target = sums.AsSpan((fy == 2 ? y >> 1 : y) * nxNext, nxNext);
            if (fx == 2) for (int x = 0; x < nx; x++) target[x >> 1] += row[x];
            else for (int x = 0; x < nx; x++) target[x] += row[x];
        }
        level.Pending++;
        if (level.Pending == fz) EmitNext(l);
    }

    /// <summary>Turns level <paramref name="l"/>'s sums into the next level's plane (block means, rounded half up) and passes it on.</summary>
    private void EmitNext(int l)
    {
        var level = _levels[l];
        var next = _levels[l + 1];
        int fy = next.Level.FactorY / level.Level.FactorY, fx = next.Level.FactorX / level.Level.FactorX;
        int nx = level.Level.Nx, ny = level.Level.Ny, nxNext = next.Level.Nx, nyNext = next.Level.Ny;
        var sums = level.Sums!;
        var plane = ArrayPool<ushort>.Shared.Rent(nxNext * nyNext);
        try
        {
            for (int y = 0; y < nyNext; y++)
            {
                uint cy = (uint)Math.Min(fy, ny - y * fy);
                for (int x = 0; x < nxNext; x++)
                {
                    uint n = cy * (uint)Math.Min(fx, nx - x * fx) * (uint)level.Pending;
                    int at = y * nxNext + x;
                    plane[at] = (ushort)((2 * sums[at] + n) / (2 * n));
                }
            }
            Array.Clear(sums);
            level.Pending = 0;
            Take(l + 1, plane.AsSpan(0, nxNext * nyNext));
        }
        finally
        {
            ArrayPool<ushort>.Shared.Return(plane);
        }
    }

    /// <summary>Writes the chunks of one slab (one chunk's depth of planes, fewer at the end) and empties it.</summary>
    private void WriteSlab(LevelState level)
    {
        var lv = level.Level;
        var (_, chunksY, chunksX) = lv.ChunkCounts;
        int chunkBytes = lv.ChunkZ * lv.ChunkY * lv.ChunkX * _bytesPerVoxel;
        var buffer = ArrayPool<byte>.Shared.Rent(chunkBytes);
        try
        {
            var zFolder = Path.Combine(LevelFolder(level.Index), level.SlabIndex.ToString(System.Globalization.CultureInfo.InvariantCulture));
            for (int cy = 0; cy < chunksY; cy++)
            {
                var yFolder = Path.Combine(zFolder, cy.ToString(System.Globalization.CultureInfo.InvariantCulture));
                Directory.CreateDirectory(yFolder);
                for (int cx = 0; cx < chunksX; cx++)
                {
                    var chunk = buffer.AsSpan(0, chunkBytes);
                    chunk.Clear(); // fill value 0 past the array's edges
                    int y0 = cy * lv.ChunkY, x0 = cx * lv.ChunkX;
                    int rows = Math.Min(lv.ChunkY, lv.Ny - y0), columns = Math.Min(lv.ChunkX, lv.Nx - x0);
                    for (int z = 0; z < level.InSlab; z++)
                        for (int y = 0; y < rows; y++)
                        {
                            var source = level.Slab.AsSpan((z * lv.Ny + y0 + y) * lv.Nx + x0, columns);
                            int at = ((z * lv.ChunkY) + y) * lv.ChunkX * _bytesPerVoxel;
                            if (_bytesPerVoxel == 1)
                                for (int x = 0; x < columns; x++) chunk[at + x] = (byte)source[x];
                            else
                                for (int x = 0; x < columns; x++)
                                    System.Buffers.Binary.BinaryPrimitives.WriteUInt16LittleEndian(chunk.Slice(at + 2 * x, 2), source[x]);
                        }
                    WriteChunk(Path.Combine(yFolder, cx.ToString(System.Globalization.CultureInfo.InvariantCulture)), chunk);
                }
            }
        }
        finally
        {
            ArrayPool<byte>.Shared.Return(buffer);
        }
        level.InSlab = 0;
        level.SlabIndex++;
    }

    private static void WriteChunk(string path, ReadOnlySpan<byte> chunk)
    {
        using var file = new FileStream(path, FileMode.CreateNew, FileAccess.Write, FileShare.None, 1 << 16);
        using (var zlib = new ZLibStream(file, new ZLibCompressionOptions { CompressionLevel = ZlibLevel }, leaveOpen: true))
            zlib.Write(chunk);
        file.Flush(flushToDisk: true);
    }

    private string LevelFolder(int index) => Path.Combine(_folder, index.ToString(System.Globalization.CultureInfo.InvariantCulture));

    private void WriteArrayMetadata(LevelState level)
    {
        var lv = level.Level;
        WriteJson(Path.Combine(LevelFolder(level.Index), ".zarray"), w =>
        {
            w.WriteStartObject();
            w.WriteNumber("zarr_format", 2);
            WriteInts(w, "shape", lv.Nz, lv.Ny, lv.Nx);
            WriteInts(w, "chunks", lv.ChunkZ, lv.ChunkY, lv.ChunkX);
            w.WriteString("dtype", _bytesPerVoxel == 1 ? "|u1" : "<u2");
            w.WriteStartObject("compressor");
            w.WriteString("id", "zlib");
            w.WriteNumber("level", ZlibLevel);
            w.WriteEndObject();
            w.WriteNumber("fill_value", 0);
            w.WriteString("order", "C");
            w.WriteNull("filters");
            w.WriteString("dimension_separator", "/");
            w.WriteEndObject();
        });
    }

    private void WriteAttributes(Utf8JsonWriter w)
    {
        w.WriteStartObject();
        w.WriteStartArray("multiscales");
        w.WriteStartObject();
        w.WriteString("version", "0.4");
        w.WriteString("name", _description.Name);
        w.WriteStartArray("axes");
        foreach (var axis in new[] { "z", "y", "x" })
        {
            w.WriteStartObject();
            w.WriteString("name", axis);
            w.WriteString("type", "space");
            w.WriteString("unit", "micrometer");
            w.WriteEndObject();
        }
        w.WriteEndArray();
        w.WriteStartArray("datasets");
        foreach (var level in _levels)
        {
            w.WriteStartObject();
            w.WriteString("path", level.Index.ToString(System.Globalization.CultureInfo.InvariantCulture));
            w.WriteStartArray("coordinateTransformations");
            w.WriteStartObject();
            w.WriteString("type", "scale");
            WriteDoubles(w, "scale", _layout.Scale(level.Level));
            w.WriteEndObject();
            w.WriteStartObject();
            w.WriteString("type", "translation");
            WriteDoubles(w, "translation", _layout.Translation(level.Level));
            w.WriteEndObject();
            w.WriteEndArray();
            w.WriteEndObject();
        }
        w.WriteEndArray();
        w.WriteString("type", "mean");
        w.WriteStartObject("metadata");
        w.WriteString("method", "block mean of the level before, over 2 voxels along each axis whose scale doubles (1 at an odd edge), rounded half up");
        w.WriteEndObject();
        w.WriteEndObject();
        w.WriteEndArray();

        w.WriteStartObject(AttributesKey);
        w.WriteString("description", _description.Description);
        w.WriteString("index_order", "array index [z, y, x] of level 0 is NIfTI voxel (i, j, k) = (x, y, z)");
        w.WriteString("affine_maps", "NIfTI voxel (i, j, k, 1) to RAS+ millimetres (the NIfTI output's sform); the level-0 scale is its column lengths in micrometres");
        w.WriteStartArray("affine");
        foreach (var row in _description.Affine.ToRows()) WriteDoubles(w, null, row);
        w.WriteEndArray();
        w.WriteString("axis_codes", _description.Affine.AxisCodes.Code);
        w.WriteEndObject();
        w.WriteEndObject();
    }

    private static void WriteInts(Utf8JsonWriter w, string name, params int[] values)
    {
        w.WriteStartArray(name);
        foreach (var v in values) w.WriteNumberValue(v);
        w.WriteEndArray();
    }

    private static void WriteDoubles(Utf8JsonWriter w, string? name, double[] values)
    {
        if (name is null) w.WriteStartArray(); else w.WriteStartArray(name);
        foreach (var v in values) w.WriteNumberValue(v);
        w.WriteEndArray();
    }

    private static void WriteJson(string path, Action<Utf8JsonWriter> write)
    {
        using var file = new FileStream(path, FileMode.CreateNew, FileAccess.Write, FileShare.None, 1 << 12);
        using (var json = new Utf8JsonWriter(file, new JsonWriterOptions { Indented = true, Encoder = System.Text.Encodings.Web.JavaScriptEncoder.UnsafeRelaxedJsonEscaping }))
            write(json);
        file.WriteByte((byte)'\n');
        file.Flush(flushToDisk: true);
    }

    /// <summary>One level's share of the stream: its slab of planes waiting to be cut into chunks, and its sums for the next level.</summary>
    private sealed class LevelState(OmeZarrLevel level, int index)
    {
        public OmeZarrLevel Level { get; } = level;
        public int Index { get; } = index;
        public ushort[] Slab { get; } = new ushort[level.ChunkZ * level.Ny * level.Nx];
        /// <summary>Sums of this level's planes over the next level's voxels (sized when the next level is known).</summary>
        public uint[]? Sums { get; set; }
        public int InSlab { get; set; }
        public int SlabIndex { get; set; }
        public int PlanesTaken { get; set; }
        /// <summary>This level's planes summed into <see cref="Sums"/> so far (the next level's block depth at most).</summary>
        public int Pending { get; set; }
    }
}
