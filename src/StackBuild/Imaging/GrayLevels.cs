namespace StackBuild.Imaging;

/// <summary>
/// Look-up tables from stored sample values to gray values in [0, 1]. A gray sample maps exactly to
/// value / 255 or value / 65535 (rounded once to float); a colour pixel is the sum of one table per channel.
/// Tables are built once and shared; they are never written after construction.
/// </summary>
internal static class GrayLevels
{
    /// <summary>ITU-R BT.709 luma weights (Recommendation ITU-R BT.709-6, item 3.2), as used by ImageSharp for gray.</summary>
    public const double LumaRed = 0.2126, LumaGreen = 0.7152, LumaBlue = 0.0722;

    public static readonly float[] Unit8 = Table(255, 1.0);
    public static readonly float[] Unit16 = Table(65535, 1.0);

    private static readonly Lazy<(float[], float[], float[])>[] Colour =
    [
        .. from bits in new[] { 8, 16 }
           from channel in Enum.GetValues<GrayChannel>()
           select new Lazy<(float[], float[], float[])>(() => BuildChannelTables(channel, bits)),
    ];

    public static (double Red, double Green, double Blue) Weights(GrayChannel channel) => channel switch
    {
        GrayChannel.Red => (1, 0, 0),
        GrayChannel.Green => (0, 1, 0),
        GrayChannel.Blue => (0, 0, 1),
        _ => (LumaRed, LumaGreen, LumaBlue),
    };

    /// <summary>One table per colour channel (red, green, blue) whose sum is the gray value asked for.</summary>
    public static (float[] Red, float[] Green, float[] Blue) ChannelTables(GrayChannel channel, int bits)
    {
        int depth = bits switch { 8 => 0, 16 => 1, _ => throw new ArgumentOutOfRangeException(nameof(bits)) };
        return Colour[depth * Enum.GetValues<GrayChannel>().Length + (int)channel].Value;
    }

    private static (float[], float[], float[]) BuildChannelTables(GrayChannel channel, int bits)
    {
        int max = (1 << bits) - 1;
        var (r, g, b) = Weights(channel);
        return (Table(max, r), Table(max, g), Table(max, b));
    }

    /// <summary>Entry v is weight · v / max; a weight of exactly 1 gives the unit table, 0 gives zeros.</summary>
    public static float[] Table(int max, double weight)
    {
        var table = new float[max + 1];
        if (weight == 0) return table;
        for (int v = 0; v <= max; v++) table[v] = (float)(weight * v / max);
        return table;
    }
}
