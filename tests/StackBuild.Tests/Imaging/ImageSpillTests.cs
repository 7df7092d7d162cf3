using StackBuild.Imaging;
using StackBuild.Pipeline;
using StackBuild.Register;
using StackBuild.Series;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// The build's working images kept in a scratch file (<see cref="ImageSpill"/>), so that its memory does not grow with the
/// number of sections (issue 15): what is read back is the image that was kept, to the bit, and the spill itself does not
/// keep the pixels in memory.
/// </summary>
public sealed class ImageSpillTests
{
    private static GrayImage Awkward(int width, int height)
    {
        var rng = new Random(3);
        var image = new GrayImage(width, height);
        for (int i = 0; i < image.Pixels.Length; i++) image.Pixels[i] = (float)(rng.NextDouble() * 2 - 0.5);
        // Values whose bits a text or a rounding round trip would change.
        image.Pixels[0] = -0f;
        image.Pixels[1] = float.Epsilon;
        image.Pixels[2] = float.NaN;
        image.Pixels[3] = 1f / 3;
        return image;
    }

    [Fact]
    public void AnImageReadBackFromTheScratchFileIsTheOneKeptToTheBit()
    {
        using var spill = ImageSpill.Create();
        Assert.True(spill.OnDisk, "no scratch file could be made in the temporary folder; the tests need a writable one");
        var images = Enumerable.Range(0, 5).Select(n => Awkward(37 + n, 23 + 2 * n)).ToList();
        var held = images.Select(spill.Hold).ToList();
        Assert.Equal(images.Sum(i => 4L * i.Pixels.Length), spill.BytesWritten);
        for (int n = 0; n < images.Count; n++)
        {
            Assert.Equal((images[n].Width, images[n].Height), (held[n].Width, held[n].Height));
            var back = held[n].Load();
            Assert.Equal(images[n].Pixels.Select(BitConverter.SingleToInt32Bits), back.Pixels.Select(BitConverter.SingleToInt32Bits));
        }
    }

    [Fact]
    public void TheSpillDoesNotKeepThePixelsInMemory()
    {
        using var spill = ImageSpill.Create();
        Assert.True(spill.OnDisk, "no scratch file could be made in the temporary folder; the tests need a writable one");
        var (held, written) = HoldAndForget(spill);
        GC.Collect();
        GC.WaitForPendingFinalizers();
        GC.Collect();
        Assert.False(written.TryGetTarget(out _), "the image given to the spill is still alive: something holds its pixels");
        Assert.Equal(Awkward(64, 48).Pixels.Select(BitConverter.SingleToInt32Bits), held.Load().Pixels.Select(BitConverter.SingleToInt32Bits));

        // Kept in memory, by contrast, the image stays (and is the same object).
        using var inMemory = ImageSpill.InMemory();
        var (kept, alive) = HoldAndForget(inMemory);
        GC.Collect();
        Assert.True(alive.TryGetTarget(out var same));
        Assert.Same(same, kept.Load());
    }

    [System.Runtime.CompilerServices.MethodImpl(System.Runtime.CompilerServices.MethodImplOptions.NoInlining)]
    private static (HeldImage, WeakReference<GrayImage>) HoldAndForget(ImageSpill spill)
    {
        // Made here, not by the caller, so that no frame of the test still refers to it (unoptimised code keeps temporaries).
        var image = Awkward(64, 48);
        return (spill.Hold(image), new WeakReference<GrayImage>(image));
    }

    [Fact]
    public void AFullDiskKeepsImagesInMemoryInstead()
    {
        // Linux's /dev/full refuses every write with "no space left on device" (man 4 full).
        if (!File.Exists("/dev/full")) return;
        using var spill = ImageSpill.Over("/dev/full");
        Assert.True(spill.OnDisk);
        var image = Awkward(30, 20);
        var held = spill.Hold(image);
        Assert.False(spill.OnDisk);
        Assert.Same(image, held.Load());
        var later = Awkward(12, 9);
        Assert.Same(later, spill.Hold(later).Load());
    }

    [Fact]
    public void SectionsPreparedThroughTheScratchFileAreTheSameAsInMemory()
    {
        // The demo series, prepared once with its working images on disk and once in memory.
        var options = new BuildOptions { Input = RepositoryPaths.DemoSeries };
        var series = SeriesReader.Open(options.Input, options.Series);
        var plan = PlanStage.Plan(options, series, null);
        using var onDisk = PrepareStage.Prepare(plan, SectionFiles.Instance, null, ImageSpill.Create());
        using var inMemory = PrepareStage.Prepare(plan, SectionFiles.Instance, null, ImageSpill.InMemory());
        Assert.True(onDisk.Spill.OnDisk);
        Assert.False(inMemory.Spill.OnDisk);
        Assert.Equal(inMemory.Sections.Sum(w => 4L * w.Width * w.Height), onDisk.Spill.BytesWritten);
        Assert.Equal(inMemory.Count, onDisk.Count);
        for (int n = 0; n < onDisk.Count; n++)
        {
            Assert.Equal(inMemory[n].Image.Pixels, onDisk[n].Image.Pixels);
            Assert.Equal(inMemory[n].Prepared!.WorkImage.Pixels, onDisk[n].Prepared!.WorkImage.Pixels);
            Assert.Equal(inMemory[n].Prepared!.TissueMask, onDisk[n].Prepared!.TissueMask);
        }
        // A pair registers the same either way.
        var a = SectionRegistration.Register(inMemory[0].Prepared!, inMemory[1].Prepared!, plan.Options.Registration);
        var b = SectionRegistration.Register(onDisk[0].Prepared!, onDisk[1].Prepared!, plan.Options.Registration);
        Assert.Equal(a.Best, b.Best);
        Assert.Equal(a.Confidence, b.Confidence);
    }
}
