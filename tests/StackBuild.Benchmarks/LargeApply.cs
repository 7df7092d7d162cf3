using System.Globalization;
using BitMiracle.LibTiff.Classic;
using StackBuild.Demo;
using StackBuild.Imaging;
using StackBuild.Nifti;
using static StackBuild.Benchmarks.BuildVsLibrary;

namespace StackBuild.Benchmarks;

/// <summary>
/// Peak memory of <c>stackbuild apply</c> on large sections (the build's gaps filled linearly by default: --fill flow fills
/// them by optical flow at the output's full size, a cost of its own, see docs/benchmarks.md) against the bound "output planes being written + 2 sections +
/// 200 MB" (docs/benchmarks.md, "Memory of apply on large sections"). Generates a demo specimen (seed 5) of
/// <c>--sections</c> sections at 10 µm pixels (<c>--size</c> wide, 0.8 × as high), builds it with the Release CLI, then writes the
/// same sections at <c>--factor</c> × the pixel count (1 µm pixels, 8000 × 6400 by default: each scan upsampled bilinearly,
/// the field kept) as 8-bit striped, uncompressed TIFFs, one row at a time; and runs <c>apply --pixel-size 1
/// --output-pixel-size 1</c> on them under <c>/usr/bin/time -v</c> (.nii, so gzip time is not measured). Prints the grid,
/// the sizes the bound is made of, the peak resident memory and its ratio to the bound.
/// <code>
/// dotnet build -c Release src/StackBuild.Cli
/// dotnet run -c Release --project tests/StackBuild.Benchmarks -- large-apply [--sections 40] [--size 800] [--factor 10]
///     [--work DIR] [--keep] [--extra "apply options"] [--cli PATH/stackbuild] [--fill linear|flow|none]
/// </code>
/// The work folder holds about sections × size² × factor² × 0.8 bytes of TIFF and as much again of output while it runs;
/// it is removed at the end unless --keep.
/// </summary>
public static class LargeApply
{
    public static void Run(string[] args)
    {
        int sections = 40, size = 800, factor = 10;
        string? work = null, extra = null, cli = null;
        string fill = "linear";
        bool keep = false;
        for (int i = 0; i < args.Length; i++)
        {
            string Next() => i + 1 < args.Length ? args[++i] : throw new ArgumentException($"{args[i]} needs a value");
            switch (args[i])
            {
                case "--sections": sections = int.Parse(Next(), CultureInfo.InvariantCulture); break;
                case "--size": size = int.Parse(Next(), CultureInfo.InvariantCulture); break;
                case "--factor": factor = int.Parse(Next(), CultureInfo.InvariantCulture); break;
                case "--work": work = Next(); break;
                case "--keep": keep = true; break;
                case "--extra": extra = Next(); break;
                case "--cli": cli = Next(); break;
                case "--fill": fill = Next(); break;
                default: throw new ArgumentException($"unknown option {args[i]}");
            }
        }
        cli ??= Path.Combine(RepositoryRoot(), "src/StackBuild.Cli/bin/Release/net10.0/stackbuild");
        work ??= Directory.CreateTempSubdirectory("stackbuild-large-").FullName;
        Directory.CreateDirectory(work);
        string small = Path.Combine(work, "work"), large = Path.Combine(work, "full");
        try
        {
            Console.WriteLine($"machine: {Environment.ProcessorCount} cores, load average before: {LoadAverage()}");
            var specimen = DemoSpecimenMaker.Make(new DemoOptions { Seed = 5, Sections = sections, Size = size, PixelSizeUm = 10 });
            if (!Directory.Exists(small)) DemoSpecimenMaker.WriteFiles(specimen, small);
            var build = Path.Combine(work, "work.nii.gz");
            if (!File.Exists(Path.Combine(work, "work.json"))) Check(RunProcess(cli, ["build", small, "-o", build, "--fill", fill]), "stackbuild build");
            Directory.CreateDirectory(large);
            int written = 0, width = 0, height = 0;
            foreach (var (section, scan) in specimen.Sections.Zip(specimen.Images))
            {
                if (section.FileName is null || scan is null) continue;
                var path = Path.Combine(large, Path.ChangeExtension(section.FileName, ".tif"));
                (width, height) = (scan.Width * factor, scan.Height * factor);
                if (!File.Exists(path)) WriteUpsampled(path, scan, factor);
                written++;
            }
            Console.WriteLine(F($"sections: {written} TIFFs of {width} × {height} px (8-bit gray, striped), built at {size} px wide"));

            var output = Path.Combine(work, "full.nii");
            string[] command = [cli, "apply", Path.Combine(work, "work.json"), "--images", large, "--pixel-size", "1", "--output-pixel-size", "1", "-o", output,
                .. (extra ?? "").Split(' ', StringSplitOptions.RemoveEmptyEntries)];
            var measured = Timed(command, Path.Combine(work, "time.txt"));
            var header = NiftiFile.ReadHeader(output);
            long nx = header.Shape[0], ny = header.Shape[1], nz = header.Shape[2];
            double mb = 1048576.0;
            double planeStored = nx * ny * (header.BitPix / 8) / mb, planeFloat = nx * ny * 4 / mb;
            double sectionStored = (double)width * height / mb, sectionFloat = 4.0 * width * height / mb;
            Console.WriteLine(F($"command: {string.Join(' ', command.Select(a => a.Replace(work, "$WORK", StringComparison.Ordinal)))}"));
            Console.WriteLine(F($"output: {nx} × {ny} × {nz} voxels, {header.DataType}; one plane {planeStored:0} MB stored, {planeFloat:0} MB as float32"));
            Console.WriteLine(F($"one section: {sectionStored:0} MB stored (8-bit), {sectionFloat:0} MB as float32 (what the render samples)"));
            Console.WriteLine(F($"apply: wall {measured.Wall:0.0} s, CPU {measured.Cpu:0.0} s, peak RSS {measured.PeakRssMb:0} MB"));
            foreach (var (name, bound) in new[]
            {
                ("1 plane + 2 sections stored + 200 MB", planeStored + 2 * sectionStored + 200),
                ("2 planes + 2 sections as float32 + 200 MB", 2 * planeFloat + 2 * sectionFloat + 200),
                ("4 planes + 2 sections as float32 + 200 MB", 4 * planeFloat + 2 * sectionFloat + 200),
            })
                Console.WriteLine(F($"bound {name}: {bound:0} MB; peak / bound = {measured.PeakRssMb / bound:0.00}"));
            Console.WriteLine($"load average after: {LoadAverage()}");
        }
        finally
        {
            if (!keep) try { Directory.Delete(work, recursive: true); } catch (IOException) { }
        }
    }

    /// <summary>The scan at <paramref name="factor"/> × its pixel count over the same field (bilinear, pixel edges kept), as an
    /// 8-bit striped uncompressed TIFF written a row at a time.</summary>
    private static void WriteUpsampled(string path, GrayImage scan, int factor)
    {
        int w = scan.Width * factor, h = scan.Height * factor;
        var temporary = path + ".tmp";
        using (var tiff = Tiff.Open(temporary, "w") ?? throw new InvalidOperationException("cannot create " + temporary))
        {
            tiff.SetField(TiffTag.IMAGEWIDTH, w);
            tiff.SetField(TiffTag.IMAGELENGTH, h);
            tiff.SetField(TiffTag.BITSPERSAMPLE, 8);
            tiff.SetField(TiffTag.SAMPLESPERPIXEL, 1);
            tiff.SetField(TiffTag.PHOTOMETRIC, Photometric.MINISBLACK);
            tiff.SetField(TiffTag.PLANARCONFIG, PlanarConfig.CONTIG);
            tiff.SetField(TiffTag.COMPRESSION, Compression.NONE);
            tiff.SetField(TiffTag.ROWSPERSTRIP, 64);
            var row = new byte[w];
            for (int y = 0; y < h; y++)
            {
                double sy = (y + 0.5) / factor - 0.5;
                for (int x = 0; x < w; x++)
                {
                    double sx = (x + 0.5) / factor - 0.5;
                    // The scan holds grey levels 0–255. A faint texture so neighbouring pixels differ: ±2 levels from a hash of the position.
                    int texture = (int)((uint)(x * 73856093 ^ y * 19349663) % 5) - 2;
                    row[x] = (byte)Math.Clamp(Math.Round(Bilinear.SampleEdgeClamped(scan, sx, sy)) + texture, 0, 255);
                }
                tiff.WriteScanline(row, y);
            }
        }
        File.Move(temporary, path, overwrite: true);
    }
}
