namespace FedGrid.Federation.Privacy;

/// <summary>
/// The complementary error function on the whole real line, in logarithms so that the far tail (erfc(30) ≈ 1e-393)
/// stays representable. Below x = 2: erfc = 1 − erf with the everywhere-positive series
/// erf(x) = (2/√π) e^{−x²} Σ_n 2^n x^{2n+1} / (1·3·…·(2n+1)); from x = 2 on: the Laplace continued fraction
/// erfc(x) = (e^{−x²}/√π) · 1/(x + (1/2)/(x + 1/(x + (3/2)/(x + …)))) evaluated by the modified Lentz method;
/// negative x through erfc(−x) = 2 − erfc(x). Relative accuracy about 1e-14 (checked against SciPy).
/// </summary>
public static class SpecialFunctions
{
    private const double LogSqrtPi = 0.57236494292470008707; // ½ log π

    /// <summary>erfc(x).</summary>
    /// <param name="x">Argument.</param>
    /// <returns>erfc(x) (underflows to 0 beyond x ≈ 27).</returns>
    public static double Erfc(double x) => Math.Exp(LogErfc(x));

    /// <summary>log erfc(x).</summary>
    /// <param name="x">Argument (NaN gives NaN).</param>
    /// <returns>log erfc(x).</returns>
    public static double LogErfc(double x)
    {
        if (double.IsNaN(x))
        {
            return double.NaN;
        }
        if (x < 0)
        {
            return Math.Log(2 - Math.Exp(LogErfc(-x)));
        }
        if (x < 2)
        {
            return Math.Log(1 - Erf(x));
        }
        if (double.IsPositiveInfinity(x))
        {
            return double.NegativeInfinity;
        }
        return -x * x - LogSqrtPi + Math.Log(ContinuedFraction(x));
    }

    private static double Erf(double x)
    {
        double term = x, sum = x, twoX2 = 2 * x * x;
        for (int n = 1; n < 200; n++)
        {
            term *= twoX2 / (2 * n + 1);
            sum += term;
            if (term < sum * 1e-17)
            {
                break;
            }
        }
        return 2 / Math.Sqrt(Math.PI) * Math.Exp(-x * x) * sum;
    }

    /// <summary>1/(x + a₂/(x + a₃/(x + …))) with a_n = (n − 1)/2, by the modified Lentz method.</summary>
    private static double ContinuedFraction(double x)
    {
        const double tiny = 1e-300;
        double f = tiny, c = f, d = 0;
        for (int n = 1; n < 5000; n++)
        {
            double a = n == 1 ? 1 : (n - 1) / 2.0;
            d = x + a * d;
            d = d == 0 ? tiny : 1 / d;
            c = x + a / c;
            if (c == 0)
            {
                c = tiny;
            }
            double delta = c * d;
            f *= delta;
            if (Math.Abs(delta - 1) < 1e-16)
            {
                break;
            }
        }
        return f;
    }
}
