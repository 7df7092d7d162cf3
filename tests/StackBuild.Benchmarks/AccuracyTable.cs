using StackBuild.Evaluate;

namespace StackBuild.Benchmarks;

/// <summary>
/// Reproduces docs/accuracy.md: three public volumes from Debian's mricron-data (a human T1 MRI, ch2bet; a macaque T1
/// template, inia19-t1-brain; a human template of another contrast, jhu189), each cut along two voxel axes over its whole
/// extent by <c>stackbuild cut</c>'s defaults (every 2nd plane), built plain and with a template made from the same
/// volume. Options: <c>--only NAME</c> runs the cases whose name contains NAME; <c>--work DIR</c> keeps the series there;
/// <c>--seed N</c> cuts every case with seed N (placements, face-down and lost sections; the development seed is 1);
/// <c>--held-out</c> adds the cases never looked at during development (<see cref="AccuracyRun.HeldOutCases"/>);
/// <c>--upscale F</c> cuts F scan pixels per voxel (larger scans); <c>--smoothing S</c> solves all placements at once (the
/// build's <c>--smoothing</c>) instead of the neighbour chain; <c>--tilt X,Y</c> cuts with the knife tilted (degrees about the
/// plane's x and y axes); <c>--single-level</c> registers without the half-size
/// search (<see cref="Register.RegistrationOptions.CoarseToFine"/> off), for comparison.
/// </summary>
public static class AccuracyTable
{
    public static void Run(string[] args)
    {
        string? only = null, work = null;
        int? seed = null;
        bool heldOut = false, plainToo = true, templateToo = true, coarseToFine = true;
        double upscale = 1;
        double? smoothing = null;
        double tiltX = 0, tiltY = 0;
        for (int i = 0; i < args.Length; i++)
        {
            if (args[i] == "--only" && i + 1 < args.Length) only = args[++i];
            else if (args[i] == "--work" && i + 1 < args.Length) work = args[++i];
            else if (args[i] == "--seed" && i + 1 < args.Length) seed = int.Parse(args[++i], System.Globalization.CultureInfo.InvariantCulture);
            else if (args[i] == "--held-out") heldOut = true;
            else if (args[i] == "--template-only") plainToo = false;
            else if (args[i] == "--plain-only") templateToo = false;
            else if (args[i] == "--upscale" && i + 1 < args.Length) upscale = double.Parse(args[++i], System.Globalization.CultureInfo.InvariantCulture);
            else if (args[i] == "--single-level") coarseToFine = false;
            else if (args[i] == "--smoothing" && i + 1 < args.Length) smoothing = double.Parse(args[++i], System.Globalization.CultureInfo.InvariantCulture);
            else if (args[i] == "--tilt" && i + 1 < args.Length)
            {
                var xy = args[++i].Split(',').Select(v => double.Parse(v, System.Globalization.CultureInfo.InvariantCulture)).ToArray();
                (tiltX, tiltY) = (xy[0], xy[1]);
            }
            else throw new ArgumentException($"unknown option {args[i]}: use --only NAME, --work DIR, --seed N, --held-out, --template-only, --plain-only, --upscale F, --single-level, --smoothing S, --tilt X,Y");
        }
        bool keep = work is not null;
        work ??= Directory.CreateTempSubdirectory("sb-accuracy-").FullName;
        Directory.CreateDirectory(work);
        var rows = new List<AccuracyRow>();
        var progress = new Progress<string>(Console.Error.WriteLine);
        try
        {
            var cases = AccuracyRun.PublicCases.Concat(heldOut ? AccuracyRun.HeldOutCases : []).Select(c => seed is int s ? c with { Seed = s } : c)
                .Select(c => c with { Upscale = upscale, CoarseToFine = coarseToFine, Smoothing = smoothing, TiltXDegrees = tiltX, TiltYDegrees = tiltY });
            foreach (var c in cases.Where(c => only is null || c.Name.Contains(only, StringComparison.OrdinalIgnoreCase)))
            {
                var these = AccuracyRun.Run(c, work, progress, plainToo, templateToo);
                rows.AddRange(these);
                foreach (var r in these)
                {
                    Console.Error.WriteLine($"{r.Case} {r.Build}: per section (number: error px, neighbour error px, mirror wrong):");
                    Console.Error.WriteLine("  " + string.Join("; ", r.Evaluation.Sections.Select(s => $"{s.Number}: {s.ErrorPx:0.0}, {s.PairErrorPx:0.0}{(s.MirrorWrong ? " M" : "")}")));
                }
            }
            Console.WriteLine(AccuracyRun.Markdown(rows));
        }
        finally
        {
            if (!keep) try { Directory.Delete(work, true); } catch (IOException) { }
        }
    }
}
