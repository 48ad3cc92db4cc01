using FedGrid.Learning.Networks;

namespace FedGrid.Learning.Tests;

/// <summary>
/// An independent double-precision forward pass written from the documented flat layout (README "Learning"), used for
/// finite-difference gradient checks: it shares no code with DenseNetwork.
/// </summary>
internal static class DoubleReference
{
    public static double[] Forward(NetworkShape shape, double[] p, double[] x)
    {
        int h1 = shape.FirstLayerSize;
        double[] z = new double[h1];
        int offset = 0, input = 0;
        for (int m = 0; m < shape.BlockCount; m++)
        {
            int n = shape.InputBlocks[m];
            for (int o = 0; o < h1; o++)
            {
                for (int i = 0; i < n; i++)
                {
                    z[o] += p[offset + o * n + i] * x[input + i];
                }
            }
            offset += h1 * n;
            input += n;
        }
        for (int o = 0; o < h1; o++)
        {
            z[o] += p[offset + o];
        }
        offset += h1;
        double[] a = Act(shape, z);
        int layers = shape.HiddenSizes.Count + 1;
        for (int l = 1; l < layers; l++)
        {
            int nIn = a.Length;
            int nOut = l < shape.HiddenSizes.Count ? shape.HiddenSizes[l] : shape.OutputSize;
            double[] next = new double[nOut];
            for (int o = 0; o < nOut; o++)
            {
                double s = 0;
                for (int i = 0; i < nIn; i++)
                {
                    s += p[offset + o * nIn + i] * a[i];
                }
                next[o] = s + p[offset + nIn * nOut + o];
            }
            offset += nIn * nOut + nOut;
            a = l < layers - 1 ? Act(shape, next) : next;
        }
        Assert.Equal(p.Length, offset);
        return a;
    }

    /// <summary>Central finite differences of a scalar function of the parameters.</summary>
    public static double[] Gradient(double[] p, Func<double[], double> loss, double h = 1e-6)
    {
        double[] g = new double[p.Length];
        for (int i = 0; i < p.Length; i++)
        {
            double keep = p[i];
            p[i] = keep + h;
            double up = loss(p);
            p[i] = keep - h;
            double down = loss(p);
            p[i] = keep;
            g[i] = (up - down) / (2 * h);
        }
        return g;
    }

    public static double[] ToDouble(ReadOnlySpan<float> v)
    {
        double[] d = new double[v.Length];
        for (int i = 0; i < v.Length; i++)
        {
            d[i] = v[i];
        }
        return d;
    }

    /// <summary>max|a − b| / max|b|.</summary>
    public static double RelativeError(ReadOnlySpan<float> ours, ReadOnlySpan<double> reference)
    {
        double diff = 0, scale = 0;
        for (int i = 0; i < ours.Length; i++)
        {
            diff = Math.Max(diff, Math.Abs(ours[i] - reference[i]));
            scale = Math.Max(scale, Math.Abs(reference[i]));
        }
        Assert.True(scale > 0, "reference is identically zero");
        return diff / scale;
    }

    private static double[] Act(NetworkShape shape, double[] z) =>
        shape.HiddenActivation == Activation.Tanh ? z.Select(Math.Tanh).ToArray() : z.Select(v => Math.Max(0, v)).ToArray();
}
