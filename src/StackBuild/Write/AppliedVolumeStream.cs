using System.Buffers.Binary;
using System.Text.Json;
using StackBuild.Geometry;
using StackBuild.IO;
using StackBuild.Nifti;
using StackBuild.Pipeline;

namespace StackBuild.Write;

/// <summary>
/// One applied volume written as it is rendered: its paths, the image set's bit depth, and one render per channel (one for
/// a gray volume, red, green and blue for an RGB24 volume). A render is given a factory of plane sinks (the finished plane
/// count and affine in, a sink out), renders into it and returns its record.
/// </summary>
public sealed record StreamedApplied(BuildOutputPaths Paths, int Bits, IReadOnlyList<Func<Func<int, Affine, RenderStage.IPlaneSink>, ApplyRecord>> Channels);

/// <summary>
/// Writes applied volumes without holding them: each finished plane goes, in its stored type (uint8 or uint16), into a
/// hidden temporary file beside the output as soon as it is made, and the NIfTI-1 file is then written from it (header
/// first, which needs the data's range) under its own temporary name; all outputs and their sidecars are put in place
/// together (<see cref="OutputSet"/>). Memory: the render's few planes and one section, whatever the volume's size; disk:
/// the uncompressed volume once more while it is written.
/// </summary>
public static class AppliedVolumeStream
{
    public static IReadOnlyList<ApplyRecord> Write(IReadOnlyList<StreamedApplied> outputs, Action<string>? beforeRename = null)
    {
        foreach (var o in outputs) o.Paths.CheckWritable();
        using var set = new OutputSet(beforeRename);
        var records = new List<ApplyRecord>();
        foreach (var output in outputs)
        {
            var raws = new List<RawPlanes>();
            try
            {
                ApplyRecord? record = null;
                foreach (var render in output.Channels)
                {
                    var raw = new RawPlanes(output.Paths.Volume, output.Bits > 8 ? 2 : 1);
                    raws.Add(raw);
                    record = render(raw.Open);
                    raw.Close();
                }
                var (nx, ny, nz) = (record!.Dimensions[0], record.Dimensions[1], record.Dimensions[2]);
                var affine = Affine.FromRows(record.Affine[0], record.Affine[1], record.Affine[2]);
                var options = new NiftiWriteOptions { Description = "StackBuild placements applied to another image set" };
                string volume;
                if (output.Paths.IsOmeZarr)
                {
                    // OME-Zarr: the finished planes read back into one volume (held whole while its levels are written).
                    if (raws.Count != 1)
                        throw new InputProblemException(output.Paths.Volume, "an OME-Zarr image holds one gray channel, not an RGB24 colour volume",
                            "write --channels rgb as .nii.gz, or give --channels split for one OME-Zarr image per channel");
                    var whole = raws[0].ToVolume(nx, ny, nz, affine);
                    var type = raws[0].BytesPerVoxel == 2 ? Zarr.ZarrElementType.UInt16 : Zarr.ZarrElementType.UInt8;
                    string name = Path.GetFileName(output.Paths.Volume)[..^BuildOutputPaths.OmeZarrSuffix.Length];
                    volume = set.StageFolder(output.Paths.Volume, folder => Zarr.OmeZarrWriter.Write(folder, whole, type, name, options.Description!));
                }
                else if (raws.Count == 1)
                {
                    var raw = raws[0];
                    volume = set.Stage(output.Paths.Volume, s => NiftiFile.WriteStored(s, NiftiFile.CompressedName(output.Paths.Volume), nx, ny, nz, affine,
                        raw.BytesPerVoxel == 2 ? NiftiDataType.UInt16 : NiftiDataType.UInt8, raw.Min, raw.Max, raw.CopyTo, options));
                }
                else
                {
                    if (raws.Count != 3 || raws.Any(r => r.BytesPerVoxel != 1)) throw new ArgumentException("RGB24 takes three 8-bit channels.", nameof(outputs));
                    volume = set.Stage(output.Paths.Volume, s => NiftiFile.WriteStored(s, NiftiFile.CompressedName(output.Paths.Volume), nx, ny, nz, affine,
                        NiftiDataType.Rgb24, raws.Min(r => r.Min), raws.Max(r => r.Max), target => RawPlanes.Interleave(raws, (long)nx * ny, target), options));
                    record = record with { Channel = "rgb" };
                }
                records.Add(record with { Volume = Path.GetFileName(output.Paths.Volume), VolumeSha256 = SidecarFile.Sha256(volume) });
            }
            finally
            {
                foreach (var raw in raws) raw.Dispose();
            }
        }
        for (int i = 0; i < outputs.Count; i++)
        {
            var text = JsonSerializer.Serialize(records[i], BuildWriter.JsonOptions) + "\n";
            set.Stage(outputs[i].Paths.Sidecar, s => { using var w = new StreamWriter(s, new System.Text.UTF8Encoding(false), 1 << 16, leaveOpen: true); w.Write(text); });
        }
        set.Commit();
        return records;
    }

    /// <summary>Finished planes in their stored type, in a hidden temporary file beside the output, with their range.</summary>
    private sealed class RawPlanes : RenderStage.IPlaneSink, IDisposable
    {
        private readonly string _path;
        private FileStream? _file;
        private byte[] _buffer = [];
        public int BytesPerVoxel { get; }
        public double Min { get; private set; } = double.PositiveInfinity;
        public double Max { get; private set; } = double.NegativeInfinity;

        public RawPlanes(string output, int bytesPerVoxel)
        {
            BytesPerVoxel = bytesPerVoxel;
            AtomicFile.RemoveLeftovers(output);
            _path = AtomicFile.TemporaryName(Path.GetFullPath(output), "part");
            _file = new FileStream(_path, FileMode.CreateNew, FileAccess.ReadWrite, FileShare.None, 1 << 20);
        }

        public RenderStage.IPlaneSink Open(int planes, Affine affine) => this;

        public void Accept(int k, ReadOnlySpan<float> plane)
        {
            if (_buffer.Length != plane.Length * BytesPerVoxel) _buffer = new byte[plane.Length * BytesPerVoxel];
            float min = float.PositiveInfinity, max = float.NegativeInfinity;
            for (int i = 0; i < plane.Length; i++)
            {
                float v = plane[i]; // rounded and clamped to the type's range by the render
                if (v < min) min = v;
                if (v > max) max = v;
                if (BytesPerVoxel == 1) _buffer[i] = (byte)v;
                else BinaryPrimitives.WriteUInt16LittleEndian(_buffer.AsSpan(2 * i), (ushort)v);
            }
            Min = Math.Min(Min, min);
            Max = Math.Max(Max, max);
            _file!.Write(_buffer);
        }

        public void Close() => _file!.Flush();

        /// <summary>The planes read back as one volume (float voxels of the stored values).</summary>
        public Imaging.Volume ToVolume(int nx, int ny, int nz, Affine affine)
        {
            var v = new Imaging.Volume(nx, ny, nz, affine);
            _file!.Position = 0;
            var plane = new byte[(long)nx * ny * BytesPerVoxel];
            var voxels = v.Voxels;
            long at = 0;
            for (int k = 0; k < nz; k++)
            {
                _file.ReadExactly(plane);
                for (int i = 0; i < nx * ny; i++, at++)
                    voxels[at] = BytesPerVoxel == 1 ? plane[i] : BinaryPrimitives.ReadUInt16LittleEndian(plane.AsSpan(2 * i));
            }
            return v;
        }

        public void CopyTo(Stream target)
        {
            _file!.Position = 0;
            _file.CopyTo(target, 1 << 20);
        }

        /// <summary>Red, green and blue bytes of each voxel in turn (RGB24), a plane-sized piece at a time.</summary>
        public static void Interleave(IReadOnlyList<RawPlanes> channels, long planeVoxels, Stream target)
        {
            foreach (var c in channels) c._file!.Position = 0;
            var pieces = channels.Select(_ => new byte[planeVoxels]).ToArray();
            var rgb = new byte[3 * planeVoxels];
            long total = channels[0]._file!.Length;
            for (long done = 0; done < total; done += planeVoxels)
            {
                for (int c = 0; c < 3; c++) channels[c]._file!.ReadExactly(pieces[c]);
                for (long i = 0; i < planeVoxels; i++)
                {
                    rgb[3 * i] = pieces[0][i];
                    rgb[3 * i + 1] = pieces[1][i];
                    rgb[3 * i + 2] = pieces[2][i];
                }
                target.Write(rgb);
            }
        }

        public void Dispose()
        {
            _file?.Dispose();
            _file = null;
            AtomicFile.Discard(_path);
        }
    }
}
