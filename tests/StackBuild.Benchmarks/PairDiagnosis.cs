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
/// truth's relative placement (computed here over the union of both tissue masks, the same way for all three). A truth NCC
/// above the right side's found NCC means the search failed, not the evidence (docs/accuracy.md, "What changed").
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
        // Optional after EVERY: "bright" (bright-field), "16" (16-bit), "upscale F" (F scan pixels per voxel), as the accuracy table cuts.
        bool bright = args.Skip(6).Contains("bright");
        int bits = args.Skip(6).Contains("16") ? 16 : 8;
        int at = Array.IndexOf(args, "upscale");
        double upscale = at > 5 && at + 1 < args.Length ? double.Parse(args[at + 1], CultureInfo.InvariantCulture) : 1;
        var volume = NiftiFile.Read(args[0]).ToVolume();
        var (vi, vj, vk) = volume.Affine.VoxelSizes;
        double? pixelUm = upscale == 1 ? null : Math.Min(vi, Math.Min(vj, vk)) * 1000 / upscale;
        var series = VolumeCutter.Cut(volume, new CutOptions { Axis = args[1][0], Every = every, Seed = seed, BrightField = bright, Bits = bits, PixelSizeUm = pixelUm }, args[0]);
        // Working pixels = scan pixels: no reduction, whatever the canvas.
        var options = new RegistrationOptions { WorkSize = 1 << 16 };
        var prepared = new SortedDictionary<int, PreparedSection>();
        for (int n = Math.Max(1, from); n <= Math.Min(to, series.Sections.Count); n++)
            if (series.Scans[n - 1] is { } scan) prepared[n] = SectionRegistration.Prepare(scan, options);
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
                $"{m,4}<-{f,-4}  {sm.TissueShare:0.0000}/{sf.TissueShare:0.0000}  {(otherSide ? "other" : "same "),5}  {right.Ncc,6:0.000} / {wrong.Ncc,6:0.000}  {Ncc(prepared[f], prepared[m], truth),9:0.000}  {angle,6:0.0}, {double.Hypot(tx - rx, ty - ry),5:0.0}{(wrong.Ncc > right.Ncc ? "  wrong side wins" : "")}"));
        }
    }

    /// <summary>NCC of the fixed working image and the moving one laid on it by <paramref name="movingToFixed"/> (working pixels = scan pixels here), over the union of their tissue masks.</summary>
    private static double Ncc(PreparedSection fixedSection, PreparedSection moving, Transform2D movingToFixed)
    {
        var fw = fixedSection.WorkImage;
        var back = movingToFixed.Inverse();
        var warped = Resampler.Warp(moving.WorkImage, back, fw.Width, fw.Height, 0f);
        var mask = new GrayImage(moving.WorkImage.Width, moving.WorkImage.Height, moving.TissueMask.Select(t => t ? 1f : 0f).ToArray());
        var warpedMask = Resampler.Warp(mask, back, fw.Width, fw.Height, 0f);
        double sa = 0, sb = 0, saa = 0, sbb = 0, sab = 0;
        long count = 0;
        for (int i = 0; i < fw.Pixels.Length; i++)
        {
            if (!fixedSection.TissueMask[i] && warpedMask.Pixels[i] <= 0.5f) continue;
            double a = fw.Pixels[i], b = warped.Pixels[i];
            sa += a; sb += b; saa += a * a; sbb += b * b; sab += a * b;
            count++;
        }
        if (count < 16) return 0;
        double cov = sab - sa * sb / count, va = saa - sa * sa / count, vb = sbb - sb * sb / count;
        return va > 0 && vb > 0 ? cov / Math.Sqrt(va * vb) : 0;
    }
}
