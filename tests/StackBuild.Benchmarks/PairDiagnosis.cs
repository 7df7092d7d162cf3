using System.Globalization;
using StackBuild.Demo;
using StackBuild.Geometry;
using StackBuild.Imaging;
using StackBuild.Nifti;
using StackBuild.Register;

namespace StackBuild.Benchmarks;

/// <summary>
/// Why did a pair go wrong? Cuts a volume as the accuracy table does and, for the sections FROM to TO, registers every pair
/// up to three apart and prints, for the right and the wrong relative side, the NCC registration found, and the NCC at the
/// truth's relative placement, scored as registration scores its own (<c>SectionRegistration.NccAt</c>: canvases, union of the
/// feathered tissue masks). A truth NCC above the right side's found NCC means the search failed, not the evidence. (Until
/// 2026-12-04 the truth NCC was computed here with the hard masks, which scored the truth of some pairs 0.2 above what
/// registration would: ch2 j 73←72, 0.846 against the search's own 0.620 at the truth and 0.629 found.)
/// <code>dotnet run -c Release --project tests/StackBuild.Benchmarks -- pairs VOLUME.nii.gz AXIS SEED FROM TO [EVERY]</code>
/// </summary>
public static class PairDiagnosis
{
    public static void Run(string[] args)
    {
        if (args.Length < 5)
            throw new ArgumentException("use: pairs VOLUME.nii.gz AXIS SEED FROM TO [EVERY]  (e.g. pairs /usr/share/mricron/templates/ch2bet.nii.gz k 7 1 16)");
        int seed = int.Parse(args[2], CultureInfo.InvariantCulture), from = int.Parse(args[3], CultureInfo.InvariantCulture), to = int.Parse(args[4], CultureInfo.InvariantCulture);
        int every = args.Length > 5 ? int.Parse(args[5], CultureInfo.InvariantCulture) : 2;
        // Optional after EVERY: "bright" (bright-field), "16" (16-bit), "upscale F" (F scan pixels per voxel), as the accuracy table cuts;
        // "files DIR" (below).
        bool bright = args.Skip(6).Contains("bright");
        int bits = args.Skip(6).Contains("16") ? 16 : 8;
        int at = Array.IndexOf(args, "upscale");
        double upscale = at > 5 && at + 1 < args.Length ? double.Parse(args[at + 1], CultureInfo.InvariantCulture) : 1;
        // "files DIR": the sections read from the images the cut wrote there (as a build reads them: 8- or 16-bit quantised)
        // instead of taken from the cut in memory.
        int fileAt = Array.IndexOf(args, "files");
        string? files = fileAt > 5 && fileAt + 1 < args.Length ? args[fileAt + 1] : null;
        var volume = NiftiFile.Read(args[0]).ToVolume();
        var (vi, vj, vk) = volume.Affine.VoxelSizes;
        double? pixelUm = upscale == 1 ? null : Math.Min(vi, Math.Min(vj, vk)) * 1000 / upscale;
        var series = VolumeCutter.Cut(volume, new CutOptions { Axis = args[1][0], Every = every, Seed = seed, BrightField = bright, Bits = bits, PixelSizeUm = pixelUm }, args[0]);
        // Working pixels = scan pixels: no reduction, whatever the canvas.
        var options = new RegistrationOptions { WorkSize = 1 << 16 };
        var prepared = new SortedDictionary<int, PreparedSection>();
        for (int n = Math.Max(1, from); n <= Math.Min(to, series.Sections.Count); n++)
            if (series.Scans[n - 1] is { } scan)
                prepared[n] = SectionRegistration.Prepare(files is null ? scan : SectionImageReader.ReadGray(Path.Combine(files, $"section_{n:000}.png")), options);
        var numbers = prepared.Keys.ToList();
        Console.WriteLine("moving<-fixed  tissue share  side  found NCC right / wrong  truth NCC  right side: angle error °, shift at centre px");
        for (int i = 0; i < numbers.Count; i++)
        for (int d = 1; d <= 3 && i - d >= 0; d++)
        {
            int m = numbers[i], f = numbers[i - d];
            var sm = series.Sections[m - 1];
            var sf = series.Sections[f - 1];
            var truth = sm.PlaneToImage.Inverse().Then(sf.PlaneToImage);
            bool otherSide = sm.Mirrored != sf.Mirrored;
            var r = SectionRegistration.Register(prepared[f], prepared[m], options);
            var right = r.Best.Mirrored == otherSide ? r.Best : r.OtherMirror;
            var wrong = r.Best.Mirrored == otherSide ? r.OtherMirror : r.Best;
            if (right is null || wrong is null) continue;
            double angle = ((right.RotationDegrees - truth.RotationDegrees) % 360 + 540) % 360 - 180;
            double c = (prepared[m].FullWidth - 1) / 2.0;
            var (tx, ty) = truth.Apply(c, c);
            var (rx, ry) = right.MovingToFixed.Apply(c, c);
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"{m,4}<-{f,-4}  {sm.TissueShare:0.0000}/{sf.TissueShare:0.0000}  {(otherSide ? "other" : "same "),5}  {right.Ncc,6:0.000} / {wrong.Ncc,6:0.000}  {SectionRegistration.NccAt(prepared[f], prepared[m], truth),9:0.000}  {angle,6:0.0}, {double.Hypot(tx - rx, ty - ry),5:0.0}{(wrong.Ncc > right.Ncc ? "  wrong side wins" : "")}"));
        }
    }
}
