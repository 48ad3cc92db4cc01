using System.Net;
using System.Net.Security;
using System.Security.Cryptography;
using System.Security.Cryptography.X509Certificates;

namespace FedGrid.Hosting;

/// <summary>
/// The certificates of one run, made with .NET's own certificate APIs: a scenario CA (ECDSA P-256, self-signed), a
/// server certificate for the coordinator (subject alternative names 127.0.0.1, ::1 and localhost, plus any given
/// names) and one client certificate per household whose common name is the household's id. Written to a folder as
/// <c>ca.crt</c> (PEM, public), <c>coordinator.pfx</c> and <c>&lt;id&gt;.pfx</c> (PKCS#12, no password: the folder
/// is the secret; give each machine only its own file).
/// </summary>
public static class ScenarioCertificates
{
    /// <summary>File name of the CA certificate.</summary>
    public const string CaFile = "ca.crt";

    /// <summary>File name of the coordinator's certificate and key.</summary>
    public const string CoordinatorFile = "coordinator.pfx";

    /// <summary>Creates the CA, the coordinator's and every household's certificate in <paramref name="folder"/>.</summary>
    /// <param name="folder">Target folder (created).</param>
    /// <param name="householdIds">Household ids.</param>
    /// <param name="serverNames">Extra DNS names of the coordinator.</param>
    public static void Create(string folder, IEnumerable<string> householdIds, IEnumerable<string>? serverNames = null)
    {
        ArgumentNullException.ThrowIfNull(householdIds);
        Directory.CreateDirectory(folder);
        using ECDsa caKey = ECDsa.Create(ECCurve.NamedCurves.nistP256);
        var caRequest = new CertificateRequest("CN=FedGrid scenario CA", caKey, HashAlgorithmName.SHA256);
        caRequest.CertificateExtensions.Add(new X509BasicConstraintsExtension(true, true, 0, true));
        caRequest.CertificateExtensions.Add(new X509KeyUsageExtension(X509KeyUsageFlags.KeyCertSign | X509KeyUsageFlags.CrlSign, true));
        caRequest.CertificateExtensions.Add(new X509SubjectKeyIdentifierExtension(caRequest.PublicKey, false));
        DateTimeOffset now = DateTimeOffset.UtcNow;
        using X509Certificate2 ca = caRequest.CreateSelfSigned(now.AddMinutes(-5), now.AddDays(30));
        File.WriteAllText(Path.Combine(folder, CaFile), ca.ExportCertificatePem());

        var san = new SubjectAlternativeNameBuilder();
        san.AddIpAddress(IPAddress.Loopback);
        san.AddIpAddress(IPAddress.IPv6Loopback);
        san.AddDnsName("localhost");
        foreach (string name in serverNames ?? [])
        {
            if (IPAddress.TryParse(name, out IPAddress? ip))
            {
                san.AddIpAddress(ip);
            }
            else
            {
                san.AddDnsName(name);
            }
        }
        Issue(ca, caKey, "CN=FedGrid coordinator", san.Build(), "1.3.6.1.5.5.7.3.1", Path.Combine(folder, CoordinatorFile));
        foreach (string id in householdIds)
        {
            Issue(ca, caKey, "CN=" + id, null, "1.3.6.1.5.5.7.3.2", HouseholdFile(folder, id));
        }
    }

    /// <summary>The certificate file of a household.</summary>
    /// <param name="folder">Folder.</param>
    /// <param name="householdId">Id.</param>
    /// <returns>The path.</returns>
    public static string HouseholdFile(string folder, string householdId) => Path.Combine(folder, householdId + ".pfx");

    /// <summary>Loads a certificate with its key.</summary>
    /// <param name="path">PKCS#12 file.</param>
    /// <returns>The certificate.</returns>
    public static X509Certificate2 Load(string path) => X509CertificateLoader.LoadPkcs12FromFile(path, null);

    /// <summary>Loads the CA certificate.</summary>
    /// <param name="folder">Folder.</param>
    /// <returns>The CA.</returns>
    public static X509Certificate2 LoadCa(string folder) => X509Certificate2.CreateFromPem(File.ReadAllText(Path.Combine(folder, CaFile)));

    /// <summary>Whether <paramref name="certificate"/> chains to <paramref name="ca"/> alone (no system roots, no revocation lists: a private scenario CA).</summary>
    /// <param name="certificate">Presented certificate.</param>
    /// <param name="ca">The scenario CA.</param>
    /// <param name="usageOid">Required extended key usage (server or client authentication).</param>
    /// <returns>True when valid.</returns>
    public static bool ChainsTo(X509Certificate2 certificate, X509Certificate2 ca, string usageOid)
    {
        ArgumentNullException.ThrowIfNull(certificate);
        ArgumentNullException.ThrowIfNull(ca);
        using var chain = new X509Chain();
        chain.ChainPolicy.TrustMode = X509ChainTrustMode.CustomRootTrust;
        chain.ChainPolicy.CustomTrustStore.Add(ca);
        chain.ChainPolicy.RevocationMode = X509RevocationMode.NoCheck;
        chain.ChainPolicy.ApplicationPolicy.Add(new Oid(usageOid));
        return chain.Build(certificate) && chain.ChainElements[^1].Certificate.RawDataMemory.Span.SequenceEqual(ca.RawDataMemory.Span);
    }

    /// <summary>Server authentication usage.</summary>
    public const string ServerAuth = "1.3.6.1.5.5.7.3.1";

    /// <summary>Client authentication usage.</summary>
    public const string ClientAuth = "1.3.6.1.5.5.7.3.2";

    /// <summary>The household id a client certificate names (its common name), or null.</summary>
    /// <param name="certificate">The certificate.</param>
    /// <returns>The id.</returns>
    public static string? HouseholdId(X509Certificate2? certificate) => certificate?.GetNameInfo(X509NameType.SimpleName, false);

    /// <summary>A TLS validation callback that accepts only the coordinator certificate of the scenario CA.</summary>
    /// <param name="ca">The scenario CA.</param>
    /// <returns>The callback.</returns>
    public static RemoteCertificateValidationCallback ServerValidator(X509Certificate2 ca) => (_, cert, _, errors) =>
        cert is X509Certificate2 c && ChainsTo(c, ca, ServerAuth) && (errors & SslPolicyErrors.RemoteCertificateNameMismatch) == 0;

    private static void Issue(X509Certificate2 ca, ECDsa caKey, string subject, X509Extension? san, string usage, string path)
    {
        using ECDsa key = ECDsa.Create(ECCurve.NamedCurves.nistP256);
        var request = new CertificateRequest(subject, key, HashAlgorithmName.SHA256);
        request.CertificateExtensions.Add(new X509BasicConstraintsExtension(false, false, 0, true));
        request.CertificateExtensions.Add(new X509KeyUsageExtension(X509KeyUsageFlags.DigitalSignature, true));
        request.CertificateExtensions.Add(new X509EnhancedKeyUsageExtension([new Oid(usage)], false));
        if (san is not null)
        {
            request.CertificateExtensions.Add(san);
        }
        byte[] serial = RandomNumberGenerator.GetBytes(16);
        serial[0] &= 0x7F;
        using X509Certificate2 issued = request.Create(ca.SubjectName, X509SignatureGenerator.CreateForECDsa(caKey), ca.NotBefore, ca.NotAfter, serial);
        using X509Certificate2 withKey = issued.CopyWithPrivateKey(key);
        File.WriteAllBytes(path, withKey.Export(X509ContentType.Pkcs12));
    }
}
