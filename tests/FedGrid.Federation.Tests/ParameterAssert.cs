namespace FedGrid.Federation.Tests;

/// <summary>Comparisons of parameter vectors shared by the federation tests.</summary>
internal static class ParameterAssert
{
    /// <summary>
    /// Asserts that two parameter vectors have the same length and agree to 1e-6 of the largest |expected| parameter
    /// (fixed-point rounding of masked sums and uploads stays far below it).
    /// </summary>
    /// <param name="expected">The reference parameters.</param>
    /// <param name="actual">The parameters checked.</param>
    /// <param name="what">Named in the failure message.</param>
    public static void Close(ReadOnlySpan<float> expected, ReadOnlySpan<float> actual, string what)
    {
        Assert.Equal(expected.Length, actual.Length);
        double worst = 0, scale = 0;
        for (int i = 0; i < expected.Length; i++)
        {
            worst = Math.Max(worst, Math.Abs(expected[i] - actual[i]));
            scale = Math.Max(scale, Math.Abs(expected[i]));
        }
        Assert.True(worst <= 1e-6 * scale, $"{what}: largest difference {worst:G3} against largest |parameter| {scale:G3}");
    }
}
