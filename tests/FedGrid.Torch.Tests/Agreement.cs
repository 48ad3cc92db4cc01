namespace FedGrid.Torch.Tests;

/// <summary>Relative agreement of two vectors, printed into the test log and asserted.</summary>
internal static class Agreement
{
    /// <summary>‖a − b‖∞ / ‖b‖∞ (the reference b non-zero).</summary>
    public static double MaxRelative(ReadOnlySpan<float> ours, ReadOnlySpan<double> reference)
    {
        Assert.Equal(reference.Length, ours.Length);
        double maxDiff = 0, maxRef = 0;
        for (int i = 0; i < ours.Length; i++)
        {
            maxDiff = Math.Max(maxDiff, Math.Abs(ours[i] - reference[i]));
            maxRef = Math.Max(maxRef, Math.Abs(reference[i]));
        }
        Assert.True(maxRef > 0, "reference gradient is identically zero; the check would be empty");
        return maxDiff / maxRef;
    }

    /// <summary>Largest elementwise |a − b| / max(|b|, floor·‖b‖∞): relative per entry, with a floor for entries near zero.</summary>
    public static double MaxElementwise(ReadOnlySpan<float> ours, ReadOnlySpan<double> reference, double floor = 1e-3)
    {
        double maxRef = 0;
        foreach (double r in reference)
        {
            maxRef = Math.Max(maxRef, Math.Abs(r));
        }
        double worst = 0;
        for (int i = 0; i < ours.Length; i++)
        {
            double scale = Math.Max(Math.Abs(reference[i]), floor * maxRef);
            worst = Math.Max(worst, Math.Abs(ours[i] - reference[i]) / scale);
        }
        return worst;
    }
}
